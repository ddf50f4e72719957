package eval

import (
	"fmt"
	"html/template"
	"math"
	"sort"
	"strconv"
	"strings"
)

// The charts of the HTML report are inline SVG written here, so the page
// needs no script or network to draw them.

// palette is a set of colours that stay apart for colour-blind readers
// (common practice in chart design); past its end the colours repeat with
// dashed lines.
var palette = []string{"#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#999999", "#000000"}

func seriesColor(i int) (color, dash string) {
	color = palette[i%len(palette)]
	if i >= len(palette) {
		dash = "5 3"
	}
	return color, dash
}

type series struct {
	Name   string
	Values []float64
}

const (
	chartW, chartH                     = 360, 230
	marginL, marginR, marginT, marginB = 52, 14, 14, 40
)

// niceScale returns an axis maximum at or above v and a tick step of 1, 2
// or 5 times a power of ten, about five ticks, so that every tick label is a
// round number ("0.2", never "0.188"; common practice in chart design).
func niceScale(v float64) (ymax, step float64) {
	if v <= 0 || math.IsNaN(v) || math.IsInf(v, 0) {
		return 1, 0.2
	}
	raw := v / 5
	p := math.Pow(10, math.Floor(math.Log10(raw)))
	step = 10 * p
	for _, m := range []float64{1, 2, 5} {
		if raw <= m*p*(1+1e-12) {
			step = m * p
			break
		}
	}
	return math.Ceil(v/step-1e-9) * step, step
}

// tickFormat writes tick labels with as many decimals as the step needs.
func tickFormat(step float64) func(float64) string {
	dec := max(0, int(-math.Floor(math.Log10(step)+1e-9)))
	return func(v float64) string { return strconv.FormatFloat(v, 'f', dec, 64) }
}

func esc(s string) string { return template.HTMLEscapeString(s) }

// axes draws the frame, y ticks with grid lines, and x labels.
func axes(b *strings.Builder, ymax, step float64, xlabels []string, xpos func(int) float64, yfmt func(float64) string) {
	plotH := float64(chartH - marginT - marginB)
	ticks := int(math.Round(ymax / step))
	for t := 0; t <= ticks; t++ {
		v := step * float64(t)
		y := float64(marginT) + plotH*(1-v/ymax)
		fmt.Fprintf(b, `<line x1="%d" y1="%.1f" x2="%d" y2="%.1f" stroke="#ddd"/>`, marginL, y, chartW-marginR, y)
		fmt.Fprintf(b, `<text x="%d" y="%.1f" text-anchor="end" font-size="11" fill="#444">%s</text>`, marginL-6, y+4, esc(yfmt(v)))
	}
	fmt.Fprintf(b, `<line x1="%d" y1="%d" x2="%d" y2="%d" stroke="#666"/>`, marginL, chartH-marginB, chartW-marginR, chartH-marginB)
	fmt.Fprintf(b, `<line x1="%d" y1="%d" x2="%d" y2="%d" stroke="#666"/>`, marginL, marginT, marginL, chartH-marginB)
	// Many labels are turned, so neighbours do not run into each other.
	turn := len(xlabels) > 6
	for i, l := range xlabels {
		if turn {
			x, y := xpos(i)+3, chartH-marginB+12
			fmt.Fprintf(b, `<text x="%.1f" y="%d" text-anchor="end" font-size="10" fill="#444" transform="rotate(-35 %.1f %d)">%s</text>`, x, y, x, y, esc(l))
			continue
		}
		fmt.Fprintf(b, `<text x="%.1f" y="%d" text-anchor="middle" font-size="11" fill="#444">%s</text>`, xpos(i), chartH-marginB+16, esc(l))
	}
}

func svgOpen(b *strings.Builder, title string) {
	fmt.Fprintf(b, `<svg class="chart" xmlns="http://www.w3.org/2000/svg" viewBox="0 0 %d %d" width="%d" height="%d" role="img" aria-label="%s">`,
		chartW, chartH, chartW, chartH, esc(title))
	fmt.Fprintf(b, `<title>%s</title>`, esc(title))
}

// lineChart draws one line per series over categorical x values.
func lineChart(title, xname string, xlabels []string, ss []series) template.HTML {
	var b strings.Builder
	svgOpen(&b, title)
	ymax, step := niceScale(seriesMax(ss))
	plotW := float64(chartW - marginL - marginR)
	plotH := float64(chartH - marginT - marginB)
	xpos := func(i int) float64 {
		if len(xlabels) == 1 {
			return float64(marginL) + plotW/2
		}
		return float64(marginL) + 16 + (plotW-32)*float64(i)/float64(len(xlabels)-1)
	}
	ypos := func(v float64) float64 { return float64(marginT) + plotH*(1-v/ymax) }
	axes(&b, ymax, step, xlabels, xpos, tickFormat(step))
	fmt.Fprintf(&b, `<text x="%.1f" y="%d" text-anchor="middle" font-size="11" fill="#444">%s</text>`, float64(marginL)+plotW/2, chartH-6, esc(xname))
	// The strongest series is drawn first and widest, each weaker one
	// narrower on top of it, so lines with equal values stay visible as a
	// halo and the eye lands on the best line, not on the weakest.
	order := make([]int, len(ss))
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return seriesMean(ss[order[a]]) > seriesMean(ss[order[b]]) })
	for rank, si := range order {
		s := ss[si]
		color, dash := seriesColor(si)
		width := 2.0
		if len(ss) > 1 {
			width += 3 * float64(len(ss)-1-rank) / float64(len(ss)-1)
		}
		var pts []string
		for i, v := range s.Values {
			pts = append(pts, fmt.Sprintf("%.1f,%.1f", xpos(i), ypos(v)))
		}
		fmt.Fprintf(&b, `<polyline fill="none" stroke="%s" stroke-width="%.1f" stroke-opacity="0.9" stroke-dasharray="%s" points="%s"/>`, color, width, dash, strings.Join(pts, " "))
		for i, v := range s.Values {
			fmt.Fprintf(&b, `<circle cx="%.1f" cy="%.1f" r="3" fill="%s"><title>%s %s=%s: %s</title></circle>`,
				xpos(i), ypos(v), color, esc(s.Name), esc(xname), esc(xlabels[i]), fmtMetric(v))
		}
	}
	b.WriteString(`</svg>`)
	return template.HTML(b.String())
}

// barChart draws grouped bars: a group per x label, a bar per series.
func barChart(title string, xlabels []string, ss []series, yfmt func(float64) string) template.HTML {
	var b strings.Builder
	svgOpen(&b, title)
	ymax, step := niceScale(seriesMax(ss))
	plotW := float64(chartW - marginL - marginR)
	plotH := float64(chartH - marginT - marginB)
	groupW := plotW / float64(max(1, len(xlabels)))
	barW := groupW * 0.8 / float64(max(1, len(ss)))
	xpos := func(i int) float64 { return float64(marginL) + groupW*(float64(i)+0.5) }
	tip := yfmt
	if yfmt == nil {
		yfmt, tip = tickFormat(step), fmtMetric
	}
	axes(&b, ymax, step, xlabels, xpos, yfmt)
	for si, s := range ss {
		color, _ := seriesColor(si)
		for i, v := range s.Values {
			h := plotH * v / ymax
			x := float64(marginL) + groupW*float64(i) + groupW*0.1 + barW*float64(si)
			fmt.Fprintf(&b, `<rect class="bar" x="%.1f" y="%.1f" width="%.1f" height="%.1f" fill="%s"><title>%s, %s: %s</title></rect>`,
				x, float64(marginT)+plotH-h, max(barW-1, 1), h, color, esc(s.Name), esc(xlabels[i]), esc(tip(v)))
		}
	}
	b.WriteString(`</svg>`)
	return template.HTML(b.String())
}

// seriesMean is the mean of a series' values, 0 for none.
func seriesMean(s series) float64 {
	if len(s.Values) == 0 {
		return 0
	}
	t := 0.0
	for _, v := range s.Values {
		t += v
	}
	return t / float64(len(s.Values))
}

// seriesMax is the largest value of any series, 0 for none.
func seriesMax(ss []series) float64 {
	m := 0.0
	for _, s := range ss {
		for _, v := range s.Values {
			m = max(m, v)
		}
	}
	return m
}
