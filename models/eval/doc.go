// Package eval scores next-item recommenders offline by replaying a click
// log through the same session tracker and models the service runs, in
// event time, and writes the metrics of session-based recommendation as a
// table, JSON, CSV and a self-contained HTML report.
//
// # Usage
//
//	log, err := eval.Load(ctx, []eval.Source{{Name: path, Reader: r}}, eval.LoadOptions{})
//	opts := eval.DefaultOptions()
//	opts.Models, err = eval.ExpandModels("markov,sr(window=2|5|10),blend")
//	rep, err := eval.Run(ctx, log, opts)
//	rep.WriteJSON(w, eval.OutputOptions{})
//
// Load reads every source to its end and holds the log in memory (24 bytes
// a click, names interned), sorted by event time; equal times keep the
// input order, so a replay is a function of its inputs. An event earlier
// than the one before it in its source is counted and sorted into place, or
// refused with LoadOptions.StrictOrder. Bad records are counted, never
// fatal.
//
// # One pass, one pipeline
//
// Run builds one session.Pipeline holding every model spec of the run, with
// serve's defaults (session window, inactivity timeout, half-life, caps;
// session.DefaultPipelineOptions), so a grid over a parameter and a blend's
// parts learn once in a single pass, and a model is exactly the code that
// serves. A model named alone returns only its own candidates; the blend
// includes popularity by design. Items already in the session's window are
// excluded from the answers, as serve does, unless Options.Exclude says
// otherwise.
//
// # Protocols
//
// Prequential (the default) walks the log in event time: for each click of
// a session after its first, it asks every model for the session's window
// (the query serve would answer), scores the answer against the click, then
// lets the models learn the click. Temporal learns every click before the
// split (SplitAt, or TestDays before the last event) and scores the
// sessions that start at or after it, tracking their clicks without
// learning them unless LearnDuringTest is set. A click that repeats the
// session's last item is learned as the tracker learns it but is not a
// query: the window does not change. Scoring reports how clicks turned
// into queries; Report.Scoring.Queries counts the cases scored.
//
// KFold is the sequence-prediction protocol of the sequence-prediction
// literature, as ../shared/data/README.md describes it for MSNBC:
// consecutive repeats removed, the first MaxSessions sessions of at least
// MinLength items in log order, shuffled with a fixed seed and cut into
// Folds folds; for each fold a fresh pipeline learns the other folds, and
// each test session is asked once from up to Context items before its last
// Targets items, which form the relevant set. HitRate@1 is then the
// accuracy such papers report. As in that protocol, session items are not
// excluded by default.
//
// # Targets and metrics
//
// With TargetNext the relevant set is the next click; with TargetRest it is
// the distinct items of the session's remaining clicks. At every cut-off K:
// HitRate@K (a relevant item in the top K), MRR@K (1/rank of the first, 0
// past K), NDCG@K (binary gains, discount 1/log2(rank+1), over the ideal
// list), Precision@K (relevant items in the top K over K), Recall@K (over
// the relevant set), Coverage@K (share of the replayed items, for kfold of
// the selected sessions' items, ever recommended in a top K) and
// Popularity@K (mean, over queries that got an answer, of the recommended
// items' learned click count over the most clicked item's, at query time:
// a popularity-bias measure). The metric
// functions are checked against scikit-learn (testdata/gen_sklearn.py).
//
// The same HitRate and MRR are reported for queries whose next item was
// cold (fewer than ColdThreshold learned clicks when asked) and by session
// position (the query after the session's 1st, 2nd, 3rd, and 4th or later
// click).
//
// # Significance
//
// The model with the highest MRR at the largest K is the best; each other
// model is compared with it query by query on reciprocal rank and on hit at
// that K with the Wilcoxon signed-rank test (TestName says the variant;
// checked against SciPy), reported with the mean paired difference and its
// 95 % normal-approximation interval.
//
// # Preprocessing
//
// Nothing is dropped by default, since serve learns everything. The
// session-based literature drops sessions of one click (MinSessionLength
// 2) and items with fewer than five clicks (MinItemSupport 5), and for a
// temporal split test clicks on items training never saw (DropUnseen).
// Items are filtered first, then sessions; each drop is counted in
// Report.Preprocessing.
//
// # Determinism
//
// The same log and options give byte-identical JSON and CSV: maps are
// written with sorted keys, ties in rankings break by item id in the
// models, the kfold shuffle uses a seeded PCG, and wall-time latency
// (p50, p99 of the models' Recommend calls) is left out unless
// OutputOptions.Timings asks for it. The terminal table always shows it.
//
// Two parts run on a second goroutine without changing a result: Load
// decodes each source there while the caller's goroutine interns in the
// order read, and a prequential or temporal Run tallies the metrics there
// while its own goroutine asks the models and teaches them, in turn, in
// event order; each hand-over is in order, so the results are those of
// one goroutine.
package eval
