package store

import (
	"bytes"
	"context"
	"errors"
	"testing"
)

func newTestStore(t testing.TB) *Store {
	t.Helper()
	st, err := Open(context.Background(), t.TempDir(), DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	return st
}

// TestDictCheckpointAndSnapshot: the dictionary and checkpoint survive a
// commit and a reload, a batch commits atomically, and a snapshot restores
// into an empty store only, with a new replica identity.
func TestDictCheckpointAndSnapshot(t *testing.T) {
	ctx := context.Background()
	st := newTestStore(t)
	d := NewDict("d/i/")
	for _, s := range []string{"tent", "stove", "tent", "mug"} {
		d.Intern(s)
	}
	b := new(Batch)
	if err := d.Flush(b); err != nil {
		t.Fatal(err)
	}
	cp := Checkpoint{Seq: 42, Applied: 40, Rejected: 2, DecayRef: 1767225600000}
	if err := PutCheckpoint(b, cp); err != nil {
		t.Fatal(err)
	}
	if err := st.CommitBatch(b); err != nil {
		t.Fatal(err)
	}
	got, err := st.LoadDict(ctx, "d/i/")
	if err != nil {
		t.Fatal(err)
	}
	if got.Len() != 3 || got.Name(1) != "stove" {
		t.Fatalf("dictionary after reload: %d ids, id 1 = %q", got.Len(), got.Name(1))
	}
	if id, ok := got.Lookup("mug"); !ok || id != 2 {
		t.Fatalf("mug = %d, %v", id, ok)
	}
	if c, err := st.Checkpoint(); err != nil || c != cp {
		t.Fatalf("checkpoint %+v, %v; want %+v", c, err, cp)
	}
	// Only new ids are written by the next flush.
	b = new(Batch)
	d.Intern("lantern")
	_ = d.Flush(b)
	if b.Len() != 1 {
		t.Fatalf("second flush wrote %d entries, want 1", b.Len())
	}
	rid, err := st.ReplicaID(func() string { return "abc" })
	if err != nil || rid != "abc" {
		t.Fatalf("replica id %q, %v", rid, err)
	}
	var snap bytes.Buffer
	if err := st.Backup(&snap); err != nil {
		t.Fatal(err)
	}
	if err := st.Restore(ctx, bytes.NewReader(snap.Bytes())); !errors.Is(err, ErrNotEmpty) {
		t.Fatalf("restore into a full store: %v, want ErrNotEmpty", err)
	}
	fresh := newTestStore(t)
	if err := fresh.Restore(ctx, bytes.NewReader(snap.Bytes())); err != nil {
		t.Fatal(err)
	}
	if c, _ := fresh.Checkpoint(); c != cp {
		t.Fatalf("restored checkpoint %+v", c)
	}
	if rid, _ := fresh.ReplicaID(func() string { return "new" }); rid != "new" {
		t.Fatalf("a restored store kept the source's replica id %q", rid)
	}
}
