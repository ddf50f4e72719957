package session

import (
	"bytes"
	"encoding/json"
	"math"
	"math/rand/v2"
	"reflect"
	"testing"
)

// encodingJSON is the reference: what encoding/json's Encoder (Go's
// standard library) writes for v.
func encodingJSON(t testing.TB, v any) []byte {
	t.Helper()
	var buf bytes.Buffer
	if err := json.NewEncoder(&buf).Encode(v); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// TestNextJSONMatchesEncodingJSON checks the hand-written encoder of answers
// byte for byte against encoding/json, on answers built to hit every rule:
// omitted fields, HTML characters, control characters, invalid UTF-8, line
// separators, exponent-form floats, negative zero.
func TestNextJSONMatchesEncodingJSON(t *testing.T) {
	tests := []struct {
		name string
		r    NextResult
	}{
		{"empty", NextResult{}},
		{"no items", NextResult{Items: []Recommendation{}, Source: "pop", Request: "a-1"}},
		{"typical", NextResult{Items: []Recommendation{
			{Item: "tent-2p", Score: 1.234567890123, Features: map[string]float64{"sr": 1, "markov": 0.5, "pop": 0.0123}},
			{Item: "stove", Score: 0.1, Explore: true, Fresh: true},
			{Item: "mug", Score: 3e-7, Features: map[string]float64{}, Fresh: true},
		}, Source: "blend", Tracked: true, Known: 3, Unknown: 1, Request: "2a-17", Skipped: []string{"vsknn", "explore"}}},
		{"awkward strings", NextResult{Items: []Recommendation{
			{Item: "<b>&\"q\"\\", Score: 1},
			{Item: "ctl\x00\x01\b\f\n\r\t\x1f\x7f", Score: 2},
			{Item: "bad\xff\xfeutf8\xc3", Score: 3},
			{Item: "sep\u2028\u2029é日本", Score: 4},
		}, Source: "blend"}},
		{"floats", NextResult{Items: []Recommendation{
			{Item: "a", Score: 1e21}, {Item: "b", Score: 1e-6}, {Item: "c", Score: 9.99e-7},
			{Item: "d", Score: math.Copysign(0, -1)}, {Item: "e", Score: -2.5e-300},
			{Item: "f", Score: 123456789012345678}, {Item: "g", Score: math.MaxFloat64},
			{Item: "h", Score: math.SmallestNonzeroFloat64},
		}}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, ok := appendNextJSON(nil, &tt.r)
			if !ok {
				t.Fatal("encoder refused a finite answer")
			}
			if want := encodingJSON(t, tt.r); !bytes.Equal(got, want) {
				t.Errorf("got  %s\nwant %s", got, want)
			}
		})
	}
	for _, bad := range []float64{math.NaN(), math.Inf(1), math.Inf(-1)} {
		r := NextResult{Items: []Recommendation{{Item: "x", Score: 1, Features: map[string]float64{"sr": bad}}}}
		if _, ok := appendNextJSON(nil, &r); ok {
			t.Errorf("feature %g: encoder accepted what encoding/json refuses", bad)
		}
	}
}

// TestNextJSONRandom compares the two encoders on random answers with
// random bytes in every string and random float bit patterns.
func TestNextJSONRandom(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	str := func() string {
		b := make([]byte, rng.IntN(12))
		for i := range b {
			b[i] = byte(rng.IntN(256))
		}
		return string(b)
	}
	num := func() float64 {
		for {
			var f float64
			switch rng.IntN(3) {
			case 0:
				f = math.Float64frombits(rng.Uint64())
			case 1:
				f = rng.Float64()
			default:
				f = rng.NormFloat64() * math.Pow(10, float64(rng.IntN(60)-30))
			}
			if !math.IsNaN(f) && !math.IsInf(f, 0) {
				return f
			}
		}
	}
	for n := range 3000 {
		r := NextResult{Source: str(), Tracked: rng.IntN(2) == 0, Known: rng.IntN(50), Unknown: rng.IntN(5), Request: str()}
		for range rng.IntN(6) {
			it := Recommendation{Item: str(), Score: num(), Explore: rng.IntN(3) == 0, Fresh: rng.IntN(3) == 0}
			if rng.IntN(2) == 0 {
				it.Features = map[string]float64{}
				for range rng.IntN(5) {
					it.Features[str()] = num()
				}
			}
			r.Items = append(r.Items, it)
		}
		for range rng.IntN(3) {
			r.Skipped = append(r.Skipped, str())
		}
		got, ok := appendNextJSON(nil, &r)
		if want := encodingJSON(t, r); !ok || !bytes.Equal(got, want) {
			t.Fatalf("answer %d: got %s (ok %v)\nwant %s", n, got, ok, want)
		}
	}
}

// TestNextJSONFieldsCovered fails when NextResult or Recommendation gains
// a field, so the hand-written encoder is updated with it (the comparison
// tests above would miss a new omitempty field they never set).
func TestNextJSONFieldsCovered(t *testing.T) {
	for _, c := range []struct {
		v    any
		want int
	}{{NextResult{}, 8}, {Recommendation{}, 5}} {
		if n := reflect.TypeOf(c.v).NumField(); n != c.want {
			t.Errorf("%T has %d fields, appendNextJSON writes %d: update it and this test", c.v, n, c.want)
		}
	}
}
