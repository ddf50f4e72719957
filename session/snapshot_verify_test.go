package session

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"log/slog"
	"math/rand/v2"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"
)

// TestBootstrapSkipsBadSnapshots: snapshots newer than the genuine one are
// planted in the bucket (issue 12, finding 7: before, a random object with
// a large seq made serve --bootstrap panic with "slice bounds out of
// range"): random bytes without a checksum, random bytes with a matching
// checksum, and the genuine snapshot with one byte flipped. Each is
// skipped with a warning and the genuine one restored. The stream is
// purged up to the snapshot first, so only a restored snapshot gives the
// new replica its 171 events.
func TestBootstrapSkipsBadSnapshots(t *testing.T) {
	ctx := context.Background()
	a := newTestService(t, t.TempDir())
	defer shutdown(t, a)
	base := "http://" + a.HTTPAddr()
	doJSON(t, "POST", base+"/v1/events", workedEvents(), nil)
	waitFor(t, "a flush of every event", 20*time.Second, func() bool {
		cp, err := a.st.Checkpoint()
		return err == nil && cp.Applied == 171
	})
	var snap struct {
		Seq  uint64 `json:"seq"`
		Name string `json:"name"`
	}
	if code := doJSON(t, "POST", base+"/v1/admin/snapshot", "", &snap); code != 200 || snap.Seq != 171 {
		t.Fatalf("snapshot: %d %+v", code, snap)
	}
	js := a.Bus().JetStream()
	obs, err := js.ObjectStore(ctx, a.Bus().Options().SnapshotBucket())
	if err != nil {
		t.Fatal(err)
	}
	genuine, err := obs.GetBytes(ctx, snap.Name)
	if err != nil {
		t.Fatal(err)
	}
	r := rand.New(rand.NewPCG(7, 8))
	junk := make([]byte, 1<<20)
	for i := range junk {
		junk[i] = byte(r.Uint32())
	}
	flipped := bytes.Clone(genuine)
	flipped[len(flipped)/2] ^= 0xff
	sum := func(b []byte) string { h := sha256.Sum256(b); return hex.EncodeToString(h[:]) }
	plant := func(seq uint64, data []byte, sha string) {
		meta := jetstream.ObjectMeta{Name: "snapshot-planted-" + strconv.FormatUint(seq, 10), Metadata: map[string]string{"seq": strconv.FormatUint(seq, 10)}}
		if sha != "" {
			meta.Metadata["sha256"] = sha
		}
		if _, err := obs.Put(ctx, meta, bytes.NewReader(data)); err != nil {
			t.Fatal(err)
		}
	}
	plant(1<<63, junk, "")              // the planted object
	plant(1<<62, junk, sum(junk))       // checksum right, content no snapshot
	plant(1<<61, flipped, sum(genuine)) // damaged in the bucket
	st, err := js.Stream(ctx, a.Bus().Options().Stream)
	if err != nil {
		t.Fatal(err)
	}
	if err := st.Purge(ctx, jetstream.WithPurgeSequence(snap.Seq+1)); err != nil {
		t.Fatal(err)
	}

	logs := new(syncBuffer)
	b := newTestService(t, t.TempDir(), func(o *ServiceOptions) {
		o.Bus.URL = a.NATSURL()
		o.Bootstrap = true
		o.Logger = slog.New(slog.NewTextHandler(logs, nil))
	})
	defer shutdown(t, b)
	waitFor(t, "replica b ready", 20*time.Second, func() bool { ok, _ := b.ready(); return ok })
	out := logs.String()
	if got := b.Engine().Stats().EventsApplied; got != 171 {
		t.Fatalf("replica b holds %d events, want the snapshot's 171\n%s", got, out)
	}
	if n := strings.Count(out, "bootstrap: snapshot skipped"); n != 3 {
		t.Fatalf("%d snapshots skipped, want the 3 planted\n%s", n, out)
	}
}
