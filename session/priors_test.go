package session

import (
	"bufio"
	"context"
	"encoding/json"
	"net/http"
	"strings"
	"testing"
	"time"

	"waymark/stream"
)

// TestPriorsCarryToANewSite: site A's learned neighbours, exported and
// imported into an empty site B under other ids, let B answer from its
// first query; as B's own clicks arrive the imported weights fade.
func TestPriorsCarryToANewSite(t *testing.T) {
	a := newTestService(t, t.TempDir())
	defer shutdown(t, a)
	doJSON(t, "POST", "http://"+a.HTTPAddr()+"/v1/events", workedEvents(), nil)
	waitFor(t, "site A learned", 20*time.Second, func() bool { return a.Engine().Stats().EventsApplied == 171 })

	resp, err := http.Get("http://" + a.HTTPAddr() + "/v1/admin/priors")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	sc := bufio.NewScanner(resp.Body)
	if !sc.Scan() || !strings.Contains(sc.Text(), PriorsFormat) {
		t.Fatalf("no header line: %q", sc.Text())
	}
	// Site B names items in lower case.
	var msgs [][]byte
	models := map[string]bool{}
	for sc.Scan() {
		var row stream.PriorRow
		if err := json.Unmarshal(sc.Bytes(), &row); err != nil {
			t.Fatal(err)
		}
		models[row.Model] = true
		out := stream.PriorRow{Item: strings.ToLower(row.Item)}
		for _, n := range row.Neighbors {
			if n.Weight < 0 || n.Weight > 1 {
				t.Fatalf("exported weight %v outside [0, 1]", n.Weight)
			}
			out.Neighbors = append(out.Neighbors, stream.PriorNeighbor{Item: strings.ToLower(n.Item), Weight: n.Weight * 0.5})
		}
		b, _ := json.Marshal(stream.Control{Prior: &out})
		msgs = append(msgs, b)
	}
	for _, m := range []string{"iknn", "markov", "sr"} {
		if !models[m] {
			t.Errorf("the export lacks %s (has %v)", m, models)
		}
	}

	b := newTestService(t, t.TempDir())
	defer shutdown(t, b)
	if err := b.Bus().PublishRaw(context.Background(), b.Bus().Options().ControlSubject, msgs); err != nil {
		t.Fatal(err)
	}
	waitFor(t, "priors applied", 10*time.Second, func() bool { return b.Engine().Stats().LastSequence >= uint64(len(msgs)) })
	// Before any local click: on A, B came first; on b, b comes first.
	res := b.Engine().Next(NextRequest{Items: []string{"a"}, K: 3})
	if len(res.Items) == 0 || res.Items[0].Item != "b" || res.Items[0].Features["prior"] == 0 || res.Source != SourceBlend {
		t.Fatalf("site B with priors only: %+v", res)
	}
	before := res.Items[0].Features["prior"]
	// In the blend the prior counts as imported: weight 0.5 times the best
	// neighbour's 1, faded by nothing yet.
	if before < 0.49 || before > 0.51 {
		t.Fatalf("blended prior feature of b = %v, want the import weight 0.5", before)
	}
	feature := func() float64 {
		r := b.Engine().Score(ScoreRequest{Items: []string{"a"}, Candidates: []string{"b"}})
		return r.Candidates[0].Features["prior"]
	}
	// Local clicks on a fade the prior of a's neighbours by n0/(n0+n_a);
	// read the prior model's raw score to see it.
	raw := func() float64 {
		b.Engine().mu.RLock()
		defer b.Engine().mu.RUnlock()
		m, _ := b.Engine().p.Set.Get("prior")
		q := b.Engine().p.NewQuery([]string{"a"}, 0)
		id, _ := b.Engine().p.Dict.Lookup("b")
		out := make([]float64, 1)
		m.ScoreItems(&q, []uint32{id}, out)
		return out[0]
	}
	r0 := raw()
	var ev strings.Builder
	for i := 0; i < 40; i++ {
		ev.WriteString(`{"session":"local` + string(rune('0'+i%10)) + string(rune('a'+i/10)) + `","item":"a","ts":1767300000000}` + "\n")
	}
	doJSON(t, "POST", "http://"+b.HTTPAddr()+"/v1/events", ev.String(), nil)
	waitFor(t, "local clicks applied", 10*time.Second, func() bool { return b.Engine().Stats().EventsApplied == 40 })
	r1 := raw()
	if f := feature(); f/before < 0.32 || f/before > 0.34 {
		t.Fatalf("blended prior feature after 40 local clicks: %v of %v, want a third", f, before)
	}
	// n0 = 20: 40 local clicks on a leave 20/(20+40) = 1/3 of the prior.
	if r0 <= 0 || r1/r0 < 0.32 || r1/r0 > 0.34 {
		t.Fatalf("prior of a→b: %v before local clicks, %v after 40 (want a third); feature before %v", r0, r1, before)
	}
}
