package eval

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"waymark/stream"
)

// shopLog invents the click log of a small tea shop: sessions browse
// items of one or two shelves, with some repeats and revisits.
func shopLog(sessions int, seed uint64) []stream.Event {
	rng := rand.New(rand.NewPCG(seed, 7))
	t := time.Date(2026, 2, 1, 8, 0, 0, 0, time.UTC).UnixMilli()
	shelves := []string{"green", "black", "oolong", "herbal", "mugs"}
	var evs []stream.Event
	for s := range sessions {
		key := fmt.Sprintf("visitor-%d", s)
		shelf := shelves[rng.IntN(len(shelves))]
		n := 1 + rng.IntN(8)
		item := rng.IntN(6)
		for range n {
			t += int64(1000 + rng.IntN(20000))
			switch r := rng.Float64(); {
			case r < 0.1: // the same item again
			case r < 0.25:
				shelf = shelves[rng.IntN(len(shelves))]
				item = rng.IntN(6)
			default:
				item = (item + 1 + rng.IntN(2)) % 6
			}
			evs = append(evs, stream.Event{Session: key, Item: shelf + "-" + strconv.Itoa(item), TS: t})
		}
	}
	return evs
}

func run(t *testing.T, evs []stream.Event, o Options) *Report {
	t.Helper()
	rep, err := Run(context.Background(), FromEvents("test", evs), o)
	if err != nil {
		t.Fatal(err)
	}
	return rep
}

func metric(t *testing.T, rep *Report, model, key string) float64 {
	t.Helper()
	for _, m := range rep.Models {
		if m.Name == model {
			v, ok := m.Metrics[key]
			if !ok {
				t.Fatalf("%s has no %s", model, key)
			}
			return v
		}
	}
	t.Fatalf("no model %s", model)
	return 0
}

func TestPrequentialHandComputed(t *testing.T) {
	// Three sessions A>B, A>B, A>C, one after the other. Markov, asked
	// before it learns: the 1st A→B has nothing learned (miss), the 2nd
	// finds B (rank 1), A→C finds only B (miss).
	t0 := int64(1767225600000)
	var evs []stream.Event
	for i, s := range []string{"AB", "AB", "AC"} {
		for j, c := range s {
			evs = append(evs, stream.Event{Session: "s" + strconv.Itoa(i), Item: string(c), TS: t0 + int64(i*10+j)*1000})
		}
	}
	o := DefaultOptions()
	o.Models = []string{"markov"}
	rep := run(t, evs, o)
	if got := metric(t, rep, "markov", "HitRate@20"); math.Abs(got-1.0/3) > 1e-12 {
		t.Errorf("HitRate@20 = %v, want 1/3", got)
	}
	if rep.Scoring.Queries != 3 || rep.Scoring.FirstClicks != 3 || rep.Scoring.Learned != 6 {
		t.Errorf("scoring %+v, want 3 queries, 3 first clicks, 6 learned", rep.Scoring)
	}
	// Coldness: before the queries the targets B, B, C had 0, 1 and 0
	// learned clicks. Below 2 all three are cold; below 1 only the first
	// and the last, both misses.
	for _, c := range []struct {
		threshold int
		queries   int64
		hit       float64
	}{{2, 3, 1.0 / 3}, {1, 2, 0}} {
		o.ColdThreshold = c.threshold
		m := run(t, evs, o).Models[0]
		if m.Cold.Queries != c.queries || math.Abs(m.Cold.Metrics["HitRate@20"]-c.hit) > 1e-12 {
			t.Errorf("cold below %d: %+v, want %d queries, HitRate@20 %v", c.threshold, m.Cold, c.queries, c.hit)
		}
	}
}

func TestWorkedColdAndLearnDuringTest(t *testing.T) {
	o := DefaultOptions()
	o.Protocol = Temporal
	o.SplitAt = time.Date(2026, 1, 2, 0, 0, 0, 0, time.UTC)
	o.Models = []string{"markov"}
	o.ColdThreshold = 4
	rep := run(t, workedLog(), o)
	// B has 4 training clicks (not cold at 4), C 3 (cold): the cold
	// queries are AB→C (rank 1) and A→C (rank 2).
	c := rep.Models[0].Cold
	if c.Queries != 2 || math.Abs(c.Metrics["HitRate@20"]-1) > 1e-12 || math.Abs(c.Metrics["MRR@20"]-0.75) > 1e-12 {
		t.Errorf("cold %+v, want 2 queries, HitRate 1, MRR 0.75", c)
	}

	// Training A>B; test A>C twice. Without learning in the test, both
	// A→C queries miss; learning the first lets the second find C.
	day := int64(86_400_000)
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC).UnixMilli()
	evs := []stream.Event{
		{Session: "tr", Item: "A", TS: t0}, {Session: "tr", Item: "B", TS: t0 + 1000},
		{Session: "te1", Item: "A", TS: t0 + day}, {Session: "te1", Item: "C", TS: t0 + day + 1000},
		{Session: "te2", Item: "A", TS: t0 + day + 2000}, {Session: "te2", Item: "C", TS: t0 + day + 3000},
	}
	o = DefaultOptions()
	o.Protocol = Temporal
	o.SplitAt = time.UnixMilli(t0 + day/2)
	o.Models = []string{"markov"}
	if got := metric(t, run(t, evs, o), "markov", "HitRate@20"); got != 0 {
		t.Errorf("no learning during the test: HitRate@20 = %v, want 0", got)
	}
	o.LearnDuringTest = true
	rep = run(t, evs, o)
	if got := metric(t, rep, "markov", "HitRate@20"); got != 0.5 {
		t.Errorf("learning during the test: HitRate@20 = %v, want 0.5", got)
	}
	if rep.Scoring.Learned != 6 {
		t.Errorf("learned %d clicks, want all 6", rep.Scoring.Learned)
	}
	// --test-days 0.5 puts the split half a day before the last click,
	// after the training session and before the first test session.
	o = DefaultOptions()
	o.Protocol = Temporal
	o.TestDays = 0.5
	o.Models = []string{"markov"}
	rep = run(t, evs, o)
	if rep.Preprocessing.TestSessions != 2 || rep.Scoring.Queries != 2 {
		t.Errorf("test days: %d test sessions, %d queries, want 2 and 2", rep.Preprocessing.TestSessions, rep.Scoring.Queries)
	}
}

func TestRestTarget(t *testing.T) {
	// Training A>B>C>D (learned, not tested: split after it). Test session
	// A>X>C: from prefix A the rest is {X, C}; Markov from A proposes B
	// only (miss). From prefix AX, X has no successors: miss. SR with a
	// window of 3 learned A→B, A→C, A→D: from A it ranks B (1), C (1/2),
	// D (1/3): C is relevant at rank 2.
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC).UnixMilli()
	var evs []stream.Event
	for i, c := range "ABCD" {
		evs = append(evs, stream.Event{Session: "tr", Item: string(c), TS: t0 + int64(i)*1000})
	}
	for i, c := range "AXC" {
		evs = append(evs, stream.Event{Session: "te", Item: string(c), TS: t0 + 86_400_000 + int64(i)*1000})
	}
	o := DefaultOptions()
	o.Protocol = Temporal
	o.SplitAt = time.UnixMilli(t0 + 43_200_000)
	o.Target = TargetRest
	o.Models = []string{"markov", "sr(window=3)"}
	o.K = []int{1, 2, 20}
	rep := run(t, evs, o)
	if rep.Scoring.Queries != 2 {
		t.Fatalf("queries %d, want 2", rep.Scoring.Queries)
	}
	for _, c := range []struct {
		model, key string
		want       float64
	}{
		{"markov", "HitRate@20", 0},
		{"sr(window=3)", "HitRate@1", 0},
		{"sr(window=3)", "HitRate@2", 0.5},
		{"sr(window=3)", "MRR@20", 0.25},
		// Query 1: relevant {X, C}, top-2 holds C: precision 1/2, recall 1/2.
		{"sr(window=3)", "Precision@2", 0.25},
		{"sr(window=3)", "Recall@2", 0.25},
		// NDCG@2 of query 1: (1/log2 3) / (1 + 1/log2 3).
		{"sr(window=3)", "NDCG@2", (1 / math.Log2(3)) / (1 + 1/math.Log2(3)) / 2},
	} {
		if got := metric(t, rep, c.model, c.key); math.Abs(got-c.want) > 1e-12 {
			t.Errorf("%s %s = %v, want %v", c.model, c.key, got, c.want)
		}
	}
}

func TestGridInOnePassEqualsSeparateRuns(t *testing.T) {
	evs := shopLog(400, 1)
	specs, err := ExpandModels("sr(window=1|3),markov")
	if err != nil {
		t.Fatal(err)
	}
	o := DefaultOptions()
	o.Models = specs
	together := run(t, evs, o)
	for _, m := range together.Models {
		o.Models = []string{m.Name}
		alone := run(t, evs, o)
		if !reflect.DeepEqual(alone.Models[0].Metrics, m.Metrics) {
			t.Errorf("%s in the grid %v, alone %v", m.Name, m.Metrics, alone.Models[0].Metrics)
		}
	}
	if w1, w3 := metric(t, together, "sr(window=1)", "MRR@20"), metric(t, together, "sr(window=3)", "MRR@20"); w1 == w3 {
		t.Errorf("sr windows 1 and 3 score the same MRR %v: the grid did not vary the parameter", w1)
	}
}

func TestExpandModels(t *testing.T) {
	tests := []struct {
		in   string
		want []string
		err  bool
	}{
		{"markov", []string{"markov"}, false},
		{"sr(window=2|5),markov", []string{"sr(window=2)", "sr(window=5)", "markov"}, false},
		{"iknn(span=1|2,shrink=0|10)", []string{"iknn(shrink=0,span=1)", "iknn(shrink=0,span=2)", "iknn(shrink=10,span=1)", "iknn(shrink=10,span=2)"}, false},
		{"markov, markov", []string{"markov"}, false},
		{"blend(markov=1,sr=0.5|1)", []string{"blend(markov=1,sr=0.5)", "blend(markov=1,sr=1)"}, false},
		{"sr(window=2|)", nil, true},
		{"sr(window=2", nil, true},
		{"", nil, true},
		{"sr(window=1|2|3|4|5|6|7|8,cap=1|2|3|4|5|6|7|8,x=1|2|3|4|5)", nil, true},
	}
	for _, tt := range tests {
		t.Run(tt.in, func(t *testing.T) {
			got, err := ExpandModels(tt.in)
			if (err != nil) != tt.err {
				t.Fatalf("err %v, want error %v", err, tt.err)
			}
			if !tt.err && !reflect.DeepEqual(got, tt.want) {
				t.Errorf("got %v, want %v", got, tt.want)
			}
		})
	}
}

func TestOptionsValidation(t *testing.T) {
	tests := []struct {
		name  string
		edit  func(*Options)
		field string
	}{
		{"bad protocol", func(o *Options) { o.Protocol = "crossfire" }, "Protocol"},
		{"bad target", func(o *Options) { o.Target = "all" }, "Target"},
		{"K not ascending", func(o *Options) { o.K = []int{5, 1} }, "K"},
		{"K too large", func(o *Options) { o.K = []int{5000} }, "K"},
		{"temporal without split", func(o *Options) { o.Protocol = Temporal }, "SplitAt"},
		{"split without temporal", func(o *Options) { o.TestDays = 2 }, "SplitAt"},
		{"learn during test, prequential", func(o *Options) { o.LearnDuringTest = true }, "LearnDuringTest"},
		{"drop unseen, prequential", func(o *Options) { o.DropUnseen = true }, "DropUnseen"},
		{"kfold with rest", func(o *Options) { o.Protocol, o.Target = KFold, TargetRest }, "Target"},
		{"kfold min length", func(o *Options) { o.Protocol, o.KFold.MinLength = KFold, 2 }, "KFold.MinLength"},
		{"duplicate model", func(o *Options) { o.Models = []string{"markov", "markov"} }, "Models"},
		{"unknown model", func(o *Options) { o.Models = []string{"oracle"} }, "Models"},
		{"bad exclusion", func(o *Options) { o.Exclude = "all" }, "Exclude"},
	}
	evs := shopLog(20, 2)
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			o := DefaultOptions()
			tt.edit(&o)
			_, err := Run(context.Background(), FromEvents("t", evs), o)
			if !errors.Is(err, ErrBadOption) || !strings.Contains(err.Error(), tt.field) {
				t.Errorf("err %v, want ErrBadOption naming %s", err, tt.field)
			}
		})
	}
	if _, err := Run(context.Background(), FromEvents("t", nil), DefaultOptions()); !errors.Is(err, ErrNoEvents) {
		t.Errorf("empty log: err %v, want ErrNoEvents", err)
	}
}

func TestDeterministicOutput(t *testing.T) {
	evs := shopLog(300, 3)
	o := DefaultOptions()
	o.Models = []string{"pop", "markov", "sr", "iknn", "blend"}
	var outs [2][3][]byte
	for i := range outs {
		rep := run(t, evs, o)
		for j, w := range []func(*bytes.Buffer) error{
			func(b *bytes.Buffer) error { return rep.WriteJSON(b, OutputOptions{}) },
			func(b *bytes.Buffer) error { return rep.WriteCSV(b, OutputOptions{}) },
			func(b *bytes.Buffer) error { return rep.WriteHTML(b, OutputOptions{}) },
		} {
			var b bytes.Buffer
			if err := w(&b); err != nil {
				t.Fatal(err)
			}
			outs[i][j] = b.Bytes()
		}
	}
	for j, name := range []string{"JSON", "CSV", "HTML"} {
		if !bytes.Equal(outs[0][j], outs[1][j]) {
			t.Errorf("%s differs between two runs of the same input", name)
		}
	}
	if bytes.Contains(outs[0][0], []byte("latency")) {
		t.Error("JSON carries wall-time latency without Timings")
	}
}

func TestOutOfOrderInput(t *testing.T) {
	evs := shopLog(200, 4)
	o := DefaultOptions()
	o.Models = []string{"sr"}
	inOrder := run(t, evs, o)

	shuffledEvs := append([]stream.Event(nil), evs...)
	rng := rand.New(rand.NewPCG(9, 9))
	rng.Shuffle(len(shuffledEvs), func(i, j int) { shuffledEvs[i], shuffledEvs[j] = shuffledEvs[j], shuffledEvs[i] })
	sorted := run(t, shuffledEvs, o)
	if sorted.Dataset.OutOfOrder == 0 {
		t.Error("shuffled input not counted as out of order")
	}
	if !reflect.DeepEqual(sorted.Models[0].Metrics, inOrder.Models[0].Metrics) {
		t.Error("sorted shuffled input scores differently from the input in order")
	}

	var buf bytes.Buffer
	for _, e := range shuffledEvs[:50] {
		buf.Write(e.AppendJSON(nil))
		buf.WriteByte('\n')
	}
	_, err := Load(context.Background(), []Source{{Name: "shuffled.jsonl", Reader: stream.NewJSONLinesReader(&buf)}}, LoadOptions{StrictOrder: true})
	if !errors.Is(err, ErrOutOfOrder) || !strings.Contains(err.Error(), "shuffled.jsonl line") {
		t.Errorf("strict order: err %v, want ErrOutOfOrder naming the file and line", err)
	}
}

func TestLoadCountsBadRecordsAndMergesSources(t *testing.T) {
	a := "{\"session\":\"s1\",\"item\":\"green-1\",\"ts\":1767225600000}\nnot json\n{\"session\":\"s1\",\"item\":\"green-2\",\"ts\":1767225602000}\n"
	b := "{\"session\":\"s2\",\"item\":\"mugs-1\",\"ts\":1767225601000}\n{\"session\":\"\",\"item\":\"x\",\"ts\":1}\n"
	var bad []string
	l, err := Load(context.Background(), []Source{
		{Name: "a", Reader: stream.NewJSONLinesReader(strings.NewReader(a))},
		{Name: "b", Reader: stream.NewJSONLinesReader(strings.NewReader(b))},
	}, LoadOptions{OnBadRecord: func(src string, err error) { bad = append(bad, src) }})
	if err != nil {
		t.Fatal(err)
	}
	s := l.Summarize(30 * 60 * 1000)
	if s.Events != 3 || s.BadRecords != 2 || !reflect.DeepEqual(bad, []string{"a", "b"}) {
		t.Errorf("events %d, bad %d (%v), want 3 and 2 (a, b)", s.Events, s.BadRecords, bad)
	}
	// Merged by time: green-1 (a), mugs-1 (b), green-2 (a).
	var order []string
	for _, r := range l.ev {
		order = append(order, l.items[r.item])
	}
	if !reflect.DeepEqual(order, []string{"green-1", "mugs-1", "green-2"}) {
		t.Errorf("order %v", order)
	}
}

func TestPreprocessingCounts(t *testing.T) {
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC).UnixMilli()
	day := int64(86_400_000)
	var evs []stream.Event
	add := func(s, items string, at int64) {
		for i, c := range items {
			evs = append(evs, stream.Event{Session: s, Item: string(c), TS: at + int64(i)*1000})
		}
	}
	// Training: A occurs 4 times, B 3 times, C once. Test: one session
	// with an unseen item N, one of length 1.
	add("t1", "AB", t0)
	add("t2", "AB", t0+10_000)
	add("t3", "ABC", t0+20_000)
	add("t4", "A", t0+30_000)
	add("x1", "ANB", t0+day)
	add("x2", "B", t0+day+10_000)
	o := DefaultOptions()
	o.Protocol = Temporal
	o.SplitAt = time.UnixMilli(t0 + day/2)
	o.Models = []string{"markov"}
	o.MinSessionLength = 2
	o.MinItemSupport = 2
	o.DropUnseen = true
	rep := run(t, evs, o)
	p := rep.Preprocessing
	// C (1 click) and N (0 in training) are rare: 2 items, 2 events. Then
	// t4 and x2 are short (1 click). Nothing unseen is left for DropUnseen.
	want := Preprocessing{
		MinSessionLength: 2, MinItemSupport: 2, DropUnseen: true,
		RareItems: 2, RareItemEvents: 2, ShortSessions: 2, ShortSessionEvents: 2,
		EventsKept: 8, SessionsKept: 4, TestSessions: 1,
	}
	if p != want {
		t.Errorf("preprocessing\n got %+v\nwant %+v", p, want)
	}
	// Without the item filter, DropUnseen takes N out of x1.
	o.MinItemSupport = 1
	rep = run(t, evs, o)
	if rep.Preprocessing.UnseenTestEvents != 1 || rep.Preprocessing.RareItems != 0 {
		t.Errorf("drop unseen: %+v, want 1 unseen test event", rep.Preprocessing)
	}
	// x1 is then A>B: one query, a hit.
	if rep.Scoring.Queries != 1 || metric(t, rep, "markov", "HitRate@1") != 1 {
		t.Errorf("after dropping N: %d queries, HitRate@1 %v", rep.Scoring.Queries, metric(t, rep, "markov", "HitRate@1"))
	}
}

func TestExclusion(t *testing.T) {
	// Training A>B>A>B: Markov learns A→B and B→A. Test A>B>A: from AB,
	// Markov proposes A only, which the session already holds.
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC).UnixMilli()
	var evs []stream.Event
	for i, c := range "ABAB" {
		evs = append(evs, stream.Event{Session: "tr", Item: string(c), TS: t0 + int64(i)*1000})
	}
	for i, c := range "ABA" {
		evs = append(evs, stream.Event{Session: "te", Item: string(c), TS: t0 + 86_400_000 + int64(i)*1000})
	}
	o := DefaultOptions()
	o.Protocol = Temporal
	o.SplitAt = time.UnixMilli(t0 + 43_200_000)
	o.Models = []string{"markov"}
	rep := run(t, evs, o)
	if got := metric(t, rep, "markov", "HitRate@20"); got != 0.5 || rep.Scoring.TargetsInSession != 1 {
		t.Errorf("session items excluded: HitRate@20 %v, targets in session %d; want 0.5 and 1", got, rep.Scoring.TargetsInSession)
	}
	o.Exclude = ExcludeNone
	if got := metric(t, run(t, evs, o), "markov", "HitRate@20"); got != 1 {
		t.Errorf("session items allowed: HitRate@20 %v, want 1", got)
	}
}

func TestKFoldSmall(t *testing.T) {
	evs := shopLog(300, 5)
	o := DefaultOptions()
	o.Protocol = KFold
	o.KFold = KFoldOptions{Folds: 5, MinLength: 4, MaxSessions: 100, Targets: 2, Context: 3, Seed: 7}
	o.Models = []string{"markov", "pop"}
	rep := run(t, evs, o)
	if rep.Scoring.Queries != 100 || rep.Models[0].Queries != 100 || rep.Preprocessing.TestSessions != 100 {
		t.Errorf("queries %d, want 100 (one per selected session)", rep.Scoring.Queries)
	}
	// Each selected session is learned in Folds-1 folds.
	if rep.Scoring.Learned == 0 || rep.Protocol.KFold == nil || rep.Protocol.KFold.Folds != 5 {
		t.Errorf("scoring %+v protocol %+v", rep.Scoring, rep.Protocol)
	}
	again := run(t, evs, o)
	if !reflect.DeepEqual(again.Models[0].Metrics, rep.Models[0].Metrics) {
		t.Error("kfold differs between runs with the same seed")
	}
	o.KFold.Seed = 8
	other := run(t, evs, o)
	if reflect.DeepEqual(other.Models[0].Metrics, rep.Models[0].Metrics) {
		t.Error("kfold gives the same metrics under another seed: the shuffle has no effect")
	}
	o.KFold.MaxSessions, o.KFold.MinLength = 0, 50
	if _, err := Run(context.Background(), FromEvents("t", evs), o); !errors.Is(err, ErrBadOption) {
		t.Errorf("no session long enough: err %v, want ErrBadOption", err)
	}
}

// TestSignificance checks that the best model carries no comparison and
// the others one against it, consistent with their mean difference.
func TestSignificance(t *testing.T) {
	o := DefaultOptions()
	o.Models = []string{"pop", "sr"}
	rep := run(t, shopLog(500, 6), o)
	best, other := rep.Models[1], rep.Models[0]
	if !best.Best {
		best, other = other, best
	}
	if best.Significance != nil || other.Significance == nil || other.Significance.Against != best.Name {
		t.Fatalf("best %+v, other %+v", best.Significance, other.Significance)
	}
	s := other.Significance
	wantDiff := other.Metrics["MRR@20"] - best.Metrics["MRR@20"]
	if math.Abs(s.MRR.MeanDiff-wantDiff) > 1e-6 || s.MRR.MeanDiff > 0 {
		t.Errorf("mean MRR difference %v, metrics say %v", s.MRR.MeanDiff, wantDiff)
	}
	if !(s.MRR.P >= 0 && s.MRR.P <= 1) || s.MRR.CI95[0] > s.MRR.MeanDiff || s.MRR.CI95[1] < s.MRR.MeanDiff {
		t.Errorf("test %+v", s.MRR)
	}
}

// TestHTMLCarriesJSONNumbers checks that every metric of every model is on
// the page with the JSON's value (the browser check does the same on the
// rendered page).
func TestHTMLCarriesJSONNumbers(t *testing.T) {
	o := DefaultOptions()
	o.Models = []string{"markov", "sr"}
	rep := run(t, shopLog(200, 8), o)
	var b bytes.Buffer
	if err := rep.WriteHTML(&b, OutputOptions{Timings: true}); err != nil {
		t.Fatal(err)
	}
	page := b.String()
	if strings.Contains(page, "ZgotmplZ") || strings.Contains(page, "http://") && !strings.Contains(page, `xmlns="http://www.w3.org/2000/svg"`) {
		t.Error("page has an escaped-away value or a link")
	}
	cellRE := regexp.MustCompile(`<td class="num" data-model="([^"]+)" data-key="([^"]+)" data-value="([^"]+)">([^<]*)</td>`)
	found := map[string]string{}
	for _, m := range cellRE.FindAllStringSubmatch(page, -1) {
		found[m[1]+"|"+m[2]] = m[3]
		if v, err := strconv.ParseFloat(m[3], 64); err == nil && strings.Contains(m[2], "@") && m[4] != fmtMetric(v) {
			t.Errorf("%s %s shows %q for %s", m[1], m[2], m[4], m[3])
		}
	}
	for _, m := range rep.Models {
		for k, v := range m.Metrics {
			if got := found[m.Name+"|"+k]; got != fmtFloat(v) {
				t.Errorf("%s %s on the page %q, JSON %v", m.Name, k, got, v)
			}
		}
	}
	if n := strings.Count(page, `<svg class="chart"`); n < len(metricNames)+3 {
		t.Errorf("%d charts, want a curve per metric and the breakdown and length charts", n)
	}
}
