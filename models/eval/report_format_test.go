package eval

import (
	"bytes"
	"math"
	"regexp"
	"strconv"
	"strings"
	"testing"
)

// TestReportFormatting checks how the report writes numbers for people:
// a p-value that underflowed is a bound, not "0"; a tiny difference keeps
// its digits instead of printing "-0.0000"; a span reads in days.
func TestReportFormatting(t *testing.T) {
	cases := []struct {
		name string
		got  string
		want string
	}{
		{"p underflowed", fmtP(0), "< 1e-300"},
		{"p tiny", fmtP(3.2e-12), "3.2e-12"},
		{"p ordinary", fmtP(0.0123), "0.0123"},
		{"diff zero", fmtDiff(0), "0"},
		{"diff tiny negative", fmtDiff(-2.14e-6), "-2.1e-06"},
		{"diff ordinary", fmtDiff(-0.0123), "-0.0123"},
		{"diff positive", fmtDiff(0.25), "+0.2500"},
		{"span e-shop", fmtSpan(1.1577799e+07), "134.0 days"}, // 11,577,799 s / 86,400 s
		{"span hours", fmtSpan(3 * 3600), "3.0 hours"},
		{"span seconds", fmtSpan(42), "42 s"},
	}
	for _, c := range cases {
		if c.got != c.want {
			t.Errorf("%s: %q, want %q", c.name, c.got, c.want)
		}
	}
}

// TestNiceScaleTicksAreRound checks that every tick label of an axis is a
// round number (1, 2 or 5 times a power of ten, common practice in chart
// design) and that the axis covers the data.
func TestNiceScaleTicksAreRound(t *testing.T) {
	for _, v := range []float64{0.0007, 0.02, 0.188, 0.25, 0.6565, 0.75, 1, 3.4, 17, 2390, 989818} {
		ymax, step := niceScale(v)
		if ymax < v || ymax > v+step*1.0000001 {
			t.Errorf("v=%v: axis to %v with step %v does not fit it", v, ymax, step)
		}
		m := step / math.Pow(10, math.Floor(math.Log10(step)+1e-9))
		if math.Abs(m-1) > 1e-9 && math.Abs(m-2) > 1e-9 && math.Abs(m-5) > 1e-9 {
			t.Errorf("v=%v: step %v is not 1, 2 or 5 times a power of ten", v, step)
		}
		if n := math.Round(ymax / step); n < 2 || n > 6 {
			t.Errorf("v=%v: %v ticks", v, n)
		}
		f := tickFormat(step)
		for k := 0.0; k*step <= ymax+1e-12; k++ {
			label := f(k * step)
			back, err := strconv.ParseFloat(label, 64)
			if err != nil || math.Abs(back-k*step) > 1e-9*math.Max(1, ymax) {
				t.Errorf("v=%v: tick %v labelled %q", v, k*step, label)
			}
		}
	}
}

// TestLineWidthFollowsStrength checks that the strongest series is drawn
// widest, never the weakest.
func TestLineWidthFollowsStrength(t *testing.T) {
	svg := string(lineChart("MRR@K", "K", []string{"1", "5", "20"}, []series{
		{Name: "weak", Values: []float64{0.01, 0.02, 0.03}},
		{Name: "strong", Values: []float64{0.2, 0.3, 0.4}},
	}))
	re := regexp.MustCompile(`stroke="(#[0-9A-F]+)" stroke-width="([0-9.]+)"`)
	width := map[string]float64{}
	for _, m := range re.FindAllStringSubmatch(svg, -1) {
		w, _ := strconv.ParseFloat(m[2], 64)
		width[m[1]] = w
	}
	weak, _ := seriesColor(0)
	strong, _ := seriesColor(1)
	if width[strong] <= width[weak] {
		t.Errorf("strong line %v wide, weak %v: %s", width[strong], width[weak], svg)
	}
}

// TestKFoldReportHasNoEmptySections checks that a kfold report, which asks
// once per session about its last items, names its target and shows no
// empty cold-target section, and that a K as large as the catalogue
// is warned about in the table, the page and the JSON.
func TestKFoldReportHasNoEmptySections(t *testing.T) {
	o := DefaultOptions()
	o.Protocol = KFold
	o.KFold = KFoldOptions{Folds: 5, MinLength: 4, MaxSessions: 100, Targets: 2, Context: 3, Seed: 7}
	o.Models = []string{"markov", "pop"}
	o.K = []int{1, 40}
	rep := run(t, shopLog(300, 5), o)
	if len(rep.Warnings) != 1 || !strings.Contains(rep.Warnings[0], "K = 40") {
		t.Fatalf("warnings %q, want one about K = 40 against %d items", rep.Warnings, rep.Dataset.Items)
	}
	var page, table, js bytes.Buffer
	if err := rep.WriteHTML(&page, OutputOptions{}); err != nil {
		t.Fatal(err)
	}
	if err := rep.WriteTable(&table); err != nil {
		t.Fatal(err)
	}
	if err := rep.WriteJSON(&js, OutputOptions{}); err != nil {
		t.Fatal(err)
	}
	p := page.String()
	for _, want := range []string{"last 2 items of the session", "No query had a cold target", "Warning: K = 40"} {
		if !strings.Contains(p, want) {
			t.Errorf("page lacks %q", want)
		}
	}
	if strings.Contains(p, "Cold next item against all queries") {
		t.Error("page shows the empty cold-target chart")
	}
	if !strings.Contains(table.String(), "warning: K = 40") || !strings.Contains(js.String(), `"warnings"`) {
		t.Error("table or JSON lacks the K warning")
	}
	// Nothing to warn about at K below the catalogue.
	o.K = []int{1, 5}
	if w := run(t, shopLog(300, 5), o).Warnings; len(w) != 0 {
		t.Errorf("warnings %q at K = 5", w)
	}
}

// TestRunLine checks that the report names its build and command.
func TestRunLine(t *testing.T) {
	r := &Report{Run: &RunInfo{Version: "(devel)", Commit: "abc123", Command: "waymark replay --k 20 clicks.csv"}}
	if got, want := r.RunLine(), "waymark (devel) (commit abc123): waymark replay --k 20 clicks.csv"; got != want {
		t.Errorf("%q, want %q", got, want)
	}
	if (&Report{}).RunLine() != "" {
		t.Error("a report without run info has a run line")
	}
}
