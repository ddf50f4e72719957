package session

import (
	"encoding/json"
	"testing"

	"waymark/bench/synth"
)

// BenchmarkNextBodyDecode decodes bodies of POST /v1/next shaped as the
// HTTP bench writes them (bench/cmd/http: json.Marshal of
// {"items":[1 to 20 synthetic ids],"k":20}) with the hand-written decoder
// and with encoding/json as decodeBody runs it.
//
//	go test -run '^$' -bench BenchmarkNextBodyDecode -benchmem ./session
func BenchmarkNextBodyDecode(b *testing.B) {
	g := synth.NewGen(synth.Options{Items: 100_000, Seed: 4242, SessionPrefix: "q"})
	bodies := make([][]byte, 2000)
	for i := range bodies {
		sess := make([]string, 1+i%20)
		for j := range sess {
			sess[j] = g.Next().Item
		}
		bodies[i], _ = json.Marshal(map[string]any{"items": sess, "k": 20})
	}
	for _, body := range bodies {
		if fast, _ := checkNextDecode(b, body); !fast {
			b.Fatalf("fast path bailed on %s", body)
		}
	}
	b.Run("fast", func(b *testing.B) {
		b.ReportAllocs()
		i := 0
		for b.Loop() {
			if _, ok := decodeNextFast(bodies[i%len(bodies)]); !ok {
				b.Fatal("bailed")
			}
			i++
		}
	})
	b.Run("encoding-json", func(b *testing.B) {
		b.ReportAllocs()
		i := 0
		for b.Loop() {
			var v nextBody
			if err := unmarshalBody(bodies[i%len(bodies)], &v); err != nil {
				b.Fatal(err)
			}
			i++
		}
	})
}
