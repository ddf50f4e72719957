package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"strings"
	"time"

	"waymark/models"
	"waymark/models/eval"
	"waymark/session"
	"waymark/stream"
	"waymark/stream/dataset"
)

// serveResult is what `coldstart serve` writes as JSON.
type serveResult struct {
	Label        string  `json:"label"`
	Inputs       string  `json:"inputs"`
	Blend        string  `json:"blend"`
	ExploreEvery int     `json:"explore_every"`
	ExploreSeed  uint64  `json:"explore_seed,omitempty"`
	Catalog      bool    `json:"catalog"`
	Priors       *priors `json:"priors,omitempty"`
	K            int     `json:"k"`
	Clicks       int     `json:"clicks"`
	Overall      counts  `json:"overall"`
	Explore      struct {
		// Shown counts explore-slot items answered; Hits those that
		// were the next click.
		Shown int `json:"shown"`
		Hits  int `json:"hits"`
		// Impressions counts fresh items recorded as served.
		Impressions int `json:"impressions"`
	} `json:"explore"`
	BlockUnit string  `json:"block_unit"`
	Blocks    []block `json:"blocks"`
	Check     *check  `json:"check,omitempty"`
	Seconds   float64 `json:"seconds"`
}

type priors struct {
	File    string  `json:"file"`
	Map     string  `json:"map,omitempty"`
	Weight  float64 `json:"weight"`
	Rows    int     `json:"rows"`
	Dropped int     `json:"dropped"`
}

// counts accumulate one group of queries; a rate is absent (null) for an
// empty group.
type counts struct {
	Queries     int      `json:"queries"`
	Hits        int      `json:"hits"`
	HitRate     *float64 `json:"hitrate"`
	MRR         *float64 `json:"mrr"`
	ColdQueries int      `json:"cold_queries"`
	ColdHits    int      `json:"cold_hits"`
	ColdHitRate *float64 `json:"cold_hitrate"`
	rr          float64
}

func (c *counts) add(rank int, cold bool) {
	c.Queries++
	if cold {
		c.ColdQueries++
	}
	if rank > 0 {
		c.Hits++
		c.rr += 1 / float64(rank)
		if cold {
			c.ColdHits++
		}
	}
}

func (c *counts) finish() {
	c.HitRate = ratio(float64(c.Hits), c.Queries)
	c.MRR = ratio(c.rr, c.Queries)
	c.ColdHitRate = ratio(float64(c.ColdHits), c.ColdQueries)
}

func ratio(a float64, b int) *float64 {
	if b == 0 {
		return nil
	}
	v := a / float64(b)
	return &v
}

type block struct {
	Label string `json:"label"`
	counts
}

// check compares the engine's figures with the replay evaluator's on the
// same log: they must agree when nothing but the blend answers.
type check struct {
	EvalHitRate float64 `json:"eval_hitrate"`
	EvalMRR     float64 `json:"eval_mrr"`
	EvalQueries int     `json:"eval_queries"`
	Equal       bool    `json:"equal"`
}

func runServe(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("serve", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var catFiles stringList
	fs.Var(&catFiles, "catalog-file", "catalogue records (JSON lines) applied at their published time; repeatable")
	fileCat := fs.Bool("catalog", true, "apply catalogue records (the event files' and --catalog-file's); false: none")
	format := fs.String("format", dataset.FormatAuto, "input `format` of the event files")
	label := fs.String("label", "", "`name` of the run in tables")
	blend := fs.String("blend", models.DefaultBlendSpec, "the engine's blend `spec`")
	explore := fs.Int("explore-every", 0, "one exploration slot per this many answers (serve's default is 10; 0: off)")
	seed := fs.Uint64("explore-seed", 1, "seed of the exploration draws")
	priorsFile := fs.String("priors", "", "priors `file` to import before the first event (as `waymark priors import`)")
	var imp importOptions
	fs.StringVar(&imp.mapFile, "map", "", "CSV `file` of from,to item ids for --priors")
	fs.StringVar(&imp.unmapped, "unmapped", "drop", "items missing from the map: drop or keep")
	fs.Float64Var(&imp.weight, "weight", 0.5, "scale of the imported weights (waymark priors import's default)")
	fs.StringVar(&imp.models, "prior-models", "", "exporting models to take from --priors (default all)")
	k := fs.Int("k", 20, "answers per query; HitRate@K and MRR@K")
	coldT := fs.Int("cold-threshold", eval.DefaultOptions().ColdThreshold, "a target is cold with fewer learned clicks than this")
	blockDur := fs.Duration("block", time.Hour, "block length in event time since the first click")
	blockEv := fs.Int("block-events", 0, "block length in clicks instead of time (0: use --block)")
	nBlocks := fs.Int("blocks", 12, "blocks reported one by one; later clicks form one last block")
	doCheck := fs.Bool("check", false, "also run the replay evaluator on the same log and compare (no priors, no exploration)")
	jsonOut := fs.String("json", "", "write the result as JSON to `file`")
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	fail := func(code int, err error) int {
		fmt.Fprintln(stderr, "coldstart serve:", err)
		return code
	}
	switch {
	case fs.NArg() == 0:
		fmt.Fprintln(stderr, "usage: coldstart serve [flags] EVENTS...")
		return 2
	case *k < 1 || *coldT < 1 || *nBlocks < 1 || *blockEv < 0 || *blockDur <= 0:
		return fail(2, fmt.Errorf("--k, --cold-threshold and --blocks must be >= 1, --block-events >= 0, --block > 0"))
	case *doCheck && (*priorsFile != "" || *explore > 0):
		return fail(2, fmt.Errorf("--check compares the blend alone: no --priors, no --explore-every"))
	}
	start := time.Now()
	lo := loadOptions{format: *format, fileCatalog: *fileCat}
	if *fileCat {
		lo.catalogFiles = catFiles
	}
	cl, err := load(ctx, fs.Args(), lo, stderr)
	if err != nil {
		return fail(1, err)
	}
	if len(cl.entries) == 0 {
		return fail(1, fmt.Errorf("no clicks in %s", strings.Join(fs.Args(), ", ")))
	}
	g, err := newEngine(ctx, engineConfig{blend: *blend, exploreEvery: *explore, exploreSeed: *seed})
	if err != nil {
		return fail(2, err)
	}
	defer g.close()
	res := &serveResult{Label: *label, Inputs: strings.Join(append(fs.Args(), catFiles...), " "), Blend: *blend,
		ExploreEvery: *explore, Catalog: *fileCat, K: *k, Clicks: len(cl.entries)}
	if *explore > 0 {
		res.ExploreSeed = *seed
	}
	if *priorsFile != "" {
		rows, dropped, err := readPriors(*priorsFile, imp)
		if err != nil {
			return fail(1, err)
		}
		for _, r := range rows {
			if err := g.sendControl(ctx, stream.Control{Prior: &r}); err != nil {
				return fail(1, err)
			}
		}
		res.Priors = &priors{File: *priorsFile, Map: imp.mapFile, Weight: imp.weight, Rows: len(rows), Dropped: dropped}
	}
	if err := score(ctx, g, cl, res, *coldT, *blockDur, *blockEv, *nBlocks); err != nil {
		return fail(1, err)
	}
	if err := g.rejected(); err != nil {
		return fail(1, err)
	}
	if *doCheck {
		c, err := evalCheck(ctx, cl, *blend, *k, *coldT)
		if err != nil {
			return fail(1, err)
		}
		c.Equal = c.EvalQueries == res.Overall.Queries && res.Overall.HitRate != nil && math.Abs(c.EvalHitRate-*res.Overall.HitRate) < 1e-9
		res.Check = c
	}
	res.Seconds = math.Round(time.Since(start).Seconds()*10) / 10
	writeServe(stdout, res)
	if *jsonOut != "" {
		b, err := json.MarshalIndent(res, "", "  ")
		if err == nil {
			err = os.WriteFile(*jsonOut, append(b, '\n'), 0o644)
		}
		if err != nil {
			return fail(1, err)
		}
	}
	if res.Check != nil && !res.Check.Equal {
		return fail(1, fmt.Errorf("the engine and the replay evaluator disagree (see above)"))
	}
	return 0
}

// score replays the log through the engine, test then learn, as the replay
// evaluator's prequential protocol does: a query for every click of a
// session instance after its first, except a repeat of the previous click;
// the target is that click; a target is cold with fewer than coldT learned
// clicks. Exploration slots, when on, are recorded as serve records them.
func score(ctx context.Context, g *engine, cl *clickLog, res *serveResult, coldT int, blockDur time.Duration, blockEv, nBlocks int) error {
	timeout := g.opts.Pipeline.Tracker.Timeout.Milliseconds()
	type inst struct {
		last int64
		item string
		pos  int
	}
	sess := map[string]*inst{}
	learned := map[string]int{}
	blocks := make([]block, nBlocks+1)
	t0 := cl.entries[0].ev.TS
	for i := range blocks {
		switch {
		case i == nBlocks && blockEv > 0:
			blocks[i].Label = fmt.Sprintf("clicks %d+", nBlocks*blockEv+1)
		case i == nBlocks:
			blocks[i].Label = fmtDur(blockDur*time.Duration(nBlocks)) + "+"
		case blockEv > 0:
			blocks[i].Label = fmt.Sprintf("clicks %d-%d", i*blockEv+1, (i+1)*blockEv)
		default:
			blocks[i].Label = fmtDur(blockDur*time.Duration(i)) + "-" + fmtDur(blockDur*time.Duration(i+1))
		}
	}
	res.BlockUnit = "hours since the first click"
	if blockEv > 0 {
		res.BlockUnit = "clicks since the first"
	}
	for i := range cl.entries {
		if i%4096 == 0 && ctx.Err() != nil {
			return ctx.Err()
		}
		en := &cl.entries[i]
		for j := range en.recs {
			if err := g.sendItem(ctx, &en.recs[j]); err != nil {
				return err
			}
		}
		ev := &en.ev
		s := sess[ev.Session]
		if s == nil || ev.TS-s.last > timeout {
			s = &inst{}
			sess[ev.Session] = s
		}
		if s.pos > 0 && s.item != ev.Item {
			r := g.e.Next(session.NextRequest{Session: ev.Session, K: res.K})
			rank := 0
			var served []string
			for j, it := range r.Items {
				if it.Item == ev.Item && rank == 0 {
					rank = j + 1
					if it.Explore {
						res.Explore.Hits++
					}
				}
				if it.Explore {
					res.Explore.Shown++
				}
				served = append(served, it.Item) // the simulated visitor sees the whole list
			}
			cold := learned[ev.Item] < coldT
			res.Overall.add(rank, cold)
			b := int((ev.TS - t0) / blockDur.Milliseconds())
			if blockEv > 0 {
				b = i / blockEv
			}
			blocks[min(b, nBlocks)].add(rank, cold)
			// What a caller reports with POST /v1/shown after displaying
			// the answer, so the exploration model counts impressions of
			// the fresh items and credits a later click.
			if g.opts.ExploreShare > 0 && len(served) > 0 {
				res.Explore.Impressions += countFresh(r.Items)
				if err := g.sendControl(ctx, stream.Control{Served: &stream.Served{Session: ev.Session, Items: served, TS: r.TS, Request: r.Request}}); err != nil {
					return err
				}
			}
		}
		if err := g.sendEvent(ctx, ev); err != nil {
			return err
		}
		learned[ev.Item]++
		if s.item != ev.Item {
			s.pos++
			s.item = ev.Item
		}
		s.last = max(s.last, ev.TS)
	}
	res.Overall.finish()
	for i := range blocks {
		blocks[i].finish()
	}
	res.Blocks = blocks
	return nil
}

// evalCheck runs the replay evaluator on the same clicks and records.
func evalCheck(ctx context.Context, cl *clickLog, blend string, k, coldT int) (*check, error) {
	log, err := eval.Load(ctx, []eval.Source{{Name: "check", Reader: &memReader{es: cl.entries}}}, eval.LoadOptions{Catalog: true})
	if err != nil {
		return nil, err
	}
	o := eval.DefaultOptions()
	o.Models, o.K, o.ColdThreshold = []string{blend}, []int{k}, coldT
	rep, err := eval.Run(ctx, log, o)
	if err != nil {
		return nil, err
	}
	m := rep.Models[0]
	return &check{EvalHitRate: m.Metrics[eval.Key("HitRate", k)], EvalMRR: m.Metrics[eval.Key("MRR", k)], EvalQueries: int(m.Queries)}, nil
}

// fmtDur writes whole hours as "3h", anything else as Go does.
func fmtDur(d time.Duration) string {
	if d%time.Hour == 0 {
		return fmt.Sprintf("%dh", d/time.Hour)
	}
	return d.String()
}

func fmtRate(v *float64) string {
	if v == nil {
		return "n/a"
	}
	return fmt.Sprintf("%.4f", *v)
}

func writeServe(w io.Writer, r *serveResult) {
	fmt.Fprintf(w, "%s: blend %s, explore-every %d", r.Label, r.Blend, r.ExploreEvery)
	if r.Priors != nil {
		fmt.Fprintf(w, ", priors %s (weight %g, %d rows, %d dropped)", r.Priors.File, r.Priors.Weight, r.Priors.Rows, r.Priors.Dropped)
	}
	fmt.Fprintf(w, "\n  %d clicks, %d queries: HitRate@%d %s, MRR@%d %s; cold %d: HitRate@%d %s\n",
		r.Clicks, r.Overall.Queries, r.K, fmtRate(r.Overall.HitRate), r.K, fmtRate(r.Overall.MRR), r.Overall.ColdQueries, r.K, fmtRate(r.Overall.ColdHitRate))
	if r.ExploreEvery > 0 {
		fmt.Fprintf(w, "  explore slots shown %d, hit %d; fresh impressions recorded %d\n", r.Explore.Shown, r.Explore.Hits, r.Explore.Impressions)
	}
	for _, b := range r.Blocks {
		fmt.Fprintf(w, "  %-16s %6d queries  HitRate@%d %s  cold %5d  %s\n", b.Label, b.Queries, r.K, fmtRate(b.HitRate), b.ColdQueries, fmtRate(b.ColdHitRate))
	}
	if c := r.Check; c != nil {
		fmt.Fprintf(w, "  check: replay evaluator %d queries, HitRate@%d %s, MRR@%d %s; equal: %v\n", c.EvalQueries, r.K, fmtRate(&c.EvalHitRate), r.K, fmtRate(&c.EvalMRR), c.Equal)
	}
	fmt.Fprintf(w, "  %.1f s\n", r.Seconds)
}

// countFresh counts the answer's fresh items: the impressions a report of
// the whole list records.
func countFresh(items []session.Recommendation) int {
	n := 0
	for _, it := range items {
		if it.Fresh {
			n++
		}
	}
	return n
}
