package session

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"strings"
	"sync"
	"testing"
	"time"
)

// exploreFresh keeps items fresh for 3 minutes of event time (0.05 h).
const exploreFresh = "fresh(window=0.05)"

// exploreService runs serve with a bearer token and exploration that
// explores every answer of 2 or more slots (share 0.5 × k ≥ 1), on the
// worked events plus E, an item nobody co-visits, first clicked ten
// minutes after the others: the only fresh item.
func exploreService(t *testing.T) (*Service, string) {
	t.Helper()
	s := newTestService(t, t.TempDir(), func(o *ServiceOptions) {
		o.Token = "t0ken"
		o.Engine.ExploreSeed, o.Engine.ExploreShare, o.Engine.Fresh = 7, 0.5, exploreFresh
	})
	base := "http://" + s.HTTPAddr()
	events := workedEvents() + `{"session":"lone","item":"E","ts":1767226200000}` + "\n"
	authJSON(t, "POST", base+"/v1/events", events, nil)
	waitFor(t, "events applied", 20*time.Second, func() bool { return s.Engine().Stats().EventsApplied == 172 })
	return s, base
}

// authJSON is doJSON with the test service's bearer token.
func authJSON(t *testing.T, method, url, body string, out any) int {
	t.Helper()
	code, b, err := request(method, url, body, "t0ken")
	if err != nil {
		t.Fatal(err)
	}
	if out != nil {
		if err := json.Unmarshal(b, out); err != nil {
			t.Fatalf("%s %s: %d %s: %v", method, url, code, b, err)
		}
	}
	return code
}

// request sends one HTTP request and returns the status and body; safe
// from any goroutine (it reports errors instead of failing the test).
func request(method, url, body, token string) (int, []byte, error) {
	req, err := http.NewRequest(method, url, strings.NewReader(body))
	if err != nil {
		return 0, nil, err
	}
	if body != "" {
		req.Header.Set("Content-Type", "application/json")
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return 0, nil, err
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	return resp.StatusCode, b, err
}

func (e *Engine) freshStats(item string) (imps, clicks int) {
	e.mu.RLock()
	defer e.mu.RUnlock()
	id, ok := e.p.Dict.Lookup(item)
	if !ok {
		return 0, 0
	}
	return e.fresh.Stats(id)
}

func shownJSON(request string, items ...string) string {
	b, _ := json.Marshal(map[string]any{"request": request, "items": items})
	return string(b)
}

// TestQueriesNeverWrite (issue 12, finding 4): answers, with exploration
// on and a fresh item in their exploration slots, put nothing on the log;
// only the caller's report of what it showed does. Before the fix every
// answer with a fresh item published a served record.
func TestQueriesNeverWrite(t *testing.T) {
	s, base := exploreService(t)
	defer shutdown(t, s)
	e := s.Engine()
	seq0 := e.Stats().LastSequence
	explored := 0
	for i := range 50 {
		var a, b NextResult
		doJSON(t, "GET", base+"/v1/sessions/q1/next?k=3", "", &a)
		doJSON(t, "POST", base+"/v1/next", fmt.Sprintf(`{"items":["A","B"],"k":%d}`, 2+i%5), &b)
		for _, r := range []NextResult{a, b} {
			for _, it := range r.Items {
				if it.Explore {
					explored++
				}
			}
		}
	}
	if explored < 50 {
		t.Fatalf("%d of 100 answers explored; with share 0.5 each of q1's 50 (k=3, E not ranked) must", explored)
	}
	// A write after the queries: the log must hold it and nothing else.
	authJSON(t, "POST", base+"/v1/events", `{"session":"m","item":"A","ts":1767226300000}`, nil)
	waitFor(t, "the marker applied", 10*time.Second, func() bool { return e.Stats().EventsApplied == 173 })
	if got := e.Stats().LastSequence; got != seq0+1 {
		t.Fatalf("100 queries and one write moved the log from %d to %d, want %d", seq0, got, seq0+1)
	}
	if imps, _ := e.freshStats("E"); imps != 0 {
		t.Fatalf("E has %d impressions with no report of it shown", imps)
	}
}

// TestShownReport: exploration learns impressions from what the caller
// reports it displayed (POST /v1/shown, authenticated, on the log), so an
// item the ranker dropped is not counted; a later click by the session of
// the answer is credited; reports are validated.
func TestShownReport(t *testing.T) {
	s, base := exploreService(t)
	defer shutdown(t, s)
	e := s.Engine()
	var res NextResult
	doJSON(t, "GET", base+"/v1/sessions/q1/next?k=3", "", &res)
	if len(res.Items) != 3 || res.Items[0].Item != "B" || res.Items[0].Explore {
		t.Fatalf("the best answer must stay first: %+v", res)
	}
	if last := res.Items[2]; !last.Explore || !last.Fresh || last.Item != "E" || res.Request == "" {
		t.Fatalf("the last of 3 slots must explore E, the only fresh item, with a request id: %+v", res)
	}
	for _, it := range res.Items[:2] {
		if it.Fresh || it.Explore {
			t.Fatalf("%s is old, not fresh: %+v", it.Item, res)
		}
	}
	// Writes need the token.
	if code, _, err := request("POST", base+"/v1/shown", shownJSON(res.Request, "B"), ""); err != nil || code != http.StatusUnauthorized {
		t.Fatalf("POST /v1/shown without a token: %d %v, want 401", code, err)
	}
	// The ranker dropped E: nothing to count for it.
	seq := e.Stats().LastSequence
	var rep shownReply
	if code := authJSON(t, "POST", base+"/v1/shown", shownJSON(res.Request, "B", res.Items[1].Item), &rep); code != http.StatusAccepted {
		t.Fatalf("report: status %d, want 202", code)
	}
	if rep.Session != "q1" || rep.Items != 2 || rep.Seq != seq+1 {
		t.Fatalf("report reply %+v, want session q1 (from the answer), 2 items, seq %d", rep, seq+1)
	}
	waitFor(t, "the report applied", 10*time.Second, func() bool { return e.Stats().LastSequence == seq+1 })
	if imps, _ := e.freshStats("E"); imps != 0 {
		t.Fatalf("E was dropped by the caller but has %d impressions", imps)
	}
	// Shown: one impression; the session's click on it is credited.
	authJSON(t, "POST", base+"/v1/shown", shownJSON(res.Request, "B", "E"), nil)
	waitFor(t, "the impression applied", 10*time.Second, func() bool { imps, _ := e.freshStats("E"); return imps == 1 })
	authJSON(t, "POST", base+"/v1/events", `{"session":"q1","item":"E","ts":1767226210000}`, nil)
	waitFor(t, "the click credited", 10*time.Second, func() bool { _, c := e.freshStats("E"); return c == 1 })
	// An unknown request id is accepted (another replica may have
	// answered); the session then comes from the body or is none.
	if code := authJSON(t, "POST", base+"/v1/shown", `{"request":"elsewhere-1","items":["E"],"session":"q2"}`, &rep); code != http.StatusAccepted || rep.Session != "q2" {
		t.Fatalf("unknown request: %d %+v, want 202 and session q2", code, rep)
	}
	many := make([]string, 1001)
	for i := range many {
		many[i] = fmt.Sprintf("i%d", i)
	}
	for _, tc := range []struct{ body, want string }{
		{`{"items":["B"]}`, "request"},
		{`{"request":"r","items":[]}`, "items"},
		{`{"request":"r"}`, "items"},
		{shownJSON("r", "B", "B"), "twice"},
		{shownJSON("r", "B\n"), "control character"},
		{shownJSON("r", strings.Repeat("x", 257)), "items[0]"},
		{shownJSON(strings.Repeat("r", 129), "B"), "request"},
		{shownJSON("r", many...), "1000"},
		{`{"request":"r","items":["B"],"session":"a\u0000b"}`, "session"},
		{`{"request":1,"items":["B"]}`, "request"},
	} {
		var er errorReply
		if code := authJSON(t, "POST", base+"/v1/shown", tc.body, &er); code != http.StatusBadRequest || !strings.Contains(er.Error.Message, tc.want) {
			t.Errorf("%.60s: %d %q, want 400 naming %q", tc.body, code, er.Error.Message, tc.want)
		}
	}
}

// TestShownBurst: concurrent answers and reports; every report is one
// message on the log, applied once.
func TestShownBurst(t *testing.T) {
	s, base := exploreService(t)
	defer shutdown(t, s)
	// The burst leaves spare client connections the server counts as new,
	// which its shutdown waits out for 5 s; close them first.
	defer http.DefaultClient.CloseIdleConnections()
	e := s.Engine()
	seq := e.Stats().LastSequence
	const burst = 60
	var wg sync.WaitGroup
	errs := make(chan error, burst)
	withE := make(chan bool, burst)
	for range burst {
		wg.Go(func() {
			code, b, err := request("POST", base+"/v1/next", `{"items":["A"],"k":3}`, "")
			var r NextResult
			if err == nil && code == http.StatusOK {
				err = json.Unmarshal(b, &r)
			} else if err == nil {
				err = fmt.Errorf("next: status %d: %s", code, b)
			}
			if err != nil {
				errs <- err
				return
			}
			var shown []string
			for _, it := range r.Items {
				shown = append(shown, it.Item)
				if it.Item == "E" {
					withE <- true
				}
			}
			if code, b, err := request("POST", base+"/v1/shown", shownJSON(r.Request, shown...), "t0ken"); err != nil || code != http.StatusAccepted {
				errs <- fmt.Errorf("shown: %d %s %v", code, b, err)
			}
		})
	}
	wg.Wait()
	close(errs)
	close(withE)
	for err := range errs {
		t.Error(err)
	}
	if t.Failed() {
		return
	}
	if len(withE) != burst {
		t.Fatalf("%d of %d answers showed E; every answer explores", len(withE), burst)
	}
	waitFor(t, "the reports applied", 10*time.Second, func() bool { return e.Stats().LastSequence == seq+burst })
	if imps, _ := e.freshStats("E"); imps != burst {
		t.Fatalf("E: %d impressions after %d reports", imps, burst)
	}
}

// TestExplorationBudget (issue 13, findings 3 and 4): after 30 days of
// clicks on 200 items and 5 items published at the end, over 1,000
// answers at each k the exploring slots are 10 % of all slots within 3
// points where 0.1 × k ≤ 1 (k = 2, 10) and one per answer (1/30) at
// k = 30, none in the first slot, no answer with two, and only items first
// seen within the 48 h window are flagged fresh. Before the fix k = 2
// explored half the slots and every old item was fresh.
func TestExplorationBudget(t *testing.T) {
	s := newTestService(t, t.TempDir(), func(o *ServiceOptions) { o.Engine.ExploreSeed = 11 })
	defer shutdown(t, s)
	base := "http://" + s.HTTPAddr()
	const t0, day = int64(1767225600000), int64(86_400_000)
	var evs, items bytes.Buffer
	first := map[string]int64{}
	n := 0
	for v := range 6000 {
		cur := (v * 37) % 200
		for j := range 4 {
			ts := t0 + int64(n)*30*day/24000
			it := fmt.Sprintf("p%d", (cur+j*j+1)%200)
			fmt.Fprintf(&evs, `{"session":"v%d","item":%q,"ts":%d}`+"\n", v, it, ts)
			if _, ok := first[it]; !ok {
				first[it] = ts
			}
			n++
		}
	}
	end := t0 + int64(n-1)*30*day/24000
	for j := range 5 {
		fmt.Fprintf(&items, `{"item":"new%d","attrs":{"category":"c/new"},"published":%d}`+"\n", j, end)
		first[fmt.Sprintf("new%d", j)] = end
	}
	doJSON(t, "POST", base+"/v1/events", evs.String(), nil)
	doJSON(t, "POST", base+"/v1/items", items.String(), nil)
	waitFor(t, "events applied", 30*time.Second, func() bool {
		st := s.Engine().Stats()
		return st.EventsApplied == uint64(n) && st.CatalogApplied == 5
	})
	e := s.Engine()
	for _, tc := range []struct {
		k    int
		want float64
	}{{2, 0.10}, {10, 0.10}, {30, 1.0 / 30}} {
		slots, explored := 0, 0
		for q := range 1000 {
			a := (q * 7) % 200
			r := e.Next(NextRequest{Items: []string{fmt.Sprintf("p%d", a), fmt.Sprintf("p%d", (a+1)%200)}, K: tc.k})
			slots += len(r.Items)
			per := 0
			for i, it := range r.Items {
				if it.Explore {
					per++
					if i == 0 {
						t.Fatalf("k=%d: the first slot explored: %+v", tc.k, r)
					}
				}
				if it.Fresh && first[it.Item] < end-2*day {
					t.Fatalf("k=%d: %s, first seen %d h before the end, is flagged fresh", tc.k, it.Item, (end-first[it.Item])/3_600_000)
				}
			}
			if per > 1 {
				t.Fatalf("k=%d: %d exploring slots in one answer", tc.k, per)
			}
			explored += per
		}
		got := float64(explored) / float64(slots)
		if got < tc.want-0.03 || got > tc.want+0.03 {
			t.Errorf("k=%d: exploring share %.3f of %d slots, want %.3f ± 0.03", tc.k, got, slots, tc.want)
		}
		t.Logf("k=%d: %.3f of %d slots explore", tc.k, got, slots)
	}
	// Off means off.
	s2 := newTestService(t, t.TempDir(), func(o *ServiceOptions) { o.Engine.ExploreShare = 0 })
	defer shutdown(t, s2)
	doJSON(t, "POST", "http://"+s2.HTTPAddr()+"/v1/items", items.String(), nil)
	doJSON(t, "POST", "http://"+s2.HTTPAddr()+"/v1/events", evs.String(), nil)
	waitFor(t, "events applied", 30*time.Second, func() bool { return s2.Engine().Stats().EventsApplied == uint64(n) })
	for q := range 100 {
		r := s2.Engine().Next(NextRequest{Items: []string{fmt.Sprintf("p%d", q)}, K: 10})
		for _, it := range r.Items {
			if it.Explore {
				t.Fatalf("exploration is off but %s came from it", it.Item)
			}
		}
	}
}

// TestRequestIDs (issue 13, finding 5): request ids never repeat across a
// restart or between replicas, so neither do the draws they seed; with a
// fixed prefix (replay, tests) ids and explorations repeat exactly.
func TestRequestIDs(t *testing.T) {
	dir := t.TempDir()
	ids := map[string]string{}
	note := func(who string, s *Service) {
		for range 3 {
			r := s.Engine().Next(NextRequest{Items: []string{"A"}, K: 3})
			if prev, dup := ids[r.Request]; dup {
				t.Fatalf("%s repeated request id %s of %s", who, r.Request, prev)
			}
			ids[r.Request] = who
		}
	}
	a := newTestService(t, dir)
	note("first run", a)
	shutdown(t, a)
	a = newTestService(t, dir)
	note("restart", a)
	b := newTestService(t, t.TempDir())
	note("another replica", b)
	shutdown(t, a)
	shutdown(t, b)

	// Fixed prefix: two engines on the same stream answer the same, draw
	// for draw.
	fixed := func(o *ServiceOptions) {
		o.Engine.RequestPrefix, o.Engine.ExploreSeed, o.Engine.ExploreShare, o.Engine.Fresh = "replay", 3, 0.2, exploreFresh
	}
	events := workedEvents() + `{"session":"n1","item":"E","ts":1767226200000}` + "\n" +
		`{"session":"n2","item":"F","ts":1767226200000}` + "\n" + `{"session":"n3","item":"G","ts":1767226200000}` + "\n"
	var answers [2][]NextResult
	for i := range answers {
		s := newTestService(t, t.TempDir(), fixed)
		doJSON(t, "POST", "http://"+s.HTTPAddr()+"/v1/events", events, nil)
		waitFor(t, "events applied", 20*time.Second, func() bool { return s.Engine().Stats().EventsApplied == 174 })
		for q := range 200 {
			answers[i] = append(answers[i], s.Engine().Next(NextRequest{Items: []string{[]string{"A", "B", "C"}[q%3]}, K: 2 + q%4}))
		}
		shutdown(t, s)
	}
	explored := map[string]int{}
	for q := range answers[0] {
		x, y := answers[0][q], answers[1][q]
		if x.Request != y.Request || fmt.Sprint(x.Items) != fmt.Sprint(y.Items) {
			t.Fatalf("answer %d differs with the same prefix and seed:\n%+v\n%+v", q, x, y)
		}
		for _, it := range x.Items {
			if it.Explore {
				explored[it.Item]++
			}
		}
	}
	if len(explored) < 2 {
		t.Fatalf("explored %v: the draws should spread over the fresh items", explored)
	}
	if want := "replay-1"; answers[0][0].Request != want {
		t.Errorf("first request id %q, want %q", answers[0][0].Request, want)
	}
}
