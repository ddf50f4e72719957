package store

import (
	"context"
	"testing"
)

// TestBudgetSizesBadger: a memory budget reaches Badger's options, and
// the split adds up (issue 12: serve ran with Badger's defaults, five
// memtables of 256 MiB and a 256 MiB block cache, whatever its limit).
func TestBudgetSizesBadger(t *testing.T) {
	for _, budget := range []int64{MinMemoryBudget, 512 << 20, DefaultMemoryBudget, 4 << 30} {
		sz, err := SizeFor(budget)
		if err != nil {
			t.Fatal(err)
		}
		// Each part within the budget, and the heap's share the larger.
		if sz.GoMemLimit <= 0 || sz.Mapped+sz.GoMemLimit != budget || sz.GoMemLimit < budget/2 {
			t.Errorf("budget %s: heap %d + mapped %d", FormatBytes(budget), sz.GoMemLimit, sz.Mapped)
		}
		peak := int64(float64(sz.NumMemtables)*arenaFactor*float64(sz.MemTableSize)) + sz.BlockCacheSize + sz.IndexCacheSize
		if peak > sz.GoMemLimit/2 {
			t.Errorf("budget %s: memtable arenas and caches %d take over half the heap's share %d", FormatBytes(budget), peak, sz.GoMemLimit)
		}
		o := DefaultOptions()
		o.MemoryBudget = budget
		st, err := Open(context.Background(), t.TempDir(), o)
		if err != nil {
			t.Fatal(err)
		}
		bo := st.DB().Opts()
		if bo.MemTableSize != sz.MemTableSize || bo.NumMemtables != sz.NumMemtables || bo.BlockCacheSize != sz.BlockCacheSize ||
			bo.IndexCacheSize != sz.IndexCacheSize || bo.ValueLogFileSize != sz.ValueLogFileSize || bo.NumLevelZeroTables != sz.NumLevelZeroTables {
			t.Errorf("budget %s: Badger runs with memtable %d ×%d, block cache %d, index cache %d, value log %d, L0 %d; sizing %+v",
				FormatBytes(budget), bo.MemTableSize, bo.NumMemtables, bo.BlockCacheSize, bo.IndexCacheSize, bo.ValueLogFileSize, bo.NumLevelZeroTables, sz)
		}
		st.Close()
	}
	if _, err := SizeFor(MinMemoryBudget - 1); err == nil {
		t.Error("a budget under the minimum was accepted")
	}
	// The deprecated memtable override wins, and is refused when it
	// would crowd out the heap.
	o := Options{MemoryBudget: DefaultMemoryBudget, MemTableSize: 8 << 20}
	if sz, err := o.Sizing(); err != nil || sz.MemTableSize != 8<<20 {
		t.Errorf("MemTableSize 8 MiB: %+v, %v", sz, err)
	}
	o.MemTableSize = 256 << 20
	if _, err := o.Sizing(); err == nil {
		t.Error("a 256 MiB memtable within a 1 GiB budget was accepted")
	}
}

func TestParseBytes(t *testing.T) {
	for _, tc := range []struct {
		in   string
		want int64
	}{
		{"1GiB", 1 << 30}, {"512MiB", 512 << 20}, {"2G", 2 << 30}, {"900M", 900 << 20}, {"64mb", 64 << 20},
		{"1073741824", 1 << 30}, {" 3 GiB ", 3 << 30}, {"10KiB", 10 << 10}, {"1T", 1 << 40}, {"100B", 100},
	} {
		got, err := ParseBytes(tc.in)
		if err != nil || got != tc.want {
			t.Errorf("ParseBytes(%q) = %d, %v; want %d", tc.in, got, err, tc.want)
		}
		if back, err := ParseBytes(FormatBytes(tc.want)); err != nil || back != tc.want {
			t.Errorf("FormatBytes(%d) = %q reads back as %d, %v", tc.want, FormatBytes(tc.want), back, err)
		}
	}
	for _, bad := range []string{"", "GiB", "-1G", "1.5G", "one gig", "1X", "9999999999T"} {
		if n, err := ParseBytes(bad); err == nil {
			t.Errorf("ParseBytes(%q) = %d, want an error", bad, n)
		}
	}
}
