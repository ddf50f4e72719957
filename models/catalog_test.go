package models

import "testing"

// TestCatalogAllAvailable checks the count behind AllAvailable against
// Available asked of every item, through records that mark items
// unavailable, available again, repeat a state, and a Flush and Load into a
// fresh catalogue: a query skips the availability check only while no item
// is unavailable, so the count must never miss one.
func TestCatalogAllAvailable(t *testing.T) {
	steps := []struct {
		item      ItemID
		available bool
	}{
		{3, true},   // a record that changes nothing about availability
		{5, false},  // one unavailable
		{5, false},  // the same again: still one
		{9, false},  // two
		{5, true},   // back to one
		{9, true},   // none
		{12, false}, // one, past the end of the state so far
	}
	check := func(c *Catalog, label string) {
		t.Helper()
		want := true
		for id := range ItemID(20) {
			want = want && c.Available(id)
		}
		if got := c.AllAvailable(); got != want {
			t.Fatalf("%s: AllAvailable %v, Available of every item says %v", label, got, want)
		}
	}
	c := NewCatalog()
	check(c, "empty")
	for i, s := range steps {
		c.ObserveItem(&ItemInfo{Item: s.item, Available: s.available})
		check(c, "after record "+string(rune('1'+i)))
	}
	if c.AllAvailable() {
		t.Fatal("item 12 is unavailable, yet AllAvailable")
	}
	kv := newMemKV()
	c.SetPrefix("c/")
	if err := c.Flush(kv); err != nil {
		t.Fatal(err)
	}
	n := NewCatalog()
	n.SetPrefix("c/")
	if err := kv.scan("c/", n.Load); err != nil {
		t.Fatal(err)
	}
	check(n, "after Flush and Load")
	if n.AllAvailable() {
		t.Fatal("loaded: item 12 is unavailable, yet AllAvailable")
	}
	n.ObserveItem(&ItemInfo{Item: 12, Available: true})
	check(n, "loaded, item 12 available again")
}
