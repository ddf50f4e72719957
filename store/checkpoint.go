package store

import (
	"encoding/json"
	"errors"
	"fmt"
)

// Checkpoint is where the stored state stands in the stream. It is written
// in the same transaction as the counts it describes.
type Checkpoint struct {
	// Seq is the last applied stream sequence; the consumer resumes at Seq+1.
	Seq uint64 `json:"seq"`
	// Applied and Rejected count events since the store was created.
	// Rejected counts click events only; stores written before catalogue
	// and control messages were counted apart include those in it.
	Applied  uint64 `json:"applied"`
	Rejected uint64 `json:"rejected"`
	// RejectedCatalog and RejectedControl count rejected catalogue records
	// and control messages.
	RejectedCatalog uint64 `json:"rejected_catalog,omitempty"`
	RejectedControl uint64 `json:"rejected_control,omitempty"`
	// Catalog counts applied catalogue records.
	Catalog uint64 `json:"catalog,omitempty"`
	// Overflow counts events and records on new items that arrived while
	// the item dictionary was full; they are applied as no-ops.
	Overflow uint64 `json:"overflow,omitempty"`
	// DecayRef is the landmark reference time of the decayed counts (unix ms).
	DecayRef int64 `json:"decay_ref"`
	// Watermark is the latest event time applied (unix ms).
	Watermark int64 `json:"watermark"`
	// Sessions counts session instances started, for numbering them.
	Sessions uint64 `json:"sessions"`
	// Touches counts session updates, the order of the session LRU.
	Touches uint64 `json:"touches"`
	// Config fingerprints the model configuration the counts were made with.
	Config string `json:"config,omitempty"`
	// Stream identifies the events stream the state was learned from (its
	// creation time), so a re-created stream is told from the old one.
	Stream string `json:"stream,omitempty"`
	// Items is the size of the item dictionary the state holds, checked
	// against the dictionary loaded.
	Items uint64 `json:"items,omitempty"`
}

var checkpointKey = []byte("x/checkpoint")
var replicaKey = []byte("x/replica")

// PutCheckpoint writes cp into kv (a transaction or a batch).
func PutCheckpoint(kv KV, cp Checkpoint) error {
	b, err := json.Marshal(cp)
	if err != nil {
		return fmt.Errorf("encode checkpoint: %w", err)
	}
	return kv.Set(checkpointKey, b)
}

// Checkpoint reads the stored checkpoint; a new store gives the zero value.
func (s *Store) Checkpoint() (Checkpoint, error) {
	var cp Checkpoint
	b, err := s.Get(checkpointKey)
	if errors.Is(err, ErrNotFound) {
		return cp, nil
	}
	if err != nil {
		return cp, err
	}
	if err := json.Unmarshal(b, &cp); err != nil {
		return cp, fmt.Errorf("%w: checkpoint: %v", ErrCorrupt, err)
	}
	return cp, nil
}

// ReplicaID returns the store's random identity, creating it on first use.
// Each data folder is its own replica with its own durable consumer, so two
// services never share, or steal, each other's messages.
func (s *Store) ReplicaID(newID func() string) (string, error) {
	b, err := s.Get(replicaKey)
	if err == nil {
		return string(b), nil
	}
	if !errors.Is(err, ErrNotFound) {
		return "", err
	}
	id := newID()
	if err := s.Commit(func(tx *Txn) error { return tx.Set(replicaKey, []byte(id)) }); err != nil {
		return "", fmt.Errorf("store replica id: %w", err)
	}
	return id, nil
}
