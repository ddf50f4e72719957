// Command growth measures cost growth (issue 6, figure 10): ingest rate,
// query p99 and memory of the in-process pipeline serve runs by default
// (tracker, markov, sr, iknn, content, prior, popularity, catalogue, fresh-item
// statistics) as it learns 1M, 10M, 50M synthetic events over 100k items.
// The bare pair counter learns the same events in a child process, chunk
// by chunk in turn with the pipeline (A B A B per chunk), so each process's
// memory is its own: waymark's stays bounded by its caps, the bare map's
// grows with the stream. It writes a table and an SVG plot.
//
//	go run ./bench/cmd/growth --checkpoints 1000000,10000000,50000000 --svg bench/growth.svg
package main

import (
	"bufio"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"os/exec"
	"runtime"
	"strconv"
	"strings"
	"time"

	"waymark/bench/abab"
	"waymark/bench/bare"
	"waymark/bench/synth"
	"waymark/models"
	"waymark/session"
	"waymark/stream"
)

const chunk = 1_000_000

func main() {
	if len(os.Args) > 1 && os.Args[1] == "bare" {
		if err := bareChild(os.Args[2:]); err != nil {
			fmt.Fprintln(os.Stderr, "growth bare:", err)
			os.Exit(1)
		}
		return
	}
	cps := flag.String("checkpoints", "1000000,10000000,50000000", "learned events at which to measure, comma-separated, increasing, multiples of 1M")
	items := flag.Int("items", 100_000, "catalogue size")
	models_ := flag.String("models", "blend,fresh", "model specs (serve's default set)")
	nq := flag.Int("queries", 2000, "queries (5-click sessions) per checkpoint")
	svg := flag.String("svg", "", "write the plot to `file`")
	noBare := flag.Bool("no-bare", false, "skip the bare child")
	out := flag.String("json", "", "append figures as JSON lines to `file`")
	flag.Parse()
	rec, closeRec, err := abab.NewRecorder(*out, "growth")
	if err != nil {
		fail(err)
	}
	defer closeRec()
	var checkpoints []int
	for _, f := range strings.Split(*cps, ",") {
		v, err := strconv.Atoi(f)
		if err != nil || v%chunk != 0 {
			fail(fmt.Errorf("checkpoint %q: want a multiple of %d", f, chunk))
		}
		checkpoints = append(checkpoints, v)
	}
	o := session.DefaultPipelineOptions()
	o.Models = strings.Split(*models_, ",")
	p, err := session.NewPipeline(o)
	if err != nil {
		fail(err)
	}
	blend, _ := p.Recommender("blend")
	gopts := synth.Options{Items: *items, Concurrent: 1000}
	gen := synth.NewGen(gopts)
	var child *bareProc
	if !*noBare {
		if child, err = startBare(*items); err != nil {
			fail(err)
		}
		defer child.close()
	}
	queries := makeQueries(*items, *nq)
	buf := make([]stream.Event, chunk)
	var rows []row
	learned := 0
	var segA, segB time.Duration
	segStart := 0
	fmt.Printf("growth: models %v, %d items, checkpoints %v\n", o.Models, *items, checkpoints)
	for _, cp := range checkpoints {
		for learned < cp {
			for i := range buf {
				buf[i] = gen.Next()
			}
			if child != nil {
				d, err := child.chunk()
				if err != nil {
					fail(err)
				}
				segB += d
			}
			start := time.Now()
			for i := range buf {
				p.Apply(&buf[i])
			}
			segA += time.Since(start)
			learned += chunk
			if learned%(10*chunk) == 0 {
				fmt.Fprintf(os.Stderr, "  %dM learned\n", learned/chunk)
			}
		}
		r := row{Events: cp, Rate: float64(cp-segStart) / segA.Seconds()}
		if child != nil {
			r.BareRate = float64(cp-segStart) / segB.Seconds()
			st, err := child.stats()
			if err != nil {
				fail(err)
			}
			r.BareRSS, r.BarePairs = st.RSS, st.Pairs
		}
		segA, segB, segStart = 0, 0, cp
		r.Heap = bare.HeapInUse()
		r.RSS = bare.RSS()
		ds := make([]time.Duration, len(queries))
		dst := make([]models.Scored, 0, 20)
		for i, s := range queries {
			t := time.Now()
			q := p.NewQuery(s, 0)
			dst = blend.Recommend(&q, 20, nil, dst[:0])
			ds[i] = time.Since(t)
		}
		lat := abab.Summarize(ds)
		r.P50, r.P99 = lat.P50, lat.P99
		r.Items, r.Sessions = p.Dict.Len(), p.Tracker.Len()
		if m, err := p.Set.Get("iknn"); err == nil {
			r.Pairs = m.(*models.IKNN).Pairs()
		}
		rows = append(rows, r)
		fmt.Printf("  %s events: ingest %s events/s (bare %s), blend p50 %.0fµs p99 %.0fµs, heap %d MB, RSS %d MB (bare RSS %d MB, %d pairs), iknn pairs %d, sessions %d\n",
			abab.Fmt(float64(cp)), abab.Fmt(r.Rate), abab.Fmt(r.BareRate), r.P50, r.P99, r.Heap>>20, r.RSS>>20, r.BareRSS>>20, r.BarePairs, r.Pairs, r.Sessions)
		rec.Record(fmt.Sprintf("growth at %d", cp), r)
	}
	if *noBare {
		fmt.Println("\n| learned events | ingest events/s | blend p50 µs | blend p99 µs | Go heap MB | RSS MB | iknn pairs | sessions |")
		fmt.Println("|---|---|---|---|---|---|---|---|")
		for _, r := range rows {
			fmt.Printf("| %s | %s | %.0f | %.0f | %d | %d | %d | %d |\n", abab.Fmt(float64(r.Events)), abab.Fmt(r.Rate), r.P50, r.P99, r.Heap>>20, r.RSS>>20, r.Pairs, r.Sessions)
		}
	}
	if !*noBare {
		fmt.Println("\n| learned events | ingest events/s | bare events/s | ratio | blend p50 µs | blend p99 µs | Go heap MB | RSS MB | bare RSS MB |")
		fmt.Println("|---|---|---|---|---|---|---|---|---|")
	}
	for _, r := range rows {
		if *noBare {
			break
		}
		ratio := 0.0
		if r.BareRate > 0 {
			ratio = r.Rate / r.BareRate
		}
		fmt.Printf("| %s | %s | %s | %.3f | %.0f | %.0f | %d | %d | %d |\n", abab.Fmt(float64(r.Events)), abab.Fmt(r.Rate), abab.Fmt(r.BareRate), ratio, r.P50, r.P99, r.Heap>>20, r.RSS>>20, r.BareRSS>>20)
	}
	if *svg != "" {
		if err := os.WriteFile(*svg, plot(rows), 0o644); err != nil {
			fail(err)
		}
		fmt.Println("plot:", *svg)
	}
}

type row struct {
	Events    int     `json:"events"`
	Rate      float64 `json:"events_per_s"` // over the segment since the previous checkpoint
	BareRate  float64 `json:"bare_events_per_s"`
	P50, P99  float64 // µs, blend, 5-click sessions, k=20
	Heap, RSS int64
	BareRSS   int64 `json:"bare_rss"`
	BarePairs int   `json:"bare_pairs"`
	Pairs     int   `json:"iknn_pairs"`
	Items     int   `json:"items"`
	Sessions  int   `json:"sessions"`
}

func makeQueries(items, n int) [][]string {
	g := synth.NewGen(synth.Options{Items: items, Seed: 5, SessionPrefix: "q"})
	out := make([][]string, n)
	for i := range out {
		s := make([]string, 5)
		for j := range s {
			s[j] = g.Next().Item
		}
		out[i] = s
	}
	return out
}

// ---- the bare child: same generator, counts a chunk per "go" line ----

type bareStats struct {
	NS    int64 `json:"ns"`
	RSS   int64 `json:"rss"`
	Pairs int   `json:"pairs"`
}

type bareProc struct {
	cmd *exec.Cmd
	in  io.WriteCloser
	out *bufio.Scanner
}

func startBare(items int) (*bareProc, error) {
	exe, err := os.Executable()
	if err != nil {
		return nil, err
	}
	cmd := exec.Command(exe, "bare", strconv.Itoa(items))
	cmd.Stderr = os.Stderr
	in, err := cmd.StdinPipe()
	if err != nil {
		return nil, err
	}
	out, err := cmd.StdoutPipe()
	if err != nil {
		return nil, err
	}
	if err := cmd.Start(); err != nil {
		return nil, err
	}
	return &bareProc{cmd: cmd, in: in, out: bufio.NewScanner(out)}, nil
}

func (b *bareProc) ask(cmd string) (bareStats, error) {
	var st bareStats
	if _, err := fmt.Fprintln(b.in, cmd); err != nil {
		return st, err
	}
	if !b.out.Scan() {
		return st, fmt.Errorf("bare child ended")
	}
	return st, json.Unmarshal(b.out.Bytes(), &st)
}

func (b *bareProc) chunk() (time.Duration, error) {
	st, err := b.ask("go")
	return time.Duration(st.NS), err
}

func (b *bareProc) stats() (bareStats, error) { return b.ask("stats") }

func (b *bareProc) close() { b.in.Close(); b.cmd.Wait() }

func bareChild(args []string) error {
	items, err := strconv.Atoi(args[0])
	if err != nil {
		return err
	}
	gen := synth.NewGen(synth.Options{Items: items, Concurrent: 1000})
	c := bare.NewPairCounter()
	buf := make([]stream.Event, chunk)
	in := bufio.NewScanner(os.Stdin)
	enc := json.NewEncoder(os.Stdout)
	for in.Scan() {
		switch in.Text() {
		case "go":
			for i := range buf {
				buf[i] = gen.Next()
			}
			runtime.GC()
			start := time.Now()
			for i := range buf {
				c.Add(&buf[i])
			}
			enc.Encode(bareStats{NS: int64(time.Since(start))})
		case "stats":
			enc.Encode(bareStats{RSS: bare.RSS(), Pairs: c.Pairs()})
		}
	}
	return in.Err()
}

// plot draws rate, p99 and memory against learned events as three small
// panels of one SVG (log scale on x).
func plot(rows []row) []byte {
	var b strings.Builder
	const W, H, pw, ph, left, top = 960, 320, 260, 220, 60, 40
	fmt.Fprintf(&b, `<svg xmlns="http://www.w3.org/2000/svg" width="%d" height="%d" font-family="sans-serif" font-size="12">`+"\n", W, H)
	fmt.Fprintf(&b, `<rect width="%d" height="%d" fill="white"/>`+"\n", W, H)
	type series struct {
		name  string
		color string
		vals  []float64
	}
	panels := []struct {
		title string
		unit  string
		s     []series
	}{
		{"ingest rate (in process)", "events/s", []series{{"waymark", "#1f77b4", col(rows, func(r row) float64 { return r.Rate })}, {"bare map", "#999", col(rows, func(r row) float64 { return r.BareRate })}}},
		{"query p99 (blend, 5 clicks, k=20)", "µs", []series{{"waymark", "#d62728", col(rows, func(r row) float64 { return r.P99 })}}},
		{"resident memory", "MB", []series{{"waymark", "#2ca02c", col(rows, func(r row) float64 { return float64(r.RSS >> 20) })}, {"bare map", "#999", col(rows, func(r row) float64 { return float64(r.BareRSS >> 20) })}}},
	}
	xs := col(rows, func(r row) float64 { return float64(r.Events) })
	lx := func(v float64) float64 { return logf(v) }
	xmin, xmax := lx(xs[0]), lx(xs[len(xs)-1])
	if xmax == xmin {
		xmax = xmin + 1
	}
	for pi, pn := range panels {
		x0 := float64(left + pi*(pw+60))
		y0 := float64(top)
		ymax := 0.0
		for _, s := range pn.s {
			for _, v := range s.vals {
				ymax = max(ymax, v)
			}
		}
		if ymax == 0 {
			ymax = 1
		}
		ymax *= 1.1
		fmt.Fprintf(&b, `<text x="%.0f" y="%.0f" font-weight="bold">%s</text>`+"\n", x0, y0-15, pn.title)
		fmt.Fprintf(&b, `<rect x="%.0f" y="%.0f" width="%d" height="%d" fill="none" stroke="#333"/>`+"\n", x0, y0, pw, ph)
		fmt.Fprintf(&b, `<text x="%.0f" y="%.0f" text-anchor="end">%s</text>`+"\n", x0-4, y0+8, abab.Fmt(ymax))
		fmt.Fprintf(&b, `<text x="%.0f" y="%.0f" text-anchor="end">0</text>`+"\n", x0-4, y0+ph)
		fmt.Fprintf(&b, `<text x="%.0f" y="%.0f" transform="rotate(-90 %.0f %.0f)" text-anchor="middle">%s</text>`+"\n", x0-45, y0+ph/2, x0-45, y0+ph/2, pn.unit)
		px := func(v float64) float64 { return x0 + 10 + (lx(v)-xmin)/(xmax-xmin)*(pw-20) }
		py := func(v float64) float64 { return y0 + ph - v/ymax*ph }
		for _, x := range xs {
			fmt.Fprintf(&b, `<text x="%.1f" y="%.0f" text-anchor="middle">%s</text>`+"\n", px(x), y0+ph+15, abab.Fmt(x))
		}
		for si, s := range pn.s {
			var pts []string
			for i, v := range s.vals {
				if v == 0 {
					continue
				}
				pts = append(pts, fmt.Sprintf("%.1f,%.1f", px(xs[i]), py(v)))
				fmt.Fprintf(&b, `<circle cx="%.1f" cy="%.1f" r="3" fill="%s"/>`+"\n", px(xs[i]), py(v), s.color)
			}
			fmt.Fprintf(&b, `<polyline points="%s" fill="none" stroke="%s" stroke-width="2"/>`+"\n", strings.Join(pts, " "), s.color)
			fmt.Fprintf(&b, `<text x="%.0f" y="%.0f" fill="%s">%s</text>`+"\n", x0+pw-80, y0+15+float64(si)*14, s.color, s.name)
		}
	}
	fmt.Fprintf(&b, `<text x="%d" y="%d" text-anchor="middle">learned events (log scale)</text>`+"\n", W/2, H-8)
	b.WriteString("</svg>\n")
	return []byte(b.String())
}

func col(rows []row, f func(row) float64) []float64 {
	out := make([]float64, len(rows))
	for i, r := range rows {
		out[i] = f(r)
	}
	return out
}

func logf(v float64) float64 {
	if v <= 0 {
		return 0
	}
	return math.Log10(v)
}

func fail(err error) {
	fmt.Fprintln(os.Stderr, "growth:", err)
	os.Exit(1)
}
