package store

import (
	"context"
	"encoding/binary"
	"fmt"
)

// Dict interns string ids to dense uint32s in arrival order. The vocabulary
// grows with the catalogue: no hash space to size, nothing to retrain when a
// new id arrives. It is not safe for concurrent use; its owner locks.
type Dict struct {
	ids     map[string]uint32
	names   []string
	flushed int // names[:flushed] are in the store
	prefix  string
}

// NewDict returns an empty dictionary stored under prefix (for example
// "d/i/" for items).
func NewDict(prefix string) *Dict {
	return &Dict{ids: make(map[string]uint32), prefix: prefix}
}

// Intern returns s's id, adding s if it is new; added reports that.
func (d *Dict) Intern(s string) (id uint32, added bool) {
	if id, ok := d.ids[s]; ok {
		return id, false
	}
	id = uint32(len(d.names))
	d.ids[s] = id
	d.names = append(d.names, s)
	return id, true
}

// Lookup returns s's id without adding it.
func (d *Dict) Lookup(s string) (uint32, bool) {
	id, ok := d.ids[s]
	return id, ok
}

// Name returns the string of id, or "" for an id never issued.
func (d *Dict) Name(id uint32) string {
	if int(id) >= len(d.names) {
		return ""
	}
	return d.names[id]
}

// Len returns the number of ids issued.
func (d *Dict) Len() int { return len(d.names) }

// Flush writes the ids added since the last flush.
func (d *Dict) Flush(tx KV) error {
	for id := d.flushed; id < len(d.names); id++ {
		key := binary.BigEndian.AppendUint32([]byte(d.prefix), uint32(id))
		if err := tx.Set(key, []byte(d.names[id])); err != nil {
			return fmt.Errorf("flush dictionary: %w", err)
		}
	}
	d.flushed = len(d.names)
	return nil
}

// KV receives writes; *Txn implements it.
type KV interface {
	Set(key, val []byte) error
	Delete(key []byte) error
}

// LoadDict reads the dictionary stored under prefix. Ids must be dense.
func (s *Store) LoadDict(ctx context.Context, prefix string) (*Dict, error) {
	d := NewDict(prefix)
	err := s.Scan(ctx, []byte(prefix), func(key, val []byte) error {
		k := key[len(prefix):]
		if len(k) != 4 {
			return fmt.Errorf("%w: dictionary key %x", ErrCorrupt, key)
		}
		id := binary.BigEndian.Uint32(k)
		if int(id) != len(d.names) {
			return fmt.Errorf("%w: dictionary id %d after %d entries", ErrCorrupt, id, len(d.names))
		}
		name := string(val)
		d.ids[name] = id
		d.names = append(d.names, name)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("load dictionary %q: %w", prefix, err)
	}
	d.flushed = len(d.names)
	return d, nil
}
