package models

import (
	"errors"
	"strings"
	"testing"
	"unicode/utf8"
)

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

// TestCatalogTitles checks that a record's title survives a Flush and Load
// beside its categories, that a long title is cut at a character boundary,
// that an entry written before titles were kept still loads, and that a
// damaged title is refused as corrupt rather than loaded.
func TestCatalogTitles(t *testing.T) {
	long := strings.Repeat("é", 100) // 200 bytes, two per character
	c := NewCatalog()
	c.SetPrefix("c/")
	c.ObserveItem(&ItemInfo{Item: 1, Available: true, Attrs: map[string][]string{"title": {"Steel", "spade"}, "category": {"garden/tools"}}})
	c.ObserveItem(&ItemInfo{Item: 2, Available: true, Attrs: map[string][]string{"title": {long}}})
	c.ObserveItem(&ItemInfo{Item: 3, Available: false})
	kv := newMemKV()
	if err := c.Flush(kv); err != nil {
		t.Fatal(err)
	}
	// An entry in the layout before titles: state byte, then one category.
	kv.m["c/\x00\x00\x00\x04"] = append([]byte{stateAvailable, 5}, "tents"...)
	n := NewCatalog()
	n.SetPrefix("c/")
	if err := kv.scan("c/", n.Load); err != nil {
		t.Fatal(err)
	}
	if got := n.Title(1); got != "Steel spade" {
		t.Errorf("title of 1: %q", got)
	}
	if got := n.Categories(1); len(got) != 1 || got[0] != "garden/tools" {
		t.Errorf("categories of 1 after load: %q", got)
	}
	got2 := n.Title(2)
	if !utf8.ValidString(got2) || len(got2) > maxTitleBytes+len("…") || !strings.HasSuffix(got2, "…") {
		t.Errorf("long title kept as %q (%d bytes)", got2, len(got2))
	}
	if n.Title(3) != "" || n.Available(3) {
		t.Errorf("item 3: title %q, available %v", n.Title(3), n.Available(3))
	}
	if n.Title(4) != "" || len(n.Categories(4)) != 1 || !n.Available(4) {
		t.Errorf("old-layout entry: title %q, categories %q", n.Title(4), n.Categories(4))
	}
	if n.Title(99) != "" {
		t.Error("unknown item has a title")
	}
	bad := NewCatalog()
	bad.SetPrefix("c/")
	if err := bad.Load([]byte("c/\x00\x00\x00\x05"), []byte{stateAvailable | hasTitle}); !errors.Is(err, ErrCorrupt) {
		t.Errorf("title flag with no title: err %v, want ErrCorrupt", err)
	}
}
