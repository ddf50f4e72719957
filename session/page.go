package session

import (
	"bytes"
	"fmt"
	"html/template"
	"net/http"
	"strconv"
	"strings"

	"waymark/stream"
)

// The operator page at / is one server-rendered HTML document: no script,
// no external asset, a little inline CSS. Its two forms use GET, so every
// view is a link an operator can paste into a ticket:
//
//	/?item=ID            the item's co-visitation neighbours
//	/?session=A,B,C      the answer for that sequence with per-signal features
//	&k=N                 list length (1..MaxK, default DefaultK) for all lists
//	&keep=on             keep the session's own items among the answers
//	/?tracked=ID         a tracked session's window and its answer
//	&refresh=N           reload the page every N seconds (5..3600)
//
// Items show their catalogue title and categories when a record gave them.
// The charts are the service's own recent history (see history.go): one
// sample per few seconds over the last minutes, drawn as inline SVG.
//
// Spaces around an id are trimmed, as a form field's typing leaves them.
// Ids are untrusted: html/template escapes them for the context they land in
// (text, attribute, URL query), and the Content-Security-Policy forbids any
// script, so an id crafted as markup stays text. Bad parameters render the
// page with the error and a 400, so the operator sees what to fix.

// pageView is everything the template renders.
type pageView struct {
	Stats      Stats
	StoreSize  string
	Ready      bool
	NotReady   string
	K          int
	Popular    []PopularItem
	Signals    []string
	Blend      string
	Item       string
	HasItem    bool
	Looked     bool // neighbours were looked up (the parameters were valid)
	ItemKnown  bool
	Neighbors  []Neighbor
	Session    string
	HasSession bool
	Keep       bool
	Answer     *NextResult
	Error      *apiError

	Tracked        string // the id looked up with ?tracked=
	HasTracked     bool
	TrackedFound   bool
	TrackedItems   []string
	TrackedAnswer  *NextResult
	Labels         map[string]ItemLabel
	Charts         []historyChart
	Refresh        int
	ExploreSignals int // columns an exploration row spans in the answer tables
}

// pageItem is one item as the template shows it.
type pageItem struct {
	Name  string
	Label ItemLabel
}

// Item1 pairs an item with its catalogue label, for the "item" template.
func (v *pageView) Item1(name string) pageItem { return pageItem{Name: name, Label: v.Labels[name]} }

// pageAnswer is one answer with the view it is drawn in.
type pageAnswer struct {
	View   *pageView
	Result *NextResult
}

// Answer1 pairs an answer with the view, for the "answer" template.
func (v *pageView) Answer1(r *NextResult) pageAnswer { return pageAnswer{View: v, Result: r} }

// pageCSP allows inline style only: no script, no remote fetch, forms
// submit to this origin only.
const pageCSP = "default-src 'none'; style-src 'unsafe-inline'; form-action 'self'; base-uri 'none'; frame-ancestors 'none'"

// page serves the operator page.
func (s *Server) page(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	v := pageView{K: s.opts.DefaultK, Signals: s.eng.blend.Signals(), Blend: s.eng.blend.Name()}
	v.Ready, v.NotReady = s.opts.Ready()
	fail := func(code, msg string) {
		if v.Error == nil {
			v.Error = &apiError{Code: code, Message: msg}
		}
	}
	if k, err := s.parseK(strings.TrimSpace(q.Get("k"))); err != nil {
		fail(CodeInvalidParam, err.Error())
	} else {
		v.K = k
	}
	if q.Has("item") {
		v.Item = strings.TrimSpace(q.Get("item"))
		if err := validID("item", v.Item, stream.MaxItemBytes); err != nil {
			fail(CodeInvalidParam, err.Error())
		} else {
			v.HasItem = true
		}
	}
	var items []string
	if q.Has("session") {
		v.Session = q.Get("session")
		var err error
		if items, err = splitItems(v.Session); err != nil {
			fail(CodeInvalidParam, err.Error())
		} else {
			v.HasSession = true
		}
	}
	if q.Has("tracked") {
		v.Tracked = strings.TrimSpace(q.Get("tracked"))
		if err := validID("session", v.Tracked, stream.MaxSessionBytes); err != nil {
			fail(CodeInvalidParam, "tracked: "+err.Error())
		} else {
			v.HasTracked = true
		}
	}
	if raw := q.Get("refresh"); raw != "" {
		n, err := strconv.Atoi(raw)
		if err != nil || n < 5 || n > 3600 {
			fail(CodeInvalidParam, fmt.Sprintf("refresh=%q: must be a number of seconds from 5 to 3600", raw))
		} else {
			v.Refresh = n
		}
	}
	if raw := q.Get("keep"); raw != "" {
		// A checkbox sends "on"; accept the API's true/false as well.
		keep, err := strconv.ParseBool(raw)
		if raw == "on" {
			keep, err = true, nil
		}
		if err != nil {
			fail(CodeInvalidParam, fmt.Sprintf("keep=%q: must be on, true or false", raw))
		}
		v.Keep = keep
	}

	// Stats and popular items render even when a parameter is bad: they
	// need none, and they are what an operator opens the page for.
	v.Stats = s.eng.Stats()
	v.StoreSize = byteSize(v.Stats.StoreBytes)
	v.Popular = s.eng.Popular(v.K)
	if v.Error == nil && v.HasItem {
		v.Neighbors, v.ItemKnown = s.eng.Neighbors(v.Item, v.K)
		v.Looked = true
	}
	if v.Error == nil && v.HasSession {
		res := s.eng.Next(NextRequest{Items: items, K: v.K, Keep: v.Keep})
		v.Answer = &res
	}
	if v.Error == nil && v.HasTracked {
		v.TrackedItems, v.TrackedFound = s.eng.SessionItems(v.Tracked)
		if v.TrackedFound {
			res := s.eng.Next(NextRequest{Session: v.Tracked, K: v.K})
			v.TrackedAnswer = &res
		}
	}
	v.ExploreSignals = len(v.Signals) + 1
	v.Labels = s.eng.Labels(v.itemNames())
	s.hist.maybeSample(s.eng.counters, true)
	v.Charts = historyCharts(s.hist.snapshot())

	// Render to a buffer first so a template failure is a clean 500, not
	// half a page with a 200.
	var buf bytes.Buffer
	if err := pageTemplate.Execute(&buf, &v); err != nil {
		s.opts.Logger.Error("operator page", "err", err)
		writeError(w, http.StatusInternalServerError, CodeInternal, "render page: "+err.Error())
		return
	}
	h := w.Header()
	h.Set("Content-Type", "text/html; charset=utf-8")
	h.Set("Content-Security-Policy", pageCSP)
	h.Set("X-Content-Type-Options", "nosniff")
	h.Set("Referrer-Policy", "no-referrer")
	h.Set("Cache-Control", "no-store")
	code := http.StatusOK
	if v.Error != nil {
		code = http.StatusBadRequest
	}
	w.WriteHeader(code)
	_, _ = w.Write(buf.Bytes())
}

// itemNames lists every item the page shows, for one catalogue lookup.
func (v *pageView) itemNames() []string {
	var out []string
	for _, p := range v.Popular {
		out = append(out, p.Item)
	}
	for _, n := range v.Neighbors {
		out = append(out, n.Item)
	}
	for _, a := range []*NextResult{v.Answer, v.TrackedAnswer} {
		if a != nil {
			for _, r := range a.Items {
				out = append(out, r.Item)
			}
		}
	}
	return append(out, v.TrackedItems...)
}

// splitItems reads the session form's comma-separated items. Blank entries
// are dropped, so "A, B," is A then B and "" is an empty session (which
// the popularity fallback answers). Ids containing a comma cannot be typed
// here; POST /v1/next takes any id.
func splitItems(raw string) ([]string, error) {
	var out []string
	for i, part := range strings.Split(raw, ",") {
		part = strings.TrimSpace(part)
		if part == "" {
			continue
		}
		if len(out) == maxListLen {
			return nil, fmt.Errorf("session: more than %d items", maxListLen)
		}
		if err := validID("item", part, stream.MaxItemBytes); err != nil {
			return nil, fmt.Errorf("session entry %d: %w", i+1, err)
		}
		out = append(out, part)
	}
	return out, nil
}

// byteSize formats n in binary units.
func byteSize(n int64) string {
	const unit = 1024
	if n < unit {
		return strconv.FormatInt(n, 10) + " B"
	}
	div, exp := int64(unit), 0
	for m := n / unit; m >= unit; m /= unit {
		div *= unit
		exp++
	}
	return fmt.Sprintf("%.1f %ciB", float64(n)/float64(div), "KMGTPE"[exp])
}

// pageFuncs are pure helpers for the template.
var pageFuncs = template.FuncMap{
	"f3":  func(x float64) string { return strconv.FormatFloat(x, 'f', 3, 64) },
	"f1":  func(x float64) string { return strconv.FormatFloat(x, 'f', 1, 64) },
	"add": func(a, b int) int { return a + b },
	"feature": func(f map[string]float64, name string) string {
		x, ok := f[name]
		if !ok || x == 0 {
			return "0"
		}
		return strconv.FormatFloat(x, 'f', 3, 64)
	},
}

// pageTemplate is parsed once and only executed afterwards, which is safe
// from many goroutines: it is read-only state, like a compiled regexp.
var pageTemplate = template.Must(template.New("page").Funcs(pageFuncs).Parse(pageHTML))

const pageHTML = `<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
{{if .Refresh}}<meta http-equiv="refresh" content="{{.Refresh}}">{{end}}
<title>waymark</title>
<style>
body{font:14px/1.45 system-ui,sans-serif;margin:0 auto;max-width:1100px;padding:1rem 1.5rem;color:#1d232a;background:#fbfbfa}
h1{font-size:1.4rem;margin:.2rem 0 1rem}h2{font-size:1.05rem;margin:1.6rem 0 .5rem;border-bottom:1px solid #d8dadd;padding-bottom:.2rem}
table{border-collapse:collapse;margin:.3rem 0}th,td{padding:.2rem .7rem;text-align:left;border-bottom:1px solid #eceef0;vertical-align:top}
th{font-weight:600;color:#4a525b}td.num,th.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
.grid{display:grid;grid-template-columns:repeat(auto-fill,minmax(205px,1fr));gap:.5rem}
.card{background:#fff;border:1px solid #e1e3e6;border-radius:6px;padding:.5rem .8rem;min-width:0}
.card b{display:block;font-size:1.2rem;font-variant-numeric:tabular-nums;white-space:nowrap;overflow:hidden;text-overflow:ellipsis}.card span{color:#5b636c;font-size:.85rem}
.charts{display:grid;grid-template-columns:repeat(auto-fill,minmax(270px,1fr));gap:.5rem}
.chart{background:#fff;border:1px solid #e1e3e6;border-radius:6px;padding:.4rem .6rem}.chart div{font-size:.85rem;color:#5b636c;white-space:nowrap}.chart div b{color:#1d232a}
.ok{color:#176b2c}.bad{color:#a8200d}.muted{color:#7a828b}
.error{background:#fdecea;border:1px solid #f1b5ad;border-radius:6px;padding:.5rem .8rem;margin:.8rem 0}
form{margin:.4rem 0}input[type=text]{width:28rem;max-width:100%;padding:.25rem}input[type=number]{width:4.5rem;padding:.25rem}
code,.id{font-family:ui-monospace,monospace;overflow-wrap:anywhere}.cols{display:grid;grid-template-columns:1fr 1fr;gap:1.5rem}
.label{display:block;font-size:.8rem;color:#5b636c;font-family:system-ui,sans-serif}.card.wide{grid-column:span 2}.badge{display:inline-block;font-size:.75rem;border-radius:3px;padding:0 .35rem;margin-left:.3rem;background:#fff4e0;border:1px solid #e6b566;color:#7a4a00}
tr.explore td{background:#fffaf0}
@media (max-width:800px){.cols{grid-template-columns:1fr}}
</style>
</head>
<body>
<h1>waymark <span id="ready" class="{{if .Ready}}ok{{else}}bad{{end}}">{{if .Ready}}ready{{else}}not ready: {{.NotReady}}{{end}}</span></h1>
{{with .Error}}<div class="error" id="error" role="alert"><b>{{.Code}}</b>: {{.Message}}</div>{{end}}

<h2>Stats</h2>
<div class="grid" id="stats">
<div class="card"><span>events applied</span><b title="{{.Stats.EventsApplied}}" id="events-applied">{{.Stats.EventsApplied}}</b></div>
<div class="card"><span>events rejected</span><b title="{{.Stats.EventsRejected}}" id="events-rejected">{{.Stats.EventsRejected}}</b></div>
<div class="card"><span>catalogue records applied</span><b title="{{.Stats.CatalogApplied}}" id="catalog-applied">{{.Stats.CatalogApplied}}</b></div>
<div class="card"><span>last sequence applied</span><b title="{{.Stats.LastSequence}}" id="last-sequence">{{.Stats.LastSequence}}</b></div>
<div class="card"><span>stream's last sequence</span><b title="{{.Stats.StreamLast}}" id="stream-last">{{.Stats.StreamLast}}</b></div>
<div class="card"><span>consumer lag (messages)</span><b title="{{.Stats.Lag}}" id="consumer-lag">{{.Stats.Lag}}</b></div>
<div class="card"><span>items</span><b title="{{.Stats.Items}}" id="items">{{.Stats.Items}}</b></div>
<div class="card"><span>sessions tracked</span><b title="{{.Stats.SessionsActive}}" id="sessions">{{.Stats.SessionsActive}}</b></div>
<div class="card"><span>store size on disk</span><b title="{{.Stats.StoreBytes}} bytes" id="store-size">{{.StoreSize}}</b></div>
<div class="card wide"><span>event-time watermark</span><b title="{{.Stats.Watermark}}" id="watermark">{{if .Stats.Watermark}}{{.Stats.Watermark}}{{else}}none yet{{end}}</b></div>
{{with .Stats.Blend}}<div class="card wide"><span>blend mixture (learned, {{.Evaluated}} clicks scored)</span><b title="{{(index .Rules 0).Chosen}}" id="blend-mixture">{{(index .Rules 0).Chosen}}</b></div>{{end}}
</div>
<p>answers with <code id="blend">{{.Blend}}</code>; models learning: <span id="models">{{range $i, $m := .Stats.Models}}{{if $i}}, {{end}}<code>{{$m}}</code>{{end}}</span></p>

<h2>Recent history</h2>
<div class="charts" id="charts">{{range .Charts}}<div class="chart"><div>{{.Title}}: <b>{{.Now}}</b></div>{{.SVG}}</div>{{end}}</div>
<p class="muted">One sample every few seconds while the service is asked anything; <a href="/?refresh=10">reload every 10 s</a>.</p>

<div class="cols">
<section>
<h2>Popular items</h2>
{{if .Popular}}<table id="popular">
<thead><tr><th class="num">#</th><th>item</th><th class="num">decayed clicks</th></tr></thead>
<tbody>{{range $i, $p := .Popular}}<tr><td class="num">{{add $i 1}}</td><td class="id">{{template "item" ($.Item1 $p.Item)}}</td><td class="num">{{f1 $p.Clicks}}</td></tr>
{{end}}</tbody></table>{{else}}<p class="muted" id="popular">no clicks yet</p>{{end}}
</section>

<section>
<h2>Neighbours of an item</h2>
<form method="get" action="/" id="neighbors-form">
<input type="text" name="item" value="{{.Item}}" placeholder="item id" aria-label="item id" required>
<input type="number" name="k" value="{{.K}}" min="1" aria-label="k">
{{if .HasSession}}<input type="hidden" name="session" value="{{.Session}}">{{end}}
<button type="submit">show neighbours</button>
</form>
{{if .Looked}}<div id="neighbors">
{{if not .ItemKnown}}<p class="muted">unknown item <span class="id">{{.Item}}</span>: never seen in a click or catalogue record</p>
{{else if not .Neighbors}}<p class="muted">no co-visited items yet for <span class="id">{{.Item}}</span></p>
{{else}}<p>co-visitation neighbours of <span class="id">{{.Item}}</span> (cosine)</p>
<table><thead><tr><th>item</th><th class="num">cosine</th></tr></thead>
<tbody>{{range .Neighbors}}<tr><td class="id">{{template "item" ($.Item1 .Item)}}</td><td class="num">{{f3 .Score}}</td></tr>
{{end}}</tbody></table>{{end}}
</div>{{end}}
</section>
</div>

<h2>Try a session</h2>
<form method="get" action="/" id="session-form">
<input type="text" name="session" value="{{.Session}}" placeholder="item ids in click order, comma-separated" aria-label="session items">
<input type="number" name="k" value="{{.K}}" min="1" aria-label="k">
<label><input type="checkbox" name="keep"{{if .Keep}} checked{{end}}> keep session items</label>
{{if .HasItem}}<input type="hidden" name="item" value="{{.Item}}">{{end}}
<button type="submit">recommend</button>
</form>
{{with .Answer}}<div id="answer">{{template "answer" ($.Answer1 .)}}</div>{{end}}

<h2>Look up a tracked session</h2>
<form method="get" action="/" id="tracked-form">
<input type="text" name="tracked" value="{{.Tracked}}" placeholder="session id as sent with its clicks" aria-label="tracked session id">
<input type="number" name="k" value="{{.K}}" min="1" aria-label="k">
<button type="submit">look up</button>
</form>
{{if and .HasTracked (not .Error)}}<div id="tracked">
{{if not .TrackedFound}}<p class="muted">session <span class="id">{{.Tracked}}</span> is not tracked: never seen, forgotten, or expired after its inactivity timeout</p>
{{else}}<p>session <span class="id">{{.Tracked}}</span>, its recent clicks, oldest first:</p>
<ol id="tracked-items">{{range .TrackedItems}}<li class="id">{{template "item" ($.Item1 .)}}</li>{{end}}</ol>
{{with .TrackedAnswer}}{{template "answer" ($.Answer1 .)}}{{end}}{{end}}
</div>{{end}}

<p class="muted">JSON: <a href="/v1/stats">/v1/stats</a> · <a href="/metrics">/metrics</a> · <a href="/readyz">/readyz</a></p>
</body>
</html>
{{define "item"}}<a href="/?item={{.Name}}">{{.Name}}</a>{{with .Label.Title}}<span class="label">{{.}}</span>{{end}}{{with .Label.Categories}}<span class="label">{{range $i, $c := .}}{{if $i}} · {{end}}{{$c}}{{end}}</span>{{end}}{{end}}
{{define "answer"}}{{$v := .View}}{{with .Result}}<p>source <b class="answer-source">{{.Source}}</b>{{if eq .Source "pop"}} (popularity fallback: the session holds no item the models know){{end}};
known items <b class="answer-known">{{.Known}}</b>, unknown <b class="answer-unknown">{{.Unknown}}</b></p>
{{if .Items}}<table>
<thead><tr><th class="num">#</th><th>item</th><th class="num">score</th>{{range $v.Signals}}<th class="num">{{.}}</th>{{end}}</tr></thead>
<tbody>{{range $i, $r := .Items}}{{if $r.Explore}}<tr class="answer-row explore"><td class="num">{{add $i 1}}</td><td class="id">{{template "item" ($v.Item1 $r.Item)}}<span class="badge">exploring</span></td><td class="muted" colspan="{{$v.ExploreSignals}}">exploration slot: a new item drawn by Thompson sampling, not ranked by the blend</td></tr>
{{else}}<tr class="answer-row"><td class="num">{{add $i 1}}</td><td class="id">{{template "item" ($v.Item1 $r.Item)}}{{if $r.Fresh}}<span class="badge">new</span>{{end}}</td><td class="num">{{f3 $r.Score}}</td>{{range $v.Signals}}<td class="num">{{feature $r.Features .}}</td>{{end}}</tr>
{{end}}{{end}}</tbody></table>{{else}}<p class="muted">no answer: the models hold no items yet</p>{{end}}
<p class="muted">Each feature is that signal's score divided by its best score for this session, so it lies in 0..1. The score ranks the list: the blend combines the features with its weights, and the content signal's weight backs off as an item gathers clicks, so the score is not a plain weighted sum of the columns shown.</p>{{end}}{{end}}
`
