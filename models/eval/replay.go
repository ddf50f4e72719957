package eval

import (
	"context"
	"fmt"

	"waymark/models"
	"waymark/session"
	"waymark/stream"
)

// progressEvery is how many events pass between progress reports and
// cancellation checks.
const progressEvery = 1 << 16

// Run replays the log under opts and scores every model. The log is not
// changed, so one log can be run under several options.
func Run(ctx context.Context, l *Log, opts Options) (*Report, error) {
	if err := opts.Validate(); err != nil {
		return nil, err
	}
	if l.Len() == 0 {
		return nil, fmt.Errorf("%w: the log is empty", ErrNoEvents)
	}
	timeout := opts.Pipeline.Tracker.Timeout.Milliseconds()
	rep := &Report{Dataset: l.Summarize(timeout), Protocol: opts.info()}
	pl := preprocess(l, &opts)
	if opts.Protocol == Temporal {
		rep.Protocol.SplitAt = fmtTS(pl.split)
	}
	if pl.prep.EventsKept == 0 {
		return nil, fmt.Errorf("%w: preprocessing dropped every event (%d rare-item, %d short-session)",
			ErrNoEvents, pl.prep.RareItemEvents, pl.prep.ShortSessionEvents)
	}
	var err error
	var e *evaluator
	if opts.Protocol == KFold {
		e, err = runKFold(ctx, l, &opts, pl, rep)
	} else {
		e, err = runStream(ctx, l, &opts, pl, rep)
	}
	if err != nil {
		return nil, err
	}
	rep.Preprocessing = pl.prep
	rep.Models = e.finish()
	rep.Warnings = rep.warnings()
	return rep, nil
}

// Validate fills zero values with the defaults and reports the first bad
// option, naming its field; errors wrap ErrBadOption. Run calls it; callers
// call it too when they want to refuse bad options before reading a log.
func (o *Options) Validate() error {
	o.fillPipeline()
	if err := o.validate(); err != nil {
		return err
	}
	if _, err := newPipeline(o); err != nil { // every model spec builds
		return err
	}
	return nil
}

// fillPipeline fills the pipeline options' zero values with serve's
// defaults, before validate reads the timeout.
func (o *Options) fillPipeline() {
	d := session.DefaultPipelineOptions()
	if o.Pipeline.HalfLife == 0 {
		o.Pipeline.HalfLife = d.HalfLife
	}
	t := &o.Pipeline.Tracker
	if t.Window == 0 {
		t.Window = d.Tracker.Window
	}
	if t.Timeout == 0 {
		t.Timeout = d.Tracker.Timeout
	}
	if t.MaxSessions == 0 {
		t.MaxSessions = d.Tracker.MaxSessions
	}
	s := &o.Pipeline.Set
	if s.CapPerItem == 0 {
		s.CapPerItem = d.Set.CapPerItem
	}
	if s.SRWindow == 0 {
		s.SRWindow = d.Set.SRWindow
	}
}

func (o *Options) info() ProtocolInfo {
	pi := ProtocolInfo{
		Name:            o.Protocol,
		Target:          o.Target,
		K:               o.K,
		Exclude:         o.Exclude,
		Window:          o.Pipeline.Tracker.Window,
		SessionTimeout:  o.Pipeline.Tracker.Timeout.String(),
		MaxSessions:     o.Pipeline.Tracker.MaxSessions,
		HalfLife:        o.Pipeline.HalfLife.String(),
		CapPerItem:      o.Pipeline.Set.CapPerItem,
		SRWindow:        o.Pipeline.Set.SRWindow,
		TestDays:        o.TestDays,
		LearnDuringTest: o.LearnDuringTest,
		ColdThreshold:   o.ColdThreshold,
	}
	if o.Protocol == KFold {
		k := o.KFold
		pi.KFold = &k
	}
	return pi
}

// newPipeline builds one pipeline holding every model of the run, so a
// grid's models and a blend's parts learn in one pass.
func newPipeline(o *Options) (*session.Pipeline, error) {
	po := o.Pipeline
	po.Models = o.Models
	p, err := session.NewPipeline(po)
	if err != nil {
		return nil, fmt.Errorf("%w: Models: %w", ErrBadOption, err)
	}
	return p, nil
}

// catalogCursor applies the log's catalogue records in event-time order.
type catalogCursor struct {
	l *Log
	i int
}

func (c *catalogCursor) upTo(p *session.Pipeline, ts int64) {
	for c.i < len(c.l.catalog) && c.l.catalog[c.i].ts <= ts {
		e := &c.l.catalog[c.i]
		p.ApplyItem(&e.rec, e.ts)
		c.i++
	}
}

// runStream runs the prequential and temporal protocols: one pass over the
// log in event time, asking before teaching.
func runStream(ctx context.Context, l *Log, o *Options, pl *plan, rep *Report) (*evaluator, error) {
	p, err := newPipeline(o)
	if err != nil {
		return nil, err
	}
	e := newEvaluator(l, o, keptItems(l, pl))
	e.bind(p, p.Dict)
	for _, m := range e.ms {
		m.params = effectiveParams(p.Set, m.spec)
	}
	type instState struct {
		pos  int32
		last int64 // log item of the last click, -1 before the first
	}
	st := make([]instState, len(pl.infos))
	for i := range st {
		st[i].last = -1
	}
	var rest *restIndex
	if o.Target == TargetRest {
		rest = newRestIndex(l, pl)
	}
	// Scoring runs on a goroutine of its own from here to tl.wait.
	tl := startTallier(e, rest)
	defer tl.wait()
	skipSession := o.Exclude == ExcludeSession
	sc := &rep.Scoring
	cat := catalogCursor{l: l}
	total := pl.prep.EventsKept
	var done int64
	var q models.Query
	var inSession func(models.ItemID) bool
	if skipSession {
		inSession = func(id models.ItemID) bool {
			for _, s := range q.Session {
				if s.Item == id {
					return true
				}
			}
			return false
		}
	}
	// cur is the click being asked about (at -1: none); ask scores the
	// query of its session, from SessionQueryInto or ApplyAsked. One
	// closure for the run: one per click would be an allocation each.
	type asking struct {
		at     int
		in     int32
		target uint32
		pos    int
	}
	cur := asking{at: -1}
	var tq models.Query    // a query asked without learning its click
	var qbuf []models.Step // and its window
	ask := func(qq *models.Query, tracked bool) {
		if !tracked {
			sc.Untracked++
			return
		}
		q.Session, q.Now, q.SessionNo = qq.Session, qq.Now, qq.SessionNo
		if id, known := e.dictID(cur.target); known {
			for _, w := range q.Session {
				if w.Item == id {
					sc.TargetsInSession++
					break
				}
			}
		}
		tl.query(&q, inSession, cur.at, cur.in, cur.target, cur.pos)
		sc.Queries++
	}
	for i := range l.ev {
		if !pl.keep[i] {
			continue
		}
		if done%progressEvery == 0 {
			if err := ctx.Err(); err != nil {
				return nil, err
			}
			if o.Progress != nil {
				o.Progress(done, total)
			}
		}
		done++
		r := l.ev[i]
		cat.upTo(p, r.ts)
		in := pl.inst[i]
		s := &st[in]
		ev := stream.Event{Session: l.sessions[r.sess], Item: l.items[r.item], TS: r.ts, Kind: r.kind}
		learn := o.Protocol == Prequential || r.ts < pl.split || o.LearnDuringTest
		switch {
		case !pl.isTest(in):
			sc.TrainingClicks++
		case s.pos == 0:
			sc.FirstClicks++
		case s.last == int64(r.item):
			sc.Repeats++
		default:
			cur = asking{at: i, in: in, target: r.item, pos: int(s.pos)}
			if learn {
				// Asked by ApplyAsked, which finds the session once
				// for the query and the click.
				break
			}
			// The previous such query is done with: its window's
			// array takes this one.
			var ok bool
			tq, ok = p.SessionQueryInto(ev.Session, qbuf[:0])
			qbuf = tq.Session[:0]
			ask(&tq, ok)
			cur.at = -1
		}
		if learn {
			id, known := e.dictID(r.item)
			var a func(*models.Query, bool) // nil: no query of this click
			if cur.at >= 0 {
				a = ask
			}
			p.ApplyAsked(&ev, id, known, a)
			cur.at = -1
			tl.learned(r.item)
			sc.Learned++
		} else {
			p.Track(&ev)
		}
		if s.last != int64(r.item) {
			s.pos++
			s.last = int64(r.item)
		}
	}
	tl.wait()
	if o.Progress != nil {
		o.Progress(total, total)
	}
	return e, nil
}

// keptItems counts the distinct items of the kept events: the catalogue
// coverage is measured against.
func keptItems(l *Log, pl *plan) int {
	seen := make([]bool, len(l.items))
	n := 0
	for i, r := range l.ev {
		if pl.keep[i] && !seen[r.item] {
			seen[r.item] = true
			n++
		}
	}
	return n
}

// restIndex answers the rest-of-session target: for the click at event i of
// instance in, the relevant items are the distinct items of the session's
// clicks from i on.
type restIndex struct {
	last  map[uint64]int32 // (instance, item) -> index of its last click
	count []int32          // per event: distinct items from it to the session's end
	cur   int              // event the closure below answers for
	in    int32
}

func newRestIndex(l *Log, pl *plan) *restIndex {
	r := &restIndex{last: map[uint64]int32{}, count: make([]int32, len(l.ev))}
	distinct := make([]int32, len(pl.infos))
	for i := len(l.ev) - 1; i >= 0; i-- {
		if !pl.keep[i] {
			continue
		}
		in := pl.inst[i]
		k := uint64(in)<<32 | uint64(l.ev[i].item)
		if _, ok := r.last[k]; !ok {
			r.last[k] = int32(i)
			distinct[in]++
		}
		r.count[i] = distinct[in]
	}
	return r
}

func (r *restIndex) at(i int, in int32) (func(uint32) bool, int) {
	r.cur, r.in = i, in
	return r.relevant, int(r.count[i])
}

func (r *restIndex) relevant(li uint32) bool {
	j, ok := r.last[uint64(r.in)<<32|uint64(li)]
	return ok && int(j) >= r.cur
}
