package main

import (
	"bytes"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"
)

func smallOptions(seed uint64) Options {
	o := DefaultOptions()
	o.Seed, o.Days, o.Items, o.LaunchesPerDay = seed, 3, 300, 10
	o.SessionsPerDay, o.BSessionsPerDay, o.BOpen, o.BLocal = 200, 300, 36*time.Hour, 12
	return o
}

func TestGenerateInvariants(t *testing.T) {
	o := smallOptions(7)
	s, err := Generate(o)
	if err != nil {
		t.Fatal(err)
	}
	open := [2]int64{o.Start.UnixMilli(), o.Start.Add(o.BOpen).UnixMilli()}
	end := o.Start.Add(time.Duration(o.Days) * 24 * time.Hour).UnixMilli()
	for no := range 2 {
		t.Run([]string{"site-a", "site-b"}[no], func(t *testing.T) {
			published := map[string]int64{}
			launched := 0
			for _, r := range s.Catalog[no] {
				if _, dup := published[r.Item]; dup {
					t.Fatalf("item %s has two records", r.Item)
				}
				if err := r.Validate(); err != nil {
					t.Fatalf("record %s: %v", r.Item, err)
				}
				published[r.Item] = r.Published
				if r.Published < open[no] {
					t.Fatalf("record %s published %d before the site opens at %d", r.Item, r.Published, open[no])
				}
				if r.Published > open[no] {
					launched++
				}
			}
			if no == 0 && launched != o.Days*o.LaunchesPerDay {
				t.Errorf("site a: %d items launched after opening, want %d", launched, o.Days*o.LaunchesPerDay)
			}
			if launched == 0 {
				t.Errorf("no item launched mid-stream")
			}
			evs := s.Events[no]
			if len(evs) < 100 {
				t.Fatalf("only %d events", len(evs))
			}
			clickedFresh := 0
			for i, ev := range evs {
				if err := ev.Validate(); err != nil {
					t.Fatalf("event %d: %v", i, err)
				}
				if i > 0 && ev.TS < evs[i-1].TS {
					t.Fatalf("event %d goes back in time", i)
				}
				if ev.TS < open[no] || ev.TS >= end {
					t.Fatalf("event %d at %d outside the site's span [%d, %d)", i, ev.TS, open[no], end)
				}
				p, ok := published[ev.Item]
				if !ok {
					t.Fatalf("event %d clicks %s, which has no record on this site", i, ev.Item)
				}
				if p > ev.TS {
					t.Fatalf("event %d clicks %s before its record is published", i, ev.Item)
				}
				if p > open[no] {
					clickedFresh++
				}
			}
			if clickedFresh == 0 {
				t.Errorf("no click on an item launched mid-stream")
			}
		})
	}
	t.Run("idmap", func(t *testing.T) {
		inA, inB := map[string]bool{}, map[string]bool{}
		for _, r := range s.Catalog[0] {
			inA[r.Item] = true
		}
		for _, r := range s.Catalog[1] {
			inB[r.Item] = true
		}
		to := map[string]bool{}
		for _, p := range s.IDMap {
			if !inA[p[0]] || !inB[p[1]] {
				t.Fatalf("map %s -> %s: not an item of both sites", p[0], p[1])
			}
			if to[p[1]] {
				t.Fatalf("map: %s is the image of two items", p[1])
			}
			to[p[1]] = true
		}
		local := len(inB) - len(to)
		if local < o.BLocal {
			t.Errorf("second site: %d unmapped items, want at least the %d local ones", local, o.BLocal)
		}
		share := float64(len(s.IDMap)) / float64(len(inA))
		if share < o.BShare-0.1 || share > o.BShare+0.1 {
			t.Errorf("mapped share %.2f, want about %.2f", share, o.BShare)
		}
	})
}

func TestGenerateDeterministic(t *testing.T) {
	write := func(seed uint64) map[string][]byte {
		s, err := Generate(smallOptions(seed))
		if err != nil {
			t.Fatal(err)
		}
		dir := t.TempDir()
		if _, err := s.Write(dir); err != nil {
			t.Fatal(err)
		}
		files := map[string][]byte{}
		names, _ := filepath.Glob(filepath.Join(dir, "*"))
		for _, n := range names {
			b, err := os.ReadFile(n)
			if err != nil {
				t.Fatal(err)
			}
			files[filepath.Base(n)] = b
		}
		return files
	}
	a, b, c := write(3), write(3), write(4)
	want := []string{"idmap.csv", "scenario.json", "site-a.catalog.jsonl", "site-a.events.jsonl.gz", "site-b.catalog.jsonl", "site-b.events.jsonl.gz"}
	var got []string
	for n := range a {
		got = append(got, n)
	}
	slices.Sort(got)
	if !slices.Equal(got, want) {
		t.Fatalf("files %v, want %v", got, want)
	}
	for _, n := range want {
		if !bytes.Equal(a[n], b[n]) {
			t.Errorf("%s differs between two runs with the same seed", n)
		}
	}
	if bytes.Equal(a["site-a.events.jsonl.gz"], c["site-a.events.jsonl.gz"]) {
		t.Errorf("seeds 3 and 4 wrote the same events")
	}
}

func TestOptionsValidate(t *testing.T) {
	cases := []struct {
		name  string
		edit  func(*Options)
		field string
	}{
		{"share above 1", func(o *Options) { o.BShare = 1.5 }, "BShare"},
		{"second site after the end", func(o *Options) { o.BOpen = 20 * 24 * time.Hour }, "BOpen"},
		{"fewer items than categories", func(o *Options) { o.Items = 5 }, "Items"},
		{"negative launches", func(o *Options) { o.LaunchesPerDay = -1 }, "LaunchesPerDay"},
		{"negative noise", func(o *Options) { o.BNoise = -0.1 }, "BNoise"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			o := DefaultOptions()
			c.edit(&o)
			_, err := Generate(o)
			if err == nil || !strings.Contains(err.Error(), c.field) {
				t.Fatalf("error %v, want one naming %s", err, c.field)
			}
		})
	}
}
