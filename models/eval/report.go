package eval

import (
	"encoding/json"
	"fmt"
	"io"
	"maps"
	"strconv"

	"waymark/models"
)

// metricNames are the metrics reported at every cut-off, in report order.
// A metric's key is its name, '@' and the cut-off: "HitRate@20".
var metricNames = []string{"HitRate", "MRR", "NDCG", "Precision", "Recall", "Coverage", "Popularity"}

// breakdownNames are the metrics of the cold-target and position breakdowns.
var breakdownNames = []string{"HitRate", "MRR"}

// MetricNames returns the metrics reported at every cut-off, in report
// order; a metric's key is Key(name, k).
func MetricNames() []string { return append([]string(nil), metricNames...) }

// BreakdownNames returns the metrics of the cold-target and position
// breakdowns.
func BreakdownNames() []string { return append([]string(nil), breakdownNames...) }

// Key returns a metric's key at cut-off k.
func Key(name string, k int) string { return name + "@" + strconv.Itoa(k) }

// Report is the result of a replay. Its JSON form is deterministic: the
// same log and options give the same bytes (latencies, which are wall
// time, are left out unless asked for).
type Report struct {
	Models        []ModelResult `json:"models"`
	Dataset       Summary       `json:"dataset"`
	Protocol      ProtocolInfo  `json:"protocol"`
	Preprocessing Preprocessing `json:"preprocessing"`
	Scoring       Scoring       `json:"scoring"`
	// Warnings say where a figure reads differently from what it seems
	// (a cut-off as large as the catalogue, for one).
	Warnings []string `json:"warnings,omitempty"`
	// Run says what produced the report, so a figure can be traced to a
	// build and a command; the caller fills it (Run leaves it nil).
	Run *RunInfo `json:"run,omitempty"`
}

// RunInfo names the build and the command line that produced a report.
type RunInfo struct {
	Version string `json:"version"`
	Commit  string `json:"commit,omitempty"`
	Command string `json:"command,omitempty"`
}

// warnings lists what a reader of the report should know before reading
// its figures.
func (r *Report) warnings() []string {
	var w []string
	if n := r.Dataset.Items; n > 0 && len(r.Protocol.K) > 0 {
		if k := r.Protocol.K[len(r.Protocol.K)-1]; int64(k) >= n {
			w = append(w, fmt.Sprintf("K = %d is not below the %d items of the dataset: a model that ranks every item hits at K = %d whenever the target is not excluded, so HitRate@%d and Recall@%d say little; read MRR, NDCG and the smaller cut-offs", k, n, k, k, k))
		}
	}
	return w
}

// ModelResult is one model's scores.
type ModelResult struct {
	Name string `json:"name"`
	// Params are the model's effective parameters: the spec's, and the
	// defaults its name reports.
	Params   map[string]string  `json:"params"`
	Queries  int64              `json:"queries"`
	Answered int64              `json:"answered"` // queries with at least one item recommended
	Metrics  map[string]float64 `json:"metrics"`
	// Cold restricts HitRate and MRR to queries whose next item had fewer
	// than Protocol.ColdThreshold learned clicks when asked.
	Cold Breakdown `json:"cold"`
	// Positions restricts them to queries after the session's 1st, 2nd,
	// 3rd, and 4th or later click.
	Positions []Breakdown `json:"positions"`
	// Best marks the model with the highest MRR at the largest cut-off
	// (the first one listed on a tie); every other model carries its
	// paired comparison with it.
	Best         bool          `json:"best"`
	Significance *Significance `json:"significance,omitempty"`
	// Latency is wall time, so it is in the JSON only when asked for.
	Latency *Latency `json:"latency,omitempty"`

	latency Latency
}

// Breakdown is a subset of the queries and their metrics.
type Breakdown struct {
	Label   string             `json:"label"`
	Queries int64              `json:"queries"`
	Metrics map[string]float64 `json:"metrics"`
}

// Significance compares a model with the best one, query by query.
type Significance struct {
	Test    string     `json:"test"`
	Against string     `json:"against"`
	K       int        `json:"k"`
	MRR     PairedTest `json:"mrr"`     // per-query reciprocal rank at K
	HitRate PairedTest `json:"hitrate"` // per-query hit at K
}

// Latency sums up the time of the models' Recommend calls in the replay.
type Latency struct {
	P50MS float64 `json:"p50_ms"`
	P99MS float64 `json:"p99_ms"`
}

// LatencyOf returns a model's query latency, measured whether or not the
// JSON carries it.
func (m *ModelResult) LatencyOf() Latency { return m.latency }

// ProtocolInfo records every setting a replay's numbers depend on.
type ProtocolInfo struct {
	Name            Protocol      `json:"name"`
	Target          Target        `json:"target"`
	K               []int         `json:"k"`
	Exclude         Exclusion     `json:"exclude"`
	Window          int           `json:"window"`
	SessionTimeout  string        `json:"session_timeout"`
	MaxSessions     int           `json:"max_sessions"`
	HalfLife        string        `json:"half_life"`
	CapPerItem      int           `json:"cap_per_item"`
	SRWindow        int           `json:"sr_window"`
	SplitAt         string        `json:"split_at,omitempty"`
	TestDays        float64       `json:"test_days,omitempty"`
	LearnDuringTest bool          `json:"learn_during_test"`
	ColdThreshold   int           `json:"cold_threshold"`
	KFold           *KFoldOptions `json:"kfold,omitempty"`
}

// Scoring counts how clicks of test sessions turned into queries.
type Scoring struct {
	// Queries is the number of (prefix, target) cases scored, after every
	// filter; each model answered all of them.
	Queries int64 `json:"queries"`
	// FirstClicks start a session: there is no prefix to ask from.
	FirstClicks int64 `json:"first_clicks"`
	// Repeats repeat the session's last click: the window does not change
	// and the tracker does not count it as a transition, so it is not
	// scored.
	Repeats int64 `json:"repeat_clicks"`
	// TargetsInSession are queries whose next item the session already
	// holds; with session items excluded they are misses for every model.
	TargetsInSession int64 `json:"targets_in_session"`
	// Untracked are clicks whose session the tracker no longer held
	// (evicted at its session cap), so no query could be formed.
	Untracked int64 `json:"untracked"`
	// TrainingClicks are clicks outside test sessions.
	TrainingClicks int64 `json:"training_clicks"`
	// Learned is the number of clicks the models learned (in kfold,
	// summed over folds).
	Learned int64 `json:"learned"`
	// TooShort counts kfold candidate sessions shorter than MinLength.
	TooShort int64 `json:"too_short,omitempty"`
}

// OutputOptions configures the writers of a report.
type OutputOptions struct {
	// Timings adds each model's latency; the output then differs from run
	// to run.
	Timings bool
}

// WriteJSON writes the report as indented JSON.
func (r *Report) WriteJSON(w io.Writer, opts OutputOptions) error {
	c := *r
	c.Models = make([]ModelResult, len(r.Models))
	for i, m := range r.Models {
		c.Models[i] = m
		c.Models[i].Latency = nil
		if opts.Timings {
			l := m.latency
			c.Models[i].Latency = &l
		}
	}
	b, err := json.MarshalIndent(&c, "", "  ")
	if err != nil {
		return fmt.Errorf("encode report: %w", err)
	}
	b = append(b, '\n')
	if _, err := w.Write(b); err != nil {
		return fmt.Errorf("write report: %w", err)
	}
	return nil
}

// result turns a model's sums into its result.
func (e *evaluator) result(m *modelEval) ModelResult {
	r := ModelResult{
		Name:     m.spec,
		Params:   m.params,
		Queries:  m.n,
		Answered: m.answered,
		Metrics:  map[string]float64{},
		latency:  Latency{P50MS: m.lat.quantile(0.50), P99MS: m.lat.quantile(0.99)},
	}
	if r.Params == nil {
		r.Params = map[string]string{}
	}
	div := func(a float64, n int64) float64 {
		if n == 0 {
			return 0
		}
		return a / float64(n)
	}
	for j, k := range e.ks {
		s := m.sum[j]
		r.Metrics[Key("HitRate", k)] = div(s.Hit, m.n)
		r.Metrics[Key("MRR", k)] = div(s.RR, m.n)
		r.Metrics[Key("NDCG", k)] = div(s.NDCG, m.n)
		r.Metrics[Key("Precision", k)] = div(s.Precision, m.n)
		r.Metrics[Key("Recall", k)] = div(s.Recall, m.n)
		covered := int64(0)
		for _, b := range m.best {
			if b > 0 && int(b) <= k {
				covered++
			}
		}
		r.Metrics[Key("Coverage", k)] = div(float64(covered), int64(e.items))
		r.Metrics[Key("Popularity", k)] = div(m.pop[j], m.answered)
	}
	sub := func(label string, n int64, sums []QueryScore) Breakdown {
		b := Breakdown{Label: label, Queries: n, Metrics: map[string]float64{}}
		for j, k := range e.ks {
			b.Metrics[Key("HitRate", k)] = div(sums[j].Hit, n)
			b.Metrics[Key("MRR", k)] = div(sums[j].RR, n)
		}
		return b
	}
	r.Cold = sub("cold", m.coldN, m.cold)
	for i, l := range positionLabels {
		r.Positions = append(r.Positions, sub(l, m.posN[i], m.pos[i]))
	}
	return r
}

// finish builds the model results and compares each with the best.
func (e *evaluator) finish() []ModelResult {
	out := make([]ModelResult, len(e.ms))
	best := 0
	key := Key("MRR", e.maxK)
	for i, m := range e.ms {
		out[i] = e.result(m)
		if out[i].Metrics[key] > out[best].Metrics[key] {
			best = i
		}
	}
	out[best].Best = true
	if len(e.ms) < 2 {
		return out
	}
	bm := e.ms[best]
	bestRR, bestHit := floats(bm.rr, false), floats(bm.rr, true)
	for i, m := range e.ms {
		if i == best {
			continue
		}
		out[i].Significance = &Significance{
			Test:    TestName,
			Against: bm.spec,
			K:       e.maxK,
			MRR:     Wilcoxon(floats(m.rr, false), bestRR),
			HitRate: Wilcoxon(floats(m.rr, true), bestHit),
		}
	}
	return out
}

// floats widens per-query reciprocal ranks, or turns them into hits.
func floats(rr []float32, hit bool) []float64 {
	out := make([]float64, len(rr))
	for i, v := range rr {
		switch {
		case !hit:
			out[i] = float64(v)
		case v > 0:
			out[i] = 1
		}
	}
	return out
}

// effectiveParams merges a spec's parameters with those its model's name
// reports (defaults included where the model names them).
func effectiveParams(set *models.Set, spec string) map[string]string {
	out := map[string]string{}
	if m, err := set.Get(spec); err == nil {
		if sp, err := models.ParseSpec(m.Name()); err == nil {
			maps.Copy(out, sp.Params)
		}
	}
	if sp, err := models.ParseSpec(spec); err == nil {
		maps.Copy(out, sp.Params)
	}
	return out
}
