package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strings"
)

// runTable prints Markdown tables from result files: replay reports (the
// JSON of `waymark replay --json` or `coldstart replay --json`), one row
// per model; serve results, one row per run and one table of the blocks
// with a column per run.
func runTable(_ context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("table", flag.ContinueOnError)
	fs.SetOutput(stderr)
	k := fs.Int("k", 20, "cut-off of the replay columns")
	cold := fs.Bool("cold", false, "serve blocks: cold-target HitRate instead of all targets")
	after := fs.Int("after", 0, "serve blocks: add a row summing the blocks after the first `N` (0: none)")
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if fs.NArg() == 0 {
		fmt.Fprintln(stderr, "usage: coldstart table [--k K] [--cold] RESULT.json...")
		return 2
	}
	var serves []*serveResult
	for _, path := range fs.Args() {
		b, err := os.ReadFile(path)
		if err != nil {
			fmt.Fprintln(stderr, "coldstart table:", err)
			return 1
		}
		var probe map[string]json.RawMessage
		if err := json.Unmarshal(b, &probe); err != nil {
			fmt.Fprintf(stderr, "coldstart table: %s: %v\n", path, err)
			return 1
		}
		if _, ok := probe["models"]; ok {
			if err := replayRows(stdout, b, *k, len(serves) == 0 && path == fs.Arg(0)); err != nil {
				fmt.Fprintf(stderr, "coldstart table: %s: %v\n", path, err)
				return 1
			}
			continue
		}
		var r serveResult
		if err := json.Unmarshal(b, &r); err != nil {
			fmt.Fprintf(stderr, "coldstart table: %s: %v\n", path, err)
			return 1
		}
		serves = append(serves, &r)
	}
	if len(serves) > 0 {
		serveTables(stdout, serves, *cold, *after)
	}
	return 0
}

// replayReport is the part of an eval report the table reads.
type replayReport struct {
	Models []struct {
		Name    string             `json:"name"`
		Params  map[string]string  `json:"params"`
		Queries int                `json:"queries"`
		Metrics map[string]float64 `json:"metrics"`
		Best    bool               `json:"best"`
		Cold    struct {
			Queries int                `json:"queries"`
			Metrics map[string]float64 `json:"metrics"`
		} `json:"cold"`
		Latency *struct {
			P50 float64 `json:"p50_ms"`
			P99 float64 `json:"p99_ms"`
		} `json:"latency"`
		Significance *struct {
			Against string `json:"against"`
			HitRate struct {
				MeanDiff float64 `json:"mean_diff"`
				P        float64 `json:"p"`
			} `json:"hitrate"`
		} `json:"significance"`
	} `json:"models"`
}

func replayRows(w io.Writer, b []byte, k int, header bool) error {
	var r replayReport
	if err := json.Unmarshal(b, &r); err != nil {
		return err
	}
	key := func(m string) string { return fmt.Sprintf("%s@%d", m, k) }
	if header {
		fmt.Fprintf(w, "| model | HitRate@%d | MRR@%d | NDCG@%d | Coverage@%d | cold queries | cold HitRate@%d | cold MRR@%d | HitRate@%d vs best (p) | p50 ms | p99 ms |\n", k, k, k, k, k, k, k)
		fmt.Fprintln(w, "|---|---|---|---|---|---|---|---|---|---|---|")
	}
	for _, m := range r.Models {
		name := m.Name
		if m.Best {
			name += " (best)"
		}
		cold, coldMRR := "n/a", "n/a"
		if m.Cold.Queries > 0 {
			cold, coldMRR = f4(m.Cold.Metrics[key("HitRate")]), f4(m.Cold.Metrics[key("MRR")])
		}
		vs := "best"
		if s := m.Significance; s != nil {
			vs = fmt.Sprintf("%+.4f (%.2g)", s.HitRate.MeanDiff, s.HitRate.P)
		}
		p50, p99 := "", ""
		if m.Latency != nil {
			p50, p99 = f4(m.Latency.P50), f4(m.Latency.P99)
		}
		fmt.Fprintf(w, "| %s | %s | %s | %s | %s | %d | %s | %s | %s | %s | %s |\n", strings.ReplaceAll(name, "|", "\\|"),
			f4(m.Metrics[key("HitRate")]), f4(m.Metrics[key("MRR")]), f4(m.Metrics[key("NDCG")]), f4(m.Metrics[key("Coverage")]),
			m.Cold.Queries, cold, coldMRR, vs, p50, p99)
	}
	return nil
}

func f4(v float64) string { return fmt.Sprintf("%.4f", v) }

func serveTables(w io.Writer, rs []*serveResult, cold bool, after int) {
	k := rs[0].K
	fmt.Fprintf(w, "| run | blend | explore | priors | queries | HitRate@%d | MRR@%d | cold queries | cold HitRate@%d | explore hits / shown | s |\n", k, k, k)
	fmt.Fprintln(w, "|---|---|---|---|---|---|---|---|---|---|---|")
	for _, r := range rs {
		ex, pr := "off", "none"
		if r.ExploreEvery > 0 {
			ex = fmt.Sprintf("1 per %d", r.ExploreEvery)
		}
		if r.Priors != nil {
			pr = fmt.Sprintf("weight %g (%d rows)", r.Priors.Weight, r.Priors.Rows)
		}
		if !r.Catalog {
			pr += ", no catalogue"
		}
		hs := ""
		if r.ExploreEvery > 0 {
			hs = fmt.Sprintf("%d / %d", r.Explore.Hits, r.Explore.Shown)
		}
		o := r.Overall
		fmt.Fprintf(w, "| %s | `%s` | %s | %s | %d | %s | %s | %d | %s | %s | %.0f |\n", r.Label, r.Blend, ex, pr, o.Queries,
			fmtRate(o.HitRate), fmtRate(o.MRR), o.ColdQueries, fmtRate(o.ColdHitRate), hs, r.Seconds)
	}
	what := "HitRate@"
	if cold {
		what = "cold-target HitRate@"
	}
	fmt.Fprintf(w, "\n%s%d per block (%s); queries (cold queries) from the first run\n\n| block | queries |", what, k, rs[0].BlockUnit)
	for _, r := range rs {
		fmt.Fprintf(w, " %s |", r.Label)
	}
	fmt.Fprint(w, "\n|---|---|")
	for range rs {
		fmt.Fprint(w, "---|")
	}
	fmt.Fprintln(w)
	for i, b := range rs[0].Blocks {
		fmt.Fprintf(w, "| %s | %d (%d) |", b.Label, b.Queries, b.ColdQueries)
		for _, r := range rs {
			v := "n/a"
			if i < len(r.Blocks) {
				if cold {
					v = fmtRate(r.Blocks[i].ColdHitRate)
				} else {
					v = fmtRate(r.Blocks[i].HitRate)
				}
			}
			fmt.Fprintf(w, " %s |", v)
		}
		fmt.Fprintln(w)
	}
	if after <= 0 || after >= len(rs[0].Blocks) {
		return
	}
	sums := make([]counts, len(rs))
	for j, r := range rs {
		for i := after; i < len(r.Blocks); i++ {
			b := &r.Blocks[i]
			sums[j].Queries += b.Queries
			sums[j].Hits += b.Hits
			sums[j].ColdQueries += b.ColdQueries
			sums[j].ColdHits += b.ColdHits
		}
		sums[j].finish()
	}
	fmt.Fprintf(w, "| all after the first %s | %d (%d) |", rs[0].Blocks[after-1].Label, sums[0].Queries, sums[0].ColdQueries)
	for _, s := range sums {
		if cold {
			fmt.Fprintf(w, " %s |", fmtRate(s.ColdHitRate))
		} else {
			fmt.Fprintf(w, " %s |", fmtRate(s.HitRate))
		}
	}
	fmt.Fprintln(w)
}
