package session

import (
	"slices"
	"testing"
	"time"
)

// TestRequestOptions: category restriction, exclusions, context popularity
// for an empty session, declared preferences and the latency budget, on the
// hand-computed scenario of workedEvents with catalogue records.
func TestRequestOptions(t *testing.T) {
	s := newTestService(t, t.TempDir())
	defer shutdown(t, s)
	base := "http://" + s.HTTPAddr()
	items := `{"item":"A","attrs":{"category":"shop/x"}}
{"item":"B","attrs":{"category":"shop/x"}}
{"item":"C","attrs":{"category":"shop/y"}}
{"item":"D","attrs":{"category":"shop/x"}}
`
	if code := doJSON(t, "POST", base+"/v1/items", items, nil); code != 200 {
		t.Fatalf("POST /v1/items: %d", code)
	}
	doJSON(t, "POST", base+"/v1/events", workedEvents(), nil)
	waitFor(t, "events applied", 20*time.Second, func() bool { return s.Engine().Stats().EventsApplied == 171 })

	names := func(r NextResult) []string {
		var out []string
		for _, it := range r.Items {
			out = append(out, it.Item)
		}
		return out
	}
	tests := []struct {
		name, body string
		want       []string // exact answer
		source     string
	}{
		// q1 clicked A: by the counts B, then C, then D.
		{"category restricts", `{"session":"q1","k":5,"category":"shop/y"}`, []string{"C"}, SourceBlend},
		// Without B: the learned default answers with markov alone on
		// these clicks (its pool's best on them), and after A markov has
		// seen only B and D; C comes as a popularity fill.
		{"exclude", `{"session":"q1","k":2,"exclude":["B"]}`, []string{"D", "C"}, SourceBlend},
		// Empty session with a context: shop/x by clicks A 61, B 50, D 10.
		{"context popularity", `{"items":[],"k":3,"context":["category=shop/x"]}`, []string{"A", "B", "D"}, SourceContext},
		// Declared item B seeds the session: C follows B.
		{"preferences", `{"items":[],"k":1,"prefer":{"items":["B"]}}`, []string{"C"}, SourceBlend},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			var res NextResult
			if code := doJSON(t, "POST", base+"/v1/next", tt.body, &res); code != 200 {
				t.Fatalf("status %d", code)
			}
			if !slices.Equal(names(res), tt.want) || res.Source != tt.source {
				t.Fatalf("got %v from %s, want %v from %s", names(res), res.Source, tt.want, tt.source)
			}
		})
	}
	for _, bad := range []string{`{"items":["A"],"timeout_ms":-1}`, `{"items":["A"],"context":[""]}`, `{"items":["A"],"exclude":[""]}`} {
		if code := doJSON(t, "POST", base+"/v1/next", bad, nil); code != 400 {
			t.Errorf("%s: status %d, want 400", bad, code)
		}
	}
	// A budget already spent skips every signal and says so; popularity
	// still answers.
	res := s.Engine().Next(NextRequest{Items: []string{"A"}, K: 3, Budget: time.Nanosecond})
	if len(res.Skipped) == 0 || len(res.Items) == 0 || res.Source != SourcePop {
		t.Fatalf("with no time left: %+v", res)
	}
	// A generous budget skips nothing.
	res = s.Engine().Next(NextRequest{Items: []string{"A"}, K: 3, Budget: time.Minute})
	if len(res.Skipped) != 0 || res.Items[0].Item != "B" {
		t.Fatalf("with a minute: %+v", res)
	}
}
