package stream

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"sort"
	"strconv"

	"github.com/nats-io/nats.go/jetstream"
)

// ErrNoSnapshot reports an object store without any snapshot.
var ErrNoSnapshot = errors.New("stream: no snapshot")

// SnapshotBucket is the NATS object store bucket holding store snapshots.
func (o BusOptions) SnapshotBucket() string { return o.Stream + "_SNAPSHOTS" }

// SnapshotInfo describes a stored snapshot.
type SnapshotInfo struct {
	Name string
	Seq  uint64 // the stream sequence the snapshot's state includes
	// SHA256 is the hex SHA-256 of the snapshot's bytes, recorded after
	// writing it ("" for a snapshot without one, which is never restored).
	SHA256 string
	Bytes  uint64
}

func (b *Bus) snapshotStore(ctx context.Context) (jetstream.ObjectStore, error) {
	os, err := b.js.CreateOrUpdateObjectStore(ctx, jetstream.ObjectStoreConfig{
		Bucket:      b.opts.SnapshotBucket(),
		Description: "waymark store snapshots; a new replica starts from the newest",
		Storage:     jetstream.FileStorage,
		Replicas:    b.opts.Replicas,
	})
	if err != nil {
		return nil, fmt.Errorf("snapshot bucket: %w", err)
	}
	return os, nil
}

// PutSnapshot stores a snapshot of the state after stream sequence seq.
func (b *Bus) PutSnapshot(ctx context.Context, seq uint64, r io.Reader) (SnapshotInfo, error) {
	os, err := b.snapshotStore(ctx)
	if err != nil {
		return SnapshotInfo{}, err
	}
	name := fmt.Sprintf("snapshot-%020d", seq)
	h := sha256.New()
	meta := jetstream.ObjectMeta{
		Name:     name,
		Metadata: map[string]string{"seq": strconv.FormatUint(seq, 10)},
	}
	info, err := os.Put(ctx, meta, io.TeeReader(r, h))
	if err != nil {
		return SnapshotInfo{}, fmt.Errorf("put snapshot: %w", err)
	}
	// The checksum is known once the whole snapshot has streamed through;
	// a snapshot without one is never restored.
	sum := hex.EncodeToString(h.Sum(nil))
	meta.Metadata[snapshotSumKey] = sum
	if err := os.UpdateMeta(ctx, name, meta); err != nil {
		return SnapshotInfo{}, fmt.Errorf("put snapshot checksum: %w", err)
	}
	return SnapshotInfo{Name: name, Seq: seq, Bytes: info.Size, SHA256: sum}, nil
}

// snapshotSumKey is the metadata key of a snapshot's SHA-256, hex.
const snapshotSumKey = "sha256"

// Snapshots lists the stored snapshots, newest (highest sequence) first.
func (b *Bus) Snapshots(ctx context.Context) ([]SnapshotInfo, error) {
	os, err := b.snapshotStore(ctx)
	if err != nil {
		return nil, err
	}
	list, err := os.List(ctx)
	if errors.Is(err, jetstream.ErrNoObjectsFound) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("list snapshots: %w", err)
	}
	var out []SnapshotInfo
	for _, o := range list {
		seq, err := strconv.ParseUint(o.Metadata["seq"], 10, 64)
		if err != nil || o.Deleted {
			continue
		}
		out = append(out, SnapshotInfo{Name: o.Name, Seq: seq, Bytes: o.Size, SHA256: o.Metadata[snapshotSumKey]})
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Seq > out[j].Seq })
	return out, nil
}

// OpenSnapshot opens a stored snapshot by name. The caller closes it.
func (b *Bus) OpenSnapshot(ctx context.Context, name string) (io.ReadCloser, error) {
	os, err := b.snapshotStore(ctx)
	if err != nil {
		return nil, err
	}
	r, err := os.Get(ctx, name)
	if err != nil {
		return nil, fmt.Errorf("get snapshot %s: %w", name, err)
	}
	return r, nil
}

// LatestSnapshot opens the snapshot with the highest sequence. The caller
// closes the reader.
func (b *Bus) LatestSnapshot(ctx context.Context) (SnapshotInfo, io.ReadCloser, error) {
	os, err := b.snapshotStore(ctx)
	if err != nil {
		return SnapshotInfo{}, nil, err
	}
	list, err := os.List(ctx)
	if errors.Is(err, jetstream.ErrNoObjectsFound) {
		return SnapshotInfo{}, nil, ErrNoSnapshot
	}
	if err != nil {
		return SnapshotInfo{}, nil, fmt.Errorf("list snapshots: %w", err)
	}
	var best SnapshotInfo
	found := false
	for _, o := range list {
		seq, err := strconv.ParseUint(o.Metadata["seq"], 10, 64)
		if err != nil || o.Deleted {
			continue
		}
		if !found || seq > best.Seq {
			best, found = SnapshotInfo{Name: o.Name, Seq: seq, Bytes: o.Size}, true
		}
	}
	if !found {
		return SnapshotInfo{}, nil, ErrNoSnapshot
	}
	res, err := os.Get(ctx, best.Name)
	if err != nil {
		return SnapshotInfo{}, nil, fmt.Errorf("get snapshot %s: %w", best.Name, err)
	}
	return best, res, nil
}
