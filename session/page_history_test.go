package session

import (
	"bytes"

	"math"
	"net/http"
	"strings"
	"testing"
	"time"
)

// TestPageTrackedAndLabels checks the operator page's look-up of a tracked
// session by id (its window in click order and its answer) and that items
// show the title and category of their catalogue record.
func TestPageTrackedAndLabels(t *testing.T) {
	svc, h := newPageService(t)
	base := "http://" + svc.HTTPAddr()
	rec := `{"item":"A","attrs":{"title":["Pocket lantern, brass"],"category":["camping/lights"]}}`
	var ing ingestReply
	if code := doJSON(t, "POST", base+"/v1/items", rec, &ing); code != http.StatusOK || ing.Accepted != 1 {
		t.Fatalf("POST /v1/items: %d %+v", code, ing)
	}
	waitFor(t, "catalogue record applied", 20*time.Second, func() bool { return svc.Engine().Stats().CatalogApplied == 1 })

	code, _, page := getPage(t, h, "?tracked=x1&k=3")
	if code != http.StatusOK {
		t.Fatalf("tracked look-up: %d", code)
	}
	items := page[strings.Index(page, `id="tracked-items"`):]
	items = items[:strings.Index(items, "</ol>")]
	ia, ib := strings.Index(items, htmlEscape(hostileA)), strings.Index(items, htmlEscape(hostileB))
	if ia < 0 || ib < 0 || ia > ib {
		t.Errorf("tracked window of x1 should list its two clicks in order: %s", items)
	}
	if !strings.Contains(page, `class="answer-source">`) {
		t.Error("tracked look-up shows no answer")
	}
	if !strings.Contains(page, "Pocket lantern, brass") || !strings.Contains(page, "camping/lights") {
		t.Error("item A shows no catalogue title or category")
	}
	if _, _, page := getPage(t, h, "?tracked=nobody-here"); !strings.Contains(page, "is not tracked") {
		t.Error("an unknown session id is not reported as untracked")
	}
	if code, _, page := getPage(t, h, "?tracked="+strings.Repeat("s", 300)); code != http.StatusBadRequest || !strings.Contains(page, "tracked:") {
		t.Errorf("a 300-byte id: %d", code)
	}
	if code, _, page := getPage(t, h, "?refresh=1"); code != http.StatusBadRequest || !strings.Contains(page, "refresh=") {
		t.Errorf("refresh=1: %d", code)
	}
	if _, _, page := getPage(t, h, "?refresh=10"); !strings.Contains(page, `http-equiv="refresh" content="10"`) {
		t.Error("refresh=10 does not reload the page")
	}
}

func htmlEscape(s string) string {
	var b bytes.Buffer
	if err := pageTemplate.Lookup("item").Execute(&b, pageItem{Name: s}); err != nil {
		return s
	}
	out := b.String() // <a href="...">NAME</a>
	return out[strings.Index(out, ">")+1 : strings.LastIndex(out, "<")]
}

// TestPageExplorationRow checks that an exploring slot is labelled as such
// instead of showing a row of zero features, and that the footnote does
// not claim the score is the weighted sum of the columns.
func TestPageExplorationRow(t *testing.T) {
	v := &pageView{Signals: []string{"markov", "sr"}, ExploreSignals: 3, Answer: &NextResult{Source: SourceBlend, Items: []Recommendation{
		{Item: "p1", Score: 0.9, Features: map[string]float64{"markov": 1}},
		{Item: "n7", Explore: true, Fresh: true},
	}}}
	var b bytes.Buffer
	if err := pageTemplate.ExecuteTemplate(&b, "answer", v.Answer1(v.Answer)); err != nil {
		t.Fatal(err)
	}
	page := b.String()
	rows := tableAfter(page, "<table>")
	if len(rows) != 2 {
		t.Fatalf("rows %q", rows)
	}
	if !strings.Contains(rows[1][1], "exploring") || !strings.Contains(rows[1][2], "exploration slot") || len(rows[1]) != 3 {
		t.Errorf("exploring row %q", rows[1])
	}
	if strings.Contains(page, "weighted sum of the features") {
		t.Error("footnote still calls the score the weighted sum of the features")
	}
}

// TestHistory checks the page's recent history against values computed
// by hand: ingest rate from the applied counter's change over the interval,
// latency quantiles from the log-spaced buckets (within one bucket, 12 %),
// rejected events per interval, and a ring that keeps the last historyLen
// samples.
func TestHistory(t *testing.T) {
	now := time.Date(2026, 12, 4, 12, 0, 0, 0, time.UTC)
	h := newHistory(5*time.Second, func() time.Time { return now })
	var st Stats
	stats := func() counters { return counters{applied: st.EventsApplied, rejected: st.EventsRejected, lag: st.Lag} }
	h.maybeSample(stats, true) // primes the counters
	for i := range 100 {
		h.observe(time.Duration(i+1) * 100 * time.Microsecond) // 0.1 .. 10 ms
	}
	st.EventsApplied, st.EventsRejected, st.Lag = 5000, 7, 42
	now = now.Add(5 * time.Second)
	h.maybeSample(stats, false)
	ss := h.snapshot()
	if len(ss) != 2 {
		t.Fatalf("%d samples, want 2", len(ss))
	}
	s := ss[1]
	if s.Ingest != 1000 || s.Rejected != 7 || s.Lag != 42 || s.Queries != 100 {
		t.Errorf("sample %+v: want ingest 1000/s (5000 in 5 s), 7 rejected, lag 42, 100 queries", s)
	}
	// Nearest-rank quantiles of 0.1, 0.2, ..., 10 ms: p50 = 5.0 ms, p99 = 9.9 ms.
	for _, c := range []struct{ got, want float64 }{{s.P50, 5.0}, {s.P99, 9.9}} {
		if c.got < c.want || c.got > c.want*1.13 {
			t.Errorf("quantile %v ms, want within one bucket above %v ms", c.got, c.want)
		}
	}
	// The first interval had no queries: the latency chart shows the
	// second as a lone point, not a line from zero.
	if lc := historyCharts(ss)[2]; strings.Contains(string(lc.SVG), "<polyline") || !strings.Contains(string(lc.SVG), "<circle") || !strings.HasSuffix(lc.Now, " ms") {
		t.Errorf("latency chart of one interval with queries: now %q, %s", lc.Now, lc.SVG)
	}
	// Not due yet: no sample; then more than historyLen samples keep the last ones.
	h.maybeSample(stats, false)
	if len(h.snapshot()) != 2 {
		t.Error("a sample was taken before its interval ended")
	}
	for i := range historyLen + 10 {
		now = now.Add(5 * time.Second)
		st.Lag = float64AsLag(i)
		h.maybeSample(stats, false)
	}
	ss = h.snapshot()
	if len(ss) != historyLen || ss[len(ss)-1].Lag != float64(historyLen+9) || !ss[0].At.Before(ss[1].At) {
		t.Errorf("%d samples, last lag %v", len(ss), ss[len(ss)-1].Lag)
	}
	charts := historyCharts(ss)
	if len(charts) != 4 {
		t.Fatalf("%d charts", len(charts))
	}
	for i, c := range charts {
		svg := string(c.SVG)
		if strings.Contains(svg, "NaN") {
			t.Errorf("chart %q has NaN: %s", c.Title, svg)
		}
		// No interval kept had queries: the latency chart draws nothing
		// and says so; the others draw a line over every sample.
		if i == 2 {
			if strings.Contains(svg, "<polyline") || c.Now != "no queries" {
				t.Errorf("latency chart without queries since: now %q, %s", c.Now, svg)
			}
		} else if !strings.Contains(svg, "<polyline") {
			t.Errorf("chart %q draws no line: %s", c.Title, svg)
		}
	}
	if got := fmtValue(12345); got != "12.3k" {
		t.Errorf("fmtValue(12345) = %q", got)
	}
	if math.IsNaN(bucketMS(0)) || bucketMS(20) < 0.099 || bucketMS(20) > 0.101 {
		t.Errorf("bucket 20 = %v ms, want 0.1 (10 µs × 10)", bucketMS(20))
	}
}

func float64AsLag(i int) uint64 { return uint64(i) }
