package stream

import (
	"encoding/json"
	"testing"
)

// Decoding side by side: the hand-written fast path (DecodeJSON), the
// encoding/json fallback this package uses for unusual input, and a bare
// encoding/json baseline (unmarshal into a flat struct, no validation). Run
// with
//
//	go test -run '^$' -bench BenchmarkDecodeJSON -benchmem ./stream
//
// and compare ns/op and allocs/op within one run.

var benchLines = []struct {
	name string
	line []byte
}{
	{"short", []byte(`{"session":"v123456","item":"p4711","ts":1767225600000}`)},
	// About 200 bytes with optional and unknown fields, the size issue 6
	// measures with.
	{"200B", []byte(`{"session":"v-2f9c41d7a8","item":"garden-spade-steel-120cm","ts":1767225600000,"kind":"view","id":"e-5f1d2c3b4a","page":"/garden/tools/spades?ref=home","locale":"xx-XX","screen":1280,"returning":false}`)},
	{"rfc3339", []byte(`{"session":"v123456","item":"p4711","ts":"2026-01-01T00:00:00.250Z","kind":"cart"}`)},
}

// baselineEvent is what a bare encoding/json consumer would decode into.
type baselineEvent struct {
	Session string `json:"session"`
	Item    string `json:"item"`
	TS      int64  `json:"ts"`
	Kind    string `json:"kind"`
	ID      string `json:"id"`
}

func BenchmarkDecodeJSON(b *testing.B) {
	for _, bl := range benchLines {
		b.Run(bl.name+"/fast", func(b *testing.B) {
			b.ReportAllocs()
			b.SetBytes(int64(len(bl.line)))
			for b.Loop() {
				if _, err := DecodeJSON(bl.line); err != nil {
					b.Fatal(err)
				}
			}
		})
		b.Run(bl.name+"/fallback", func(b *testing.B) {
			b.ReportAllocs()
			b.SetBytes(int64(len(bl.line)))
			for b.Loop() {
				ev, err := decodeSlow(bl.line)
				if err != nil {
					b.Fatal(err)
				}
				if err := ev.Validate(); err != nil {
					b.Fatal(err)
				}
			}
		})
		if bl.name == "rfc3339" {
			continue // a string ts does not fit the int64 baseline struct
		}
		b.Run(bl.name+"/encoding-json", func(b *testing.B) {
			b.ReportAllocs()
			b.SetBytes(int64(len(bl.line)))
			for b.Loop() {
				var ev baselineEvent
				if err := json.Unmarshal(bl.line, &ev); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

func BenchmarkAppendJSON(b *testing.B) {
	ev := Event{Session: "v-2f9c41d7a8", Item: "garden-spade-steel-120cm", TS: 1767225600000, Kind: KindView, ID: "e-5f1d2c3b4a"}
	b.Run("append", func(b *testing.B) {
		b.ReportAllocs()
		buf := make([]byte, 0, 256)
		for b.Loop() {
			buf = ev.AppendJSON(buf[:0])
		}
	})
	b.Run("encoding-json", func(b *testing.B) {
		b.ReportAllocs()
		be := baselineEvent{Session: ev.Session, Item: ev.Item, TS: ev.TS, Kind: "view", ID: ev.ID}
		for b.Loop() {
			if _, err := json.Marshal(be); err != nil {
				b.Fatal(err)
			}
		}
	})
}
