package models

import (
	"encoding/binary"
	"errors"
	"math"
	"testing"
)

// TestLoadBoundsItemIDs: a stored entry of a core model whose item id is
// at or above the dictionary's size is corrupt (issue 12: pairTable.load
// took a key of ff ff ff ff and would grow its rows toward four billion
// ids). Each core model refuses it with ErrCorrupt, for a row's own id as
// for a neighbour's, and accepts ids below the bound while reporting the
// largest it met.
func TestLoadBoundsItemIDs(t *testing.T) {
	u32 := func(v uint32) []byte { return binary.BigEndian.AppendUint32(nil, v) }
	pair := func(b uint32, w float64) []byte {
		return binary.BigEndian.AppendUint64(u32(b), math.Float64bits(w))
	}
	f64 := func(w float64) []byte { return binary.BigEndian.AppendUint64(nil, math.Float64bits(w)) }
	const bound = 10
	cases := []struct {
		spec, sub string // sub: the key part after the model's prefix, before the id
		val       func(nb uint32) []byte
		rows      bool // the value holds neighbour ids
	}{
		{"pop", "", func(uint32) []byte { return f64(1) }, false},
		{"markov", "", func(nb uint32) []byte { return pair(nb, 1) }, true},
		{"sr", "", func(nb uint32) []byte { return pair(nb, 1) }, true},
		{"iknn", "c/", func(nb uint32) []byte { return pair(nb, 1) }, true},
		{"iknn", "n/", func(uint32) []byte { return f64(1) }, false},
	}
	for _, c := range cases {
		t.Run(c.spec+"/"+c.sub, func(t *testing.T) {
			m, err := NewSet(DefaultSetOptions()).Get(c.spec)
			if err != nil {
				t.Fatal(err)
			}
			pm := m.(Persistent)
			pm.SetPrefix("m/" + c.spec + "/")
			b, ok := m.(ItemBounded)
			if !ok {
				t.Fatalf("%s does not bound the ids it loads", c.spec)
			}
			b.LoadBound(bound)
			key := func(id uint32) []byte { return append([]byte(pm.Prefix()+c.sub), u32(id)...) }
			if err := pm.Load(key(0xffffffff), c.val(1)); !errors.Is(err, ErrCorrupt) {
				t.Fatalf("key ff ff ff ff: %v, want ErrCorrupt", err)
			}
			if err := pm.Load(key(bound), c.val(1)); !errors.Is(err, ErrCorrupt) {
				t.Fatalf("id %d with %d items: %v, want ErrCorrupt", bound, bound, err)
			}
			if c.rows {
				if err := pm.Load(key(1), c.val(bound)); !errors.Is(err, ErrCorrupt) {
					t.Fatalf("neighbour id %d with %d items: %v, want ErrCorrupt", bound, bound, err)
				}
			}
			if err := pm.Load(key(bound-1), c.val(2)); err != nil {
				t.Fatalf("id %d with %d items: %v", bound-1, bound, err)
			}
			if got := b.LoadedItems(); got != bound {
				t.Fatalf("LoadedItems = %d after loading id %d, want %d", got, bound-1, bound)
			}
		})
	}
}
