package eval

import (
	"fmt"
	"html/template"
	"io"
	"strconv"
)

// WriteHTML writes the report as one self-contained page: no script from
// elsewhere, no style sheet, no font or image to fetch; the charts are
// inline SVG. Every number shown also sits in a data-value attribute in the
// JSON's form, so a check can compare the page with the JSON.
func (r *Report) WriteHTML(w io.Writer, opts OutputOptions) error {
	v := r.htmlView(opts)
	if err := reportTemplate.Execute(w, v); err != nil {
		return fmt.Errorf("write html: %w", err)
	}
	return nil
}

type cell struct {
	Key   string // data-key: the JSON key, or a path such as "cold:HitRate@20"
	Value string // data-value: as in the JSON
	Text  string // as shown
}

type htmlRow struct {
	Name  string
	Best  bool
	Color string
	Cells []cell
}

type htmlTable struct {
	Caption string
	Heads   []string
	Rows    []htmlRow
}

type kv struct {
	Label string
	Cell  cell
}

type figure struct {
	Caption string
	SVG     template.HTML
}

type legendItem struct {
	Name, Color, Dash string
}

type htmlView struct {
	Run         string
	Warnings    []string
	HasCold     bool // some query had a cold target
	HasPos      bool // the session-position breakdown has queries
	Protocol    string
	Dataset     string
	Legend      []legendItem
	Tables      []htmlTable
	Curves      []figure
	ColdChart   template.HTML
	ColdTable   htmlTable
	PosChart    template.HTML
	PosTable    htmlTable
	Signif      htmlTable
	Latency     *htmlTable
	Summary     []kv
	LengthChart template.HTML
	Counts      []kv
	Settings    []kv
	MaxK        int
}

func numCell(key string, v float64) cell {
	return cell{Key: key, Value: fmtFloat(v), Text: fmtMetric(v)}
}

func intCell(key string, v int64) cell {
	s := strconv.FormatInt(v, 10)
	return cell{Key: key, Value: s, Text: s}
}

func textCell(key, s string) cell { return cell{Key: key, Value: s, Text: s} }

// subsetCell shows a breakdown metric, or n/a when the subset is empty (a 0
// would read as a result); the value stays the JSON's.
func subsetCell(key string, v float64, n int64) cell {
	c := numCell(key, v)
	if n == 0 {
		c.Text = "n/a"
	}
	return c
}

func (r *Report) htmlView(opts OutputOptions) *htmlView {
	ks := r.Protocol.K
	maxK := ks[len(ks)-1]
	v := &htmlView{Run: r.RunLine(), Warnings: r.Warnings, Protocol: r.Protocol.ProtocolLine(), Dataset: r.Dataset.DatasetLine(), MaxK: maxK}
	for _, m := range r.Models {
		v.HasCold = v.HasCold || m.Cold.Queries > 0
		for _, p := range m.Positions {
			v.HasPos = v.HasPos || p.Queries > 0
		}
	}
	for i, m := range r.Models {
		c, d := seriesColor(i)
		v.Legend = append(v.Legend, legendItem{Name: m.Name, Color: c, Dash: d})
	}
	color := func(i int) string { c, _ := seriesColor(i); return c }

	for _, k := range ks {
		t := htmlTable{Caption: "Metrics at K = " + strconv.Itoa(k), Heads: append([]string{"queries"}, metricNames...)}
		for i, m := range r.Models {
			row := htmlRow{Name: m.Name, Best: m.Best, Color: color(i), Cells: []cell{intCell("queries", m.Queries)}}
			for _, n := range metricNames {
				key := Key(n, k)
				row.Cells = append(row.Cells, numCell(key, m.Metrics[key]))
			}
			t.Rows = append(t.Rows, row)
		}
		v.Tables = append(v.Tables, t)
	}

	xl := make([]string, len(ks))
	for i, k := range ks {
		xl[i] = strconv.Itoa(k)
	}
	for _, n := range metricNames {
		var ss []series
		for _, m := range r.Models {
			s := series{Name: m.Name}
			for _, k := range ks {
				s.Values = append(s.Values, m.Metrics[Key(n, k)])
			}
			ss = append(ss, s)
		}
		v.Curves = append(v.Curves, figure{Caption: n + "@K", SVG: lineChart(n+"@K", "K", xl, ss)})
	}

	// Cold targets against all queries, at the largest K.
	hk, mk := Key("HitRate", maxK), Key("MRR", maxK)
	var coldSeries []series
	v.ColdTable = htmlTable{
		Caption: fmt.Sprintf("Queries whose next item had fewer than %d learned clicks, against all queries", r.Protocol.ColdThreshold),
		Heads:   []string{"cold queries", "cold " + hk, "cold " + mk, "all " + hk, "all " + mk},
	}
	for i, m := range r.Models {
		coldSeries = append(coldSeries, series{Name: m.Name, Values: []float64{m.Cold.Metrics[hk], m.Metrics[hk], m.Cold.Metrics[mk], m.Metrics[mk]}})
		v.ColdTable.Rows = append(v.ColdTable.Rows, htmlRow{Name: m.Name, Best: m.Best, Color: color(i), Cells: []cell{
			intCell("cold:queries", m.Cold.Queries),
			subsetCell("cold:"+hk, m.Cold.Metrics[hk], m.Cold.Queries), subsetCell("cold:"+mk, m.Cold.Metrics[mk], m.Cold.Queries),
			numCell(hk, m.Metrics[hk]), numCell(mk, m.Metrics[mk]),
		}})
	}
	v.ColdChart = barChart("Cold targets and all queries at K = "+strconv.Itoa(maxK), []string{"HitRate cold", "HitRate all", "MRR cold", "MRR all"}, coldSeries, nil)

	// Session position.
	var posSeries []series
	v.PosTable = htmlTable{Caption: "By the number of clicks before the query", Heads: nil}
	for _, l := range positionLabels {
		v.PosTable.Heads = append(v.PosTable.Heads, "pos "+l+" queries", "pos "+l+" "+hk, "pos "+l+" "+mk)
	}
	posLabels := make([]string, len(positionLabels))
	for i, l := range positionLabels {
		posLabels[i] = "after " + l
	}
	for i, m := range r.Models {
		s := series{Name: m.Name}
		row := htmlRow{Name: m.Name, Best: m.Best, Color: color(i)}
		for _, p := range m.Positions {
			s.Values = append(s.Values, p.Metrics[hk])
			pre := "position:" + p.Label + ":"
			row.Cells = append(row.Cells, intCell(pre+"queries", p.Queries), subsetCell(pre+hk, p.Metrics[hk], p.Queries), subsetCell(pre+mk, p.Metrics[mk], p.Queries))
		}
		posSeries = append(posSeries, s)
		v.PosTable.Rows = append(v.PosTable.Rows, row)
	}
	v.PosChart = barChart(hk+" by session position", posLabels, posSeries, nil)

	v.Signif = htmlTable{Caption: TestName, Heads: []string{"against", "MRR diff", "MRR 95% CI", "MRR p", "HitRate diff", "HitRate p"}}
	for i, m := range r.Models {
		row := htmlRow{Name: m.Name, Best: m.Best, Color: color(i)}
		if s := m.Significance; s != nil {
			row.Cells = []cell{
				textCell("significance:against", s.Against),
				{Key: "significance:mrr:mean_diff", Value: fmtFloat(s.MRR.MeanDiff), Text: fmtDiff(s.MRR.MeanDiff)},
				textCell("significance:mrr:ci95", fmtMetric(s.MRR.CI95[0])+" .. "+fmtMetric(s.MRR.CI95[1])),
				{Key: "significance:mrr:p", Value: fmtFloat(s.MRR.P), Text: fmtP(s.MRR.P)},
				{Key: "significance:hitrate:mean_diff", Value: fmtFloat(s.HitRate.MeanDiff), Text: fmtDiff(s.HitRate.MeanDiff)},
				{Key: "significance:hitrate:p", Value: fmtFloat(s.HitRate.P), Text: fmtP(s.HitRate.P)},
			}
		} else {
			row.Cells = []cell{textCell("significance:against", "best"), {}, {}, {}, {}, {}}
		}
		v.Signif.Rows = append(v.Signif.Rows, row)
	}
	if opts.Timings {
		t := htmlTable{Caption: "Query latency in the replay (wall time)", Heads: []string{"p50 ms", "p99 ms"}}
		for i, m := range r.Models {
			l := m.LatencyOf()
			t.Rows = append(t.Rows, htmlRow{Name: m.Name, Best: m.Best, Color: color(i), Cells: []cell{
				{Key: "latency:p50_ms", Value: fmtFloat(l.P50MS), Text: fmtMetric(l.P50MS)},
				{Key: "latency:p99_ms", Value: fmtFloat(l.P99MS), Text: fmtMetric(l.P99MS)},
			}})
		}
		v.Latency = &t
	}

	d := r.Dataset
	v.Summary = []kv{
		{"events", intCell("dataset:events", d.Events)},
		{"sessions", intCell("dataset:sessions", d.Sessions)},
		{"session ids", intCell("dataset:session_ids", d.SessionIDs)},
		{"items", intCell("dataset:items", d.Items)},
		{"first event", textCell("dataset:first", d.First)},
		{"last event", textCell("dataset:last", d.Last)},
		{"time span", cell{Key: "dataset:span_seconds", Value: fmtFloat(d.SpanSeconds), Text: fmtSpan(d.SpanSeconds)}},
		{"sessions of length 1", intCell("dataset:sessions_length_1", d.SessionsLength1)},
		{"mean session length", cell{Key: "dataset:mean_length", Value: fmtFloat(d.MeanLength), Text: strconv.FormatFloat(d.MeanLength, 'f', 2, 64)}},
		{"longest session", intCell("dataset:max_length", d.MaxLength)},
		{"repeat clicks", intCell("dataset:repeats", d.Repeats)},
		{"bad records", intCell("dataset:bad_records", d.BadRecords)},
		{"out of order", intCell("dataset:out_of_order", d.OutOfOrder)},
		{"catalogue records", intCell("dataset:catalog_records", d.Catalog)},
	}
	for _, s := range d.Sources {
		v.Summary = append(v.Summary, kv{"source " + s.Name, textCell("dataset:source", fmt.Sprintf("%d events, %d bad", s.Events, s.BadRecords))})
	}
	var lens series
	lens.Name = "sessions"
	var lenLabels []string
	for _, b := range d.Lengths {
		lenLabels = append(lenLabels, b.Length)
		lens.Values = append(lens.Values, float64(b.Sessions))
	}
	v.LengthChart = barChart("Sessions by length (clicks)", lenLabels, []series{lens}, fmtCount)

	p, sc := r.Preprocessing, r.Scoring
	v.Counts = []kv{
		{"queries scored", intCell("scoring:queries", sc.Queries)},
		{"first clicks (no prefix)", intCell("scoring:first_clicks", sc.FirstClicks)},
		{"repeat clicks (not scored)", intCell("scoring:repeat_clicks", sc.Repeats)},
		{"targets already in the session", intCell("scoring:targets_in_session", sc.TargetsInSession)},
		{"untracked clicks", intCell("scoring:untracked", sc.Untracked)},
		{"training clicks", intCell("scoring:training_clicks", sc.TrainingClicks)},
		{"clicks learned", intCell("scoring:learned", sc.Learned)},
		{"rare items dropped", intCell("preprocessing:rare_items_dropped", p.RareItems)},
		{"rare-item events dropped", intCell("preprocessing:rare_item_events_dropped", p.RareItemEvents)},
		{"short sessions dropped", intCell("preprocessing:short_sessions_dropped", p.ShortSessions)},
		{"short-session events dropped", intCell("preprocessing:short_session_events_dropped", p.ShortSessionEvents)},
		{"unseen test events dropped", intCell("preprocessing:unseen_test_events_dropped", p.UnseenTestEvents)},
		{"events kept", intCell("preprocessing:events_kept", p.EventsKept)},
		{"sessions kept", intCell("preprocessing:sessions_kept", p.SessionsKept)},
		{"test sessions", intCell("preprocessing:test_sessions", p.TestSessions)},
	}
	pr := r.Protocol
	v.Settings = []kv{
		{"protocol", textCell("protocol:name", string(pr.Name))},
		{"target", targetCell(pr)},
		{"excluded", textCell("protocol:exclude", string(pr.Exclude))},
		{"session window", intCell("protocol:window", int64(pr.Window))},
		{"session timeout", textCell("protocol:session_timeout", pr.SessionTimeout)},
		{"tracked sessions cap", intCell("protocol:max_sessions", int64(pr.MaxSessions))},
		{"half-life", textCell("protocol:half_life", pr.HalfLife)},
		{"neighbours per item", intCell("protocol:cap_per_item", int64(pr.CapPerItem))},
		{"SR window default", intCell("protocol:sr_window", int64(pr.SRWindow))},
		{"cold threshold", intCell("protocol:cold_threshold", int64(pr.ColdThreshold))},
		{"minimum session length", intCell("preprocessing:min_session_length", int64(p.MinSessionLength))},
		{"minimum item support", intCell("preprocessing:min_item_support", int64(p.MinItemSupport))},
	}
	if pr.SplitAt != "" {
		v.Settings = append(v.Settings, kv{"split at", textCell("protocol:split_at", pr.SplitAt)},
			kv{"learning during the test", textCell("protocol:learn_during_test", strconv.FormatBool(pr.LearnDuringTest))})
	}
	return v
}

// targetCell names the target of a query: the next click, the rest of the
// session, or under kfold the session's last items.
func targetCell(pr ProtocolInfo) cell {
	c := textCell("protocol:target", string(pr.Target))
	if pr.KFold != nil {
		c.Text = "last " + strconv.Itoa(pr.KFold.Targets) + " items of the session"
	}
	return c
}

func fmtCount(v float64) string {
	switch {
	case v >= 1e6:
		return strconv.FormatFloat(v/1e6, 'f', 1, 64) + "M"
	case v >= 1e3:
		return strconv.FormatFloat(v/1e3, 'f', 1, 64) + "k"
	}
	return strconv.FormatFloat(v, 'f', -1, 64)
}

var reportTemplate = template.Must(template.New("report").Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>waymark replay report</title>
<style>
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;color:#1d1d1f;margin:0;background:#fafafa}
main{max-width:1180px;margin:0 auto;padding:24px 28px 48px}
h1{font-size:24px;margin:0 0 6px}h2{font-size:18px;margin:32px 0 10px;border-bottom:1px solid #ddd;padding-bottom:4px}
p.lead{color:#444;margin:4px 0;font-size:14px}
table{border-collapse:collapse;margin:8px 0 18px;font-size:13px;background:#fff}
caption{text-align:left;font-weight:600;padding:4px 0;color:#333}
th,td{border:1px solid #e0e0e0;padding:4px 10px}th{background:#f2f2f2;font-weight:600}th[scope=row]{text-align:left;font-weight:500}
td.num{text-align:right;font-variant-numeric:tabular-nums}
tr.best td{font-weight:700}
td.name{white-space:nowrap}
.sw{display:inline-block;width:12px;height:12px;border-radius:2px;margin-right:6px;vertical-align:-1px}
.legend{display:flex;flex-wrap:wrap;gap:6px 18px;font-size:13px;margin:6px 0 10px}
.legend span.line{display:inline-block;width:22px;height:0;border-top:3px solid;margin-right:6px;vertical-align:3px}
.charts{display:flex;flex-wrap:wrap;gap:12px}
figure{margin:0;background:#fff;border:1px solid #e4e4e4;border-radius:4px;padding:6px}
figcaption{font-size:13px;font-weight:600;color:#333;padding:2px 4px}
.two{display:flex;flex-wrap:wrap;gap:24px;align-items:flex-start}
.note{font-size:12px;color:#555}
.warn{font-size:14px;background:#fff4e0;border-left:4px solid #E69F00;padding:6px 10px;margin:10px 0}
</style>
</head>
<body>
<main>
<h1>waymark replay report</h1>
{{with .Run}}<p class="lead">{{.}}</p>{{end}}
<p class="lead">{{.Protocol}}</p>
<p class="lead">{{.Dataset}}</p>

{{range .Warnings}}<p class="warn">Warning: {{.}}</p>{{end}}
<h2>Results</h2>
<div class="legend">{{range .Legend}}<span><span class="line" style="border-color:{{.Color}}{{if .Dash}};border-top-style:dashed{{end}}"></span>{{.Name}}</span>{{end}}</div>
{{range .Tables}}{{template "table" .}}{{end}}
<p class="note">Bold: the best model by MRR@{{.MaxK}}. Coverage: share of the replayed items ever recommended in the top K. Popularity: mean learned click count of the recommended items, over the most clicked item's, at query time.</p>

<h2>Metrics against K</h2>
<div class="charts">{{range .Curves}}<figure><figcaption>{{.Caption}}</figcaption>{{.SVG}}</figure>{{end}}</div>

<h2>Cold targets</h2>
{{if .HasCold}}<div class="two"><figure><figcaption>Cold next item against all queries, K = {{.MaxK}}</figcaption>{{.ColdChart}}</figure>{{template "table" .ColdTable}}</div>
{{else}}<p class="note">No query had a cold target: every target item had enough learned clicks when asked.</p>{{end}}

<h2>Session position</h2>
{{if .HasPos}}<div class="two"><figure><figcaption>HitRate@{{.MaxK}} after the session's 1st, 2nd, 3rd and later clicks</figcaption>{{.PosChart}}</figure></div>
{{template "table" .PosTable}}
{{else}}<p class="note">This protocol asks once per session, so there is no breakdown by session position.</p>{{end}}

<h2>Significance</h2>
{{template "table" .Signif}}
{{with .Latency}}{{template "table" .}}{{end}}

<h2>Dataset</h2>
<div class="two">
<table class="summary"><caption>Summary</caption><tbody>{{range .Summary}}<tr><th scope="row">{{.Label}}</th><td class="num" data-key="{{.Cell.Key}}" data-value="{{.Cell.Value}}">{{.Cell.Text}}</td></tr>{{end}}</tbody></table>
<figure><figcaption>Session length distribution</figcaption>{{.LengthChart}}</figure>
</div>

<h2>Preprocessing and scoring</h2>
<div class="two">
<table class="summary"><caption>Counts</caption><tbody>{{range .Counts}}<tr><th scope="row">{{.Label}}</th><td class="num" data-key="{{.Cell.Key}}" data-value="{{.Cell.Value}}">{{.Cell.Text}}</td></tr>{{end}}</tbody></table>
<table class="summary"><caption>Settings</caption><tbody>{{range .Settings}}<tr><th scope="row">{{.Label}}</th><td class="num" data-key="{{.Cell.Key}}" data-value="{{.Cell.Value}}">{{.Cell.Text}}</td></tr>{{end}}</tbody></table>
</div>
</main>
<script>
(function () {
  // Records what the browser actually laid out, for automated checks.
  var n = 0;
  document.querySelectorAll("svg.chart").forEach(function (s) {
    var b = s.getBoundingClientRect();
    if (b.width > 0 && b.height > 0 && s.querySelector("polyline, rect.bar")) { n++; }
  });
  document.body.setAttribute("data-charts-rendered", String(n));
  document.body.setAttribute("data-metric-rows", String(document.querySelectorAll("table.metrics tbody tr").length));
})();
</script>
</body>
</html>
{{define "table"}}<table class="metrics"><caption>{{.Caption}}</caption><thead><tr><th>model</th>{{range .Heads}}<th>{{.}}</th>{{end}}</tr></thead><tbody>
{{range .Rows}}<tr{{if .Best}} class="best"{{end}} data-model="{{.Name}}"><td class="name"><span class="sw" style="background:{{.Color}}"></span>{{.Name}}</td>{{$m := .Name}}{{range .Cells}}<td class="num"{{if .Key}} data-model="{{$m}}" data-key="{{.Key}}" data-value="{{.Value}}"{{end}}>{{.Text}}</td>{{end}}</tr>
{{end}}</tbody></table>{{end}}
`))
