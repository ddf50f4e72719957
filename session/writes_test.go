package session

import (
	"bytes"
	"context"
	"fmt"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"waymark/store"
	"waymark/stream"
)

// itemOfSize returns an NDJSON catalogue record for item whose canonical
// encoding (the message serve publishes) is exactly size bytes: one
// attribute with values of at most MaxAttrValueBytes, the last one sized
// to fit.
func itemOfSize(t *testing.T, item string, size int) string {
	t.Helper()
	build := func(full, last int) string {
		vals := make([]string, 0, full+1)
		for i := 0; i < full; i++ {
			vals = append(vals, `"`+strings.Repeat("x", stream.MaxAttrValueBytes)+`"`)
		}
		vals = append(vals, `"`+strings.Repeat("y", last)+`"`)
		return `{"item":"` + item + `","attrs":{"d":[` + strings.Join(vals, ",") + `]}}`
	}
	encoded := func(line string) int {
		rec, err := stream.DecodeItemJSON([]byte(line))
		if err != nil {
			t.Fatal(err)
		}
		return len(rec.AppendJSON(nil))
	}
	for full := size/(stream.MaxAttrValueBytes+3) + 1; full >= 0; full-- {
		base := encoded(build(full, 1))
		if last := 1 + size - base; last >= 1 && last <= stream.MaxAttrValueBytes {
			line := build(full, last)
			if got := encoded(line); got != size {
				t.Fatalf("built a %d-byte record, want %d", got, size)
			}
			return line
		}
	}
	t.Fatalf("no record of %d bytes", size)
	return ""
}

// TestOversizedRecordRejectedBeforePublish: a catalogue record over the
// bus's max_payload is rejected on its own line before anything of the
// request is published, and the valid records around it, one of exactly
// max_payload bytes among them, are published: before, the valid record
// ahead of it went out and the request answered 503 (issue 12).
func TestOversizedRecordRejectedBeforePublish(t *testing.T) {
	s := newTestService(t, t.TempDir())
	defer shutdown(t, s)
	ctx := context.Background()
	max := int(s.Bus().Conn().MaxPayload()) // the embedded server's max_payload (NATS default 1 MiB)
	before, err := s.Bus().LastSequence(ctx)
	if err != nil {
		t.Fatal(err)
	}
	body := `{"item":"small","attrs":{"category":"a"}}` + "\n" +
		itemOfSize(t, "over", max+1) + "\n" +
		itemOfSize(t, "exact", max) + "\n"
	var rep ingestReply
	code := doJSON(t, "POST", "http://"+s.HTTPAddr()+"/v1/items", body, &rep)
	if code != 200 || rep.Accepted != 2 || rep.Rejected != 1 || len(rep.Errors) != 1 || rep.Errors[0].Line != 2 ||
		!strings.Contains(rep.Errors[0].Message, fmt.Sprintf("max_payload of %d", max)) {
		t.Fatalf("want 200, 2 accepted, line 2 rejected naming max_payload %d; got %d %+v", max, code, rep)
	}
	after, err := s.Bus().LastSequence(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if after-before != 2 {
		t.Fatalf("the log grew by %d messages, want the 2 valid records", after-before)
	}

	// All records too large: nothing published, 400.
	code = doJSON(t, "POST", "http://"+s.HTTPAddr()+"/v1/items", itemOfSize(t, "over2", max+1), &rep)
	if last, _ := s.Bus().LastSequence(ctx); code != 400 || last != after {
		t.Fatalf("a lone oversized record: want 400 and no message; got %d, log grew by %d", code, last-after)
	}
}

// syncBuffer is a bytes.Buffer safe for the logger's concurrent writes.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (b *syncBuffer) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.b.Write(p)
}

func (b *syncBuffer) String() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.b.String()
}

// TestPublishFailuresCountedAndLogged: when the bus does not take a write
// (here a real NATS server with no stream for the subjects, so JetStream
// has no responder), the request answers 503, the failure is counted in
// waymark_publish_failures_total by kind and logged at WARN.
func TestPublishFailuresCountedAndLogged(t *testing.T) {
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	ns, err := stream.StartServer(ctx, stream.ServerOptions{Dir: t.TempDir(), Listen: "127.0.0.1:-1"})
	if err != nil {
		t.Fatal(err)
	}
	defer func() { _ = ns.Shutdown(context.Background()) }()
	bo := stream.DefaultBusOptions()
	bo.URL = ns.ClientURL()
	bus, err := stream.Connect(ctx, bo) // no EnsureStreams: nothing takes the publishes
	if err != nil {
		t.Fatal(err)
	}
	defer bus.Close()
	so := store.DefaultOptions()
	so.MemTableSize = 8 << 20
	st, err := store.Open(ctx, t.TempDir(), so)
	if err != nil {
		t.Fatal(err)
	}
	defer func() { _ = st.Close() }()
	eng, err := NewEngine(ctx, st, nil, DefaultEngineOptions())
	if err != nil {
		t.Fatal(err)
	}
	reg := prometheus.NewRegistry()
	var logs syncBuffer
	srv := NewServer(eng, busPublisher{bus}, ServerOptions{Registerer: reg, Gatherer: reg,
		Logger: slog.New(slog.NewTextHandler(&logs, nil))})
	hs := httptest.NewServer(srv)
	defer hs.Close()

	tests := []struct{ kind, method, path, body string }{
		{"events", "POST", "/v1/events", `{"session":"s","item":"a","ts":1767225600000}`},
		{"items", "POST", "/v1/items", `{"item":"a","attrs":{"category":"c"}}`},
		{"forget", "DELETE", "/v1/sessions/s", ""},
	}
	for _, tt := range tests {
		if code := doJSON(t, tt.method, hs.URL+tt.path, tt.body, nil); code != http.StatusServiceUnavailable {
			t.Errorf("%s %s with no stream: %d, want 503", tt.method, tt.path, code)
		}
		if got := metricValue(t, reg, "waymark_publish_failures_total", "kind", tt.kind); got != 1 {
			t.Errorf("waymark_publish_failures_total{kind=%q} = %v, want 1", tt.kind, got)
		}
		if want := "level=WARN msg=\"publish to the bus failed\" kind=" + tt.kind; !strings.Contains(logs.String(), want) {
			t.Errorf("no WARN line for %s: want %q in\n%s", tt.kind, want, logs.String())
		}
	}
}
