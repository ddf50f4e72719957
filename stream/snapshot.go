package stream

import (
	"context"
	"errors"
	"fmt"
	"io"
	"strconv"

	"github.com/nats-io/nats.go/jetstream"
)

// ErrNoSnapshot reports an object store without any snapshot.
var ErrNoSnapshot = errors.New("stream: no snapshot")

// SnapshotBucket is the NATS object store bucket holding store snapshots.
func (o BusOptions) SnapshotBucket() string { return o.Stream + "_SNAPSHOTS" }

// SnapshotInfo describes a stored snapshot.
type SnapshotInfo struct {
	Name  string
	Seq   uint64 // the stream sequence the snapshot's state includes
	Bytes uint64
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
	info, err := os.Put(ctx, jetstream.ObjectMeta{
		Name:     name,
		Metadata: map[string]string{"seq": strconv.FormatUint(seq, 10)},
	}, r)
	if err != nil {
		return SnapshotInfo{}, fmt.Errorf("put snapshot: %w", err)
	}
	return SnapshotInfo{Name: name, Seq: seq, Bytes: info.Size}, nil
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
