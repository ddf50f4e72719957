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
}

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
<title>waymark</title>
<style>
body{font:14px/1.45 system-ui,sans-serif;margin:0 auto;max-width:1100px;padding:1rem 1.5rem;color:#1d232a;background:#fbfbfa}
h1{font-size:1.4rem;margin:.2rem 0 1rem}h2{font-size:1.05rem;margin:1.6rem 0 .5rem;border-bottom:1px solid #d8dadd;padding-bottom:.2rem}
table{border-collapse:collapse;margin:.3rem 0}th,td{padding:.2rem .7rem;text-align:left;border-bottom:1px solid #eceef0;vertical-align:top}
th{font-weight:600;color:#4a525b}td.num,th.num{text-align:right;font-variant-numeric:tabular-nums}
.grid{display:grid;grid-template-columns:repeat(auto-fit,minmax(190px,1fr));gap:.5rem}
.card{background:#fff;border:1px solid #e1e3e6;border-radius:6px;padding:.5rem .8rem}
.card b{display:block;font-size:1.25rem;font-variant-numeric:tabular-nums;word-break:break-all}.card span{color:#5b636c;font-size:.85rem}
.ok{color:#176b2c}.bad{color:#a8200d}.muted{color:#7a828b}
.error{background:#fdecea;border:1px solid #f1b5ad;border-radius:6px;padding:.5rem .8rem;margin:.8rem 0}
form{margin:.4rem 0}input[type=text]{width:28rem;max-width:100%;padding:.25rem}input[type=number]{width:4.5rem;padding:.25rem}
code,.id{font-family:ui-monospace,monospace;word-break:break-all}.cols{display:grid;grid-template-columns:1fr 1fr;gap:1.5rem}
@media (max-width:800px){.cols{grid-template-columns:1fr}}
</style>
</head>
<body>
<h1>waymark <span id="ready" class="{{if .Ready}}ok{{else}}bad{{end}}">{{if .Ready}}ready{{else}}not ready: {{.NotReady}}{{end}}</span></h1>
{{with .Error}}<div class="error" id="error" role="alert"><b>{{.Code}}</b>: {{.Message}}</div>{{end}}

<h2>Stats</h2>
<div class="grid" id="stats">
<div class="card"><span>events applied</span><b id="events-applied">{{.Stats.EventsApplied}}</b></div>
<div class="card"><span>events rejected</span><b id="events-rejected">{{.Stats.EventsRejected}}</b></div>
<div class="card"><span>catalogue records applied</span><b id="catalog-applied">{{.Stats.CatalogApplied}}</b></div>
<div class="card"><span>last sequence / stream last</span><b id="last-sequence">{{.Stats.LastSequence}} / {{.Stats.StreamLast}}</b></div>
<div class="card"><span>consumer lag (messages)</span><b id="consumer-lag">{{.Stats.Lag}}</b></div>
<div class="card"><span>items</span><b id="items">{{.Stats.Items}}</b></div>
<div class="card"><span>sessions tracked</span><b id="sessions">{{.Stats.SessionsActive}}</b></div>
<div class="card"><span>store size</span><b id="store-size" title="{{.Stats.StoreBytes}} bytes">{{.StoreSize}}</b></div>
<div class="card"><span>event-time watermark</span><b id="watermark">{{if .Stats.Watermark}}{{.Stats.Watermark}}{{else}}none yet{{end}}</b></div>
{{with .Stats.Blend}}<div class="card"><span>blend mixture (learned, {{.Evaluated}} clicks scored)</span><b id="blend-mixture">{{(index .Rules 0).Chosen}}</b></div>{{end}}
</div>
<p>answers with <code id="blend">{{.Blend}}</code>; models learning: <span id="models">{{range $i, $m := .Stats.Models}}{{if $i}}, {{end}}<code>{{$m}}</code>{{end}}</span></p>

<div class="cols">
<section>
<h2>Popular items</h2>
{{if .Popular}}<table id="popular">
<thead><tr><th class="num">#</th><th>item</th><th class="num">decayed clicks</th></tr></thead>
<tbody>{{range $i, $p := .Popular}}<tr><td class="num">{{add $i 1}}</td><td class="id"><a href="/?item={{$p.Item}}">{{$p.Item}}</a></td><td class="num">{{f1 $p.Clicks}}</td></tr>
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
<tbody>{{range .Neighbors}}<tr><td class="id"><a href="/?item={{.Item}}">{{.Item}}</a></td><td class="num">{{f3 .Score}}</td></tr>
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
{{with .Answer}}<div id="answer">
<p>source <b id="answer-source">{{.Source}}</b>{{if eq .Source "pop"}} (popularity fallback: the session holds no item the models know){{end}};
known items <b id="answer-known">{{.Known}}</b>, unknown <b id="answer-unknown">{{.Unknown}}</b></p>
{{if .Items}}<table>
<thead><tr><th class="num">#</th><th>item</th><th class="num">score</th>{{range $.Signals}}<th class="num">{{.}}</th>{{end}}</tr></thead>
<tbody>{{range $i, $r := .Items}}<tr class="answer-row"><td class="num">{{add $i 1}}</td><td class="id"><a href="/?item={{$r.Item}}">{{$r.Item}}</a></td><td class="num">{{f3 $r.Score}}</td>{{range $.Signals}}<td class="num">{{feature $r.Features .}}</td>{{end}}</tr>
{{end}}</tbody></table>{{else}}<p class="muted">no answer: the models hold no items yet</p>{{end}}
<p class="muted">Each feature is that signal's score divided by its best score for this session (so it lies in 0..1); the score is the blend's weighted sum of the features.</p>
</div>{{end}}

<p class="muted">JSON: <a href="/v1/stats">/v1/stats</a> · <a href="/metrics">/metrics</a> · <a href="/readyz">/readyz</a></p>
</body>
</html>
`
