package main

import (
	"compress/gzip"
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"waymark/stream"
)

// testLog writes a small invented shop's clicks and catalogue: 40 items in
// four categories, 10 of them launched halfway, sessions that stay in a
// category; returns the events file and the catalogue file.
func testLog(t *testing.T) (string, string) {
	t.Helper()
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(5, 6))
	t0 := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC).UnixMilli()
	half := t0 + 6*time.Hour.Milliseconds()
	var cat strings.Builder
	for i := range 40 {
		pub := t0
		if i >= 30 {
			pub = half + int64(i)*60_000
		}
		r := stream.ItemRecord{Item: fmt.Sprintf("it-%02d", i), Published: pub,
			Attrs: map[string][]string{"category": {fmt.Sprintf("shelf/c%d", i%4)}, "tags": {fmt.Sprintf("tone%d", i%3)}}}
		cat.Write(append(r.AppendJSON(nil), '\n'))
	}
	catPath := filepath.Join(dir, "catalog.jsonl")
	if err := os.WriteFile(catPath, []byte(cat.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	evPath := filepath.Join(dir, "events.jsonl.gz")
	f, err := os.Create(evPath)
	if err != nil {
		t.Fatal(err)
	}
	zw := gzip.NewWriter(f)
	ts := t0 + 1000
	for s := range 400 {
		c := rng.IntN(4)
		for range 2 + rng.IntN(5) {
			i := c + 4*rng.IntN(10) // items of category c
			if i >= 30 && ts < half+int64(i)*60_000 {
				i -= 12 // not launched yet: an older item of the same category
			}
			ev := stream.Event{Session: fmt.Sprintf("v%03d", s), Item: fmt.Sprintf("it-%02d", i), TS: ts}
			zw.Write(append(ev.AppendJSON(nil), '\n'))
			ts += 20_000
		}
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	if err := f.Close(); err != nil {
		t.Fatal(err)
	}
	return evPath, catPath
}

// The serve engine, driven as `coldstart serve` drives it, must score
// exactly what the replay evaluator scores when the blend alone answers:
// that is what makes the priors and exploration runs comparable with
// replay's tables.
func TestServeAgreesWithReplay(t *testing.T) {
	ctx := context.Background()
	ev, cat := testLog(t)
	for _, blend := range []string{"blend", "blend(sr=1,content=1)"} {
		t.Run(blend, func(t *testing.T) {
			cl, err := load(ctx, []string{ev}, loadOptions{fileCatalog: true, catalogFiles: []string{cat}}, os.Stderr)
			if err != nil {
				t.Fatal(err)
			}
			g, err := newEngine(ctx, engineConfig{blend: blend})
			if err != nil {
				t.Fatal(err)
			}
			defer g.close()
			res := &serveResult{K: 5}
			if err := score(ctx, g, cl, res, 5, time.Hour, 0, 4); err != nil {
				t.Fatal(err)
			}
			c, err := evalCheck(ctx, cl, blend, 5, 5)
			if err != nil {
				t.Fatal(err)
			}
			o := res.Overall
			if o.Queries == 0 || o.ColdQueries == 0 || o.HitRate == nil {
				t.Fatalf("queries %d, cold %d: the log should give both", o.Queries, o.ColdQueries)
			}
			if c.EvalQueries != o.Queries || math.Abs(c.EvalHitRate-*o.HitRate) > 1e-12 || math.Abs(c.EvalMRR-*o.MRR) > 1e-12 {
				t.Fatalf("engine: %d queries, HitRate@5 %v, MRR@5 %v; replay evaluator: %d, %v, %v",
					o.Queries, *o.HitRate, *o.MRR, c.EvalQueries, c.EvalHitRate, c.EvalMRR)
			}
			sum := 0
			for _, b := range res.Blocks {
				sum += b.Queries
			}
			if sum != o.Queries {
				t.Fatalf("blocks hold %d queries, overall %d", sum, o.Queries)
			}
		})
	}
}

func TestLoadAppliesRecordsAtPublication(t *testing.T) {
	ev, cat := testLog(t)
	cl, err := load(context.Background(), []string{ev}, loadOptions{catalogFiles: []string{cat}}, os.Stderr)
	if err != nil {
		t.Fatal(err)
	}
	if cl.records+cl.late != 40 || cl.bad != 0 {
		t.Fatalf("records %d + late %d, bad %d; want 40 records, none bad", cl.records, cl.late, cl.bad)
	}
	seen := map[string]bool{}
	for i, e := range cl.entries {
		for _, r := range e.recs {
			if r.Published > e.ev.TS {
				t.Fatalf("entry %d: record %s published at %d applied before a click at %d", i, r.Item, r.Published, e.ev.TS)
			}
			if i > 0 && r.Published <= cl.entries[i-1].ev.TS {
				t.Fatalf("entry %d: record %s was due before the previous click", i, r.Item)
			}
			seen[r.Item] = true
		}
		if !seen[e.ev.Item] {
			t.Fatalf("entry %d clicks %s before its record", i, e.ev.Item)
		}
	}
}

func TestReadPriors(t *testing.T) {
	dir := t.TempDir()
	pf := filepath.Join(dir, "priors.jsonl")
	mf := filepath.Join(dir, "ids.csv")
	os.WriteFile(pf, []byte(`{"format":"waymark-priors","version":1,"items":3}
{"model":"iknn","item":"A","neighbors":[{"item":"B","weight":1},{"item":"C","weight":0.5}]}
{"model":"markov","item":"A","neighbors":[{"item":"C","weight":1}]}
{"model":"iknn","item":"C","neighbors":[{"item":"A","weight":1}]}
{"model":"iknn","item":"B","neighbors":[{"item":"C","weight":1}]}
`), 0o644)
	os.WriteFile(mf, []byte("from,to\nA,x1\nB,x2\n"), 0o644)
	cases := []struct {
		name    string
		o       importOptions
		rows    int
		dropped int
		first   string // first row as item:neighbour=weight,...
	}{
		{"map drops unmapped", importOptions{mapFile: mf, unmapped: "drop", weight: 0.5}, 1, 3, "x1:x2=0.5"},
		{"map keeps unmapped", importOptions{mapFile: mf, unmapped: "keep", weight: 0.5}, 4, 0, "x1:x2=0.5,C=0.25"},
		{"one model", importOptions{mapFile: mf, unmapped: "keep", weight: 1, models: "markov"}, 1, 0, "x1:C=1"},
		{"no map", importOptions{unmapped: "drop", weight: 1}, 4, 0, "A:B=1,C=0.5"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			rows, dropped, err := readPriors(pf, c.o)
			if err != nil {
				t.Fatal(err)
			}
			if len(rows) != c.rows || dropped != c.dropped {
				t.Fatalf("rows %d dropped %d, want %d and %d", len(rows), dropped, c.rows, c.dropped)
			}
			var parts []string
			for _, n := range rows[0].Neighbors {
				parts = append(parts, fmt.Sprintf("%s=%g", n.Item, n.Weight))
			}
			if got := rows[0].Item + ":" + strings.Join(parts, ","); got != c.first {
				t.Fatalf("first row %s, want %s", got, c.first)
			}
		})
	}
	t.Run("bad header", func(t *testing.T) {
		bad := filepath.Join(dir, "bad.jsonl")
		os.WriteFile(bad, []byte(`{"format":"other","version":1}`+"\n"), 0o644)
		if _, _, err := readPriors(bad, importOptions{unmapped: "drop", weight: 1}); err == nil || !strings.Contains(err.Error(), "header") {
			t.Fatalf("error %v, want one about the header", err)
		}
	})
}
