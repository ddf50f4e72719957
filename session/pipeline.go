package session

import (
	"context"
	"fmt"
	"math"
	"runtime"
	"strings"
	"sync"
	"time"

	"waymark/models"
	"waymark/store"
	"waymark/stream"
)

// PipelineOptions configures a [Pipeline].
type PipelineOptions struct {
	// Models are the model specs to build (default: the default blend).
	Models []string
	// HalfLife is the decay half-life of every count (default 7 days).
	HalfLife time.Duration
	// MaxItems caps the item dictionary (default 5,000,000). Once it is
	// full, clicks and records on items it does not know are counted as
	// overflow and learn nothing, so a flood of made-up ids cannot grow
	// memory without bound; raise the cap for a larger catalogue.
	MaxItems int
	// WalkRows answers single-model queries of sr and markov by walking
	// the whole neighbour row, keeping no ranked lists (see
	// models.Set.Recommender): slower queries, up to 16 bytes less a pair.
	// serve's default blend keeps no lists either way.
	WalkRows bool
	Tracker  TrackerOptions
	Set      models.SetOptions
}

// DefaultPipelineOptions returns the defaults serve and replay share.
func DefaultPipelineOptions() PipelineOptions {
	return PipelineOptions{
		Models:   []string{models.DefaultBlendSpec},
		HalfLife: models.DefaultHalfLife,
		MaxItems: 5_000_000,
		Tracker:  DefaultTrackerOptions(),
		Set:      models.DefaultSetOptions(),
	}
}

func (o *PipelineOptions) validate() error {
	d := DefaultPipelineOptions()
	if len(o.Models) == 0 {
		o.Models = d.Models
	}
	if o.HalfLife == 0 {
		o.HalfLife = d.HalfLife
	}
	if o.MaxItems == 0 {
		o.MaxItems = d.MaxItems
	}
	if o.MaxItems < 1 {
		return fmt.Errorf("%w: MaxItems %d below 1", ErrBadOption, o.MaxItems)
	}
	if o.HalfLife < time.Minute {
		return fmt.Errorf("%w: HalfLife %s below 1m", ErrBadOption, o.HalfLife)
	}
	return o.Tracker.validate()
}

// itemPrefix is the store prefix of the item dictionary.
const itemPrefix = "d/i/"

// Pipeline is the learning path serve and replay share: intern the item,
// update the session window, let every model observe the click. It is a
// deterministic function of the events applied, in their order. Apply must
// be called from one goroutine; the caller synchronises queries with it.
type Pipeline struct {
	opts     PipelineOptions
	Dict     *store.Dict
	Tracker  *Tracker
	Set      *models.Set
	recs     map[string]models.Recommender
	learners []models.Model
	warmers  []models.Warmer
	warm     models.WarmBatch
	decay    models.Decay
	cp       store.Checkpoint
	buf      []models.Step
	obs      models.Observation
	// before and asked serve ApplyAsked: the window of a session that
	// timed out, and the query handed to the caller (a local would escape
	// through the callback and cost an allocation per click).
	before []models.Step
	asked  models.Query
}

// NewPipeline builds the models named in opts, with no state.
func NewPipeline(opts PipelineOptions) (*Pipeline, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	tr, err := NewTracker(opts.Tracker)
	if err != nil {
		return nil, err
	}
	if opts.Set.KNNSessions == 0 {
		// The session-kNN index (in the learned default blend) keeps
		// sessions too: --max-sessions bounds both.
		opts.Set.KNNSessions = opts.Tracker.MaxSessions
	}
	p := &Pipeline{
		opts:    opts,
		Dict:    store.NewDict(itemPrefix),
		Tracker: tr,
		Set:     models.NewSet(opts.Set),
		recs:    map[string]models.Recommender{},
	}
	for _, spec := range opts.Models {
		m, err := p.Set.Get(spec)
		if err != nil {
			return nil, fmt.Errorf("model %q: %w", spec, err)
		}
		if opts.WalkRows {
			p.recs[spec] = p.Set.WalkRecommender(m)
		} else {
			p.recs[spec] = p.Set.Recommender(m)
		}
	}
	p.Set.Pop()     // every pipeline answers empty sessions
	p.Set.Catalog() // and knows availability from catalogue records
	p.learners = p.Set.Learners()
	for _, m := range p.learners {
		if w, ok := m.(models.Warmer); ok {
			p.warmers = append(p.warmers, w)
		}
	}
	for i, m := range p.learners {
		if pm, ok := m.(models.Persistent); ok {
			pm.SetPrefix("m/" + p.Set.Keys()[i] + "/")
		}
	}
	p.decay = models.NewDecay(opts.HalfLife, 0)
	return p, nil
}

// Options returns the effective options.
func (p *Pipeline) Options() PipelineOptions { return p.opts }

// Recommender returns the recommender built for spec.
func (p *Pipeline) Recommender(spec string) (models.Recommender, bool) {
	r, ok := p.recs[spec]
	return r, ok
}

// Checkpoint returns the pipeline's counters.
func (p *Pipeline) Checkpoint() store.Checkpoint { return p.cp }

// Decay returns the current decay parameters.
func (p *Pipeline) Decay() models.Decay { return p.decay }

// fingerprint names what the stored counts depend on.
func (p *Pipeline) fingerprint() string {
	return fmt.Sprintf("models=%s;half=%s;window=%d", strings.Join(p.Set.Keys(), "|"), p.opts.HalfLife, p.opts.Tracker.Window)
}

// expireEvery is how many applied events pass between sweeps of timed-out
// sessions; counting events, not wall time, keeps replay deterministic.
const expireEvery = 4096

// intern returns item's id, adding it unless the dictionary is full.
func (p *Pipeline) intern(item string) (models.ItemID, bool) {
	if id, ok := p.Dict.Lookup(item); ok {
		return id, true
	}
	if p.Dict.Len() >= p.opts.MaxItems {
		p.cp.Overflow++
		return 0, false
	}
	id, _ := p.Dict.Intern(item)
	return id, true
}

// Apply learns one valid event.
func (p *Pipeline) Apply(ev *stream.Event) { p.ApplyAsked(ev, 0, false, nil) }

// ApplyInterned is Apply for an event whose item the caller has looked up
// already: item must be ev.Item's id in Dict. A replay knows the id of
// every item it has applied once, and this spares it hashing the name
// again for every click.
func (p *Pipeline) ApplyInterned(ev *stream.Event, item models.ItemID) {
	p.ApplyAsked(ev, item, true, nil)
}

// ApplyAsked is Apply for a caller that asks a query of the click's
// session just before each click is learned (replay): ask gets the query
// SessionQuery would have returned right before the click (tracked false
// when the session was not tracked) and runs before any model learns the
// click. The tracker finds the session once for both. item is ev.Item's
// id when known is true (as for ApplyInterned). The query's Session is
// valid only during ask; ask must not call the pipeline. With a nil ask it
// is Apply, or ApplyInterned when known.
func (p *Pipeline) ApplyAsked(ev *stream.Event, item models.ItemID, known bool, ask func(q *models.Query, tracked bool)) {
	if !known {
		item, known = p.Dict.Lookup(ev.Item)
		if !known && p.Dict.Len() >= p.opts.MaxItems {
			if ask != nil {
				// Nothing is learned: the query sees the tracker as it is.
				var ok bool
				p.asked, ok = p.SessionQueryInto(ev.Session, p.before[:0])
				p.before = p.asked.Session[:0]
				ask(&p.asked, ok)
			}
			p.cp.Overflow++
			p.cp.Applied++
			return
		}
	}
	p.apply(ev, item, known, ask)
}

// apply learns ev; item is its id when known, else ev.Item is interned
// (the caller has checked that the dictionary has room). A non-nil ask is
// asked the session's query after the tracker has seen the click and
// before the models learn it (ApplyAsked).
func (p *Pipeline) apply(ev *stream.Event, item models.ItemID, known bool, ask func(*models.Query, bool)) {
	if !known {
		item, _ = p.Dict.Intern(ev.Item)
	}
	p.cp.Touches++
	var c Click
	if ask == nil {
		c = p.Tracker.Observe(ev.Session, item, ev.TS, p.cp.Touches, p.nextSession, p.buf)
	} else {
		var b Before
		c, b = p.Tracker.ObserveBefore(ev.Session, item, ev.TS, p.cp.Touches, p.nextSession, p.buf, p.before)
		if b.Tracked && len(b.Steps) > 0 && len(c.Window) == 0 {
			p.before = b.Steps[:0] // the timed-out window's buffer, kept
		}
		// The watermark is still the one before the click: the
		// counters move after the models learn it.
		p.asked = models.Query{Session: b.Steps, Now: p.cp.Watermark, SessionNo: b.No}
		ask(&p.asked, b.Tracked)
		p.asked.Session = nil
	}
	p.buf = c.Window[:0]
	// The decay reference moves after the query, which must see the
	// models as they were; the tracker never reads it.
	if p.cp.DecayRef == 0 {
		p.setDecayRef(ev.TS)
	} else if p.decay.NeedsRebase(ev.TS) {
		p.rebase(ev.TS)
	}
	// The observation lives in the pipeline: passed to the learners
	// through an interface, a local would escape and cost an allocation
	// per event.
	o := &p.obs
	*o = models.Observation{
		Window:      c.Window,
		Item:        item,
		TS:          ev.TS,
		Kind:        uint8(ev.Kind),
		SessionNo:   c.No,
		SessionHash: models.HashSession(ev.Session),
		Repeat:      c.Repeat,
		Weight:      p.decay.Weight(ev.TS),
	}
	p.warm.Reset()
	for _, w := range p.warmers {
		w.Warm(o, &p.warm)
	}
	p.warm.Run()
	for _, m := range p.learners {
		m.Observe(o)
	}
	o.Window = nil // the window buffer is reused by the next event
	p.cp.Applied++
	if ev.TS > p.cp.Watermark {
		p.cp.Watermark = ev.TS
	}
	if p.cp.Applied%expireEvery == 0 {
		p.Tracker.Expire(p.cp.Watermark)
	}
}

func (p *Pipeline) nextSession() uint64 {
	p.cp.Sessions++
	return p.cp.Sessions
}

func (p *Pipeline) setDecayRef(ref int64) {
	p.cp.DecayRef = ref
	p.decay = models.NewDecay(p.opts.HalfLife, ref)
	for _, m := range p.learners {
		if d, ok := m.(models.DecayAware); ok {
			d.SetDecay(p.decay)
		}
	}
}

// rebase moves the decay reference to ts and rescales every count, so
// landmark weights stay far inside float64's range however long the
// service runs.
func (p *Pipeline) rebase(ts int64) {
	f := math.Exp2(-float64(ts-p.cp.DecayRef) / p.decay.HalfLifeMS)
	for _, m := range p.learners {
		if r, ok := m.(models.Rescaler); ok {
			r.Rescale(f)
		}
	}
	p.setDecayRef(ts)
}

// NewQuery turns a sequence of item ids into a query at event time now
// (0 means the latest event time applied). Unknown items are counted and
// left out; consecutive repeats collapse.
func (p *Pipeline) NewQuery(items []string, now int64) models.Query {
	if now == 0 {
		now = p.cp.Watermark
	}
	q := models.Query{Now: now}
	for _, s := range items {
		id, ok := p.Dict.Lookup(s)
		if !ok {
			q.Unknown++
			continue
		}
		if n := len(q.Session); n > 0 && q.Session[n-1].Item == id {
			continue
		}
		q.Session = append(q.Session, models.Step{Item: id, TS: now})
	}
	return q
}

// SessionQuery returns a query from a tracked session's window; ok is false
// when the session is not tracked (the query is then empty).
func (p *Pipeline) SessionQuery(key string) (models.Query, bool) {
	return p.SessionQueryInto(key, nil)
}

// SessionQueryInto is SessionQuery with the window copied into buf, so a
// caller that asks one query after another (replay) reuses one buffer
// instead of allocating a window per query. The query's Session is buf's
// array (grown when too small): it is valid until the caller reuses buf.
func (p *Pipeline) SessionQueryInto(key string, buf []models.Step) (models.Query, bool) {
	steps, no, ok := p.Tracker.Window(key, 0, buf)
	return models.Query{Session: steps, Now: p.cp.Watermark, SessionNo: no}, ok
}

// Flush writes everything changed since the last flush, and the
// checkpoint cp (the caller sets its stream fields), into kv.
func (p *Pipeline) Flush(tx store.KV, cp store.Checkpoint) error {
	if err := p.Dict.Flush(tx); err != nil {
		return err
	}
	if err := p.Tracker.Flush(tx); err != nil {
		return err
	}
	for _, m := range p.learners {
		if pm, ok := m.(models.Persistent); ok {
			if err := pm.Flush(tx); err != nil {
				return fmt.Errorf("flush %s: %w", pm.Prefix(), err)
			}
		}
	}
	cp.Config = p.fingerprint()
	cp.Items = uint64(p.Dict.Len())
	return store.PutCheckpoint(tx, cp)
}

// Load restores the pipeline from st. A store built with another model
// configuration is refused.
func (p *Pipeline) Load(ctx context.Context, st *store.Store) error {
	cp, err := st.Checkpoint()
	if err != nil {
		return err
	}
	if cp.Config != "" && cp.Config != p.fingerprint() {
		return fmt.Errorf("%w: stored %q, configured %q (use a fresh data folder)", ErrConfigChanged, cp.Config, p.fingerprint())
	}
	// The dictionary, the sessions and each learner live under their own
	// prefixes and restore into their own state, so they load side by
	// side: a restart is decoding-bound, and the cores would otherwise
	// take turns.
	tasks := []func(context.Context) error{
		func(ctx context.Context) error {
			d, err := st.LoadDict(ctx, itemPrefix)
			if err != nil {
				return err
			}
			p.Dict = d
			return nil
		},
		func(ctx context.Context) error {
			if err := st.Scan(ctx, []byte(sessionPrefix), p.Tracker.Load); err != nil {
				return fmt.Errorf("load sessions: %w", err)
			}
			p.Tracker.Loaded()
			return nil
		},
	}
	// Item ids in model entries are bounded while loading (the dictionary
	// is loading alongside) by the most the state can hold, and checked
	// against the dictionary's size once it has loaded.
	bound := max(p.opts.MaxItems, int(cp.Items))
	if cp.Items == 0 {
		bound = max(bound, DefaultPipelineOptions().MaxItems)
	}
	for _, m := range p.learners {
		if b, ok := m.(models.ItemBounded); ok {
			b.LoadBound(bound)
		}
	}
	for _, m := range p.learners {
		if pm, ok := m.(models.Persistent); ok {
			tasks = append(tasks, func(ctx context.Context) error {
				if err := st.Scan(ctx, []byte(pm.Prefix()), pm.Load); err != nil {
					return fmt.Errorf("load %s: %w", pm.Prefix(), err)
				}
				return nil
			})
		}
	}
	if err := runTasks(ctx, runtime.GOMAXPROCS(0), tasks); err != nil {
		return err
	}
	// The checkpoint is written with the state it describes: state
	// without one (a lost checkpoint key) would replay the whole stream
	// on top of the counts, and a dictionary of another size than it
	// records means lost or foreign entries.
	if cp.Seq == 0 && (p.Dict.Len() > 0 || p.Tracker.Len() > 0) {
		return fmt.Errorf("%w: the store holds %d items and %d sessions but no checkpoint", store.ErrCorrupt, p.Dict.Len(), p.Tracker.Len())
	}
	for i, m := range p.learners {
		if b, ok := m.(models.ItemBounded); ok && b.LoadedItems() > p.Dict.Len() {
			return fmt.Errorf("%w: model %s refers to item id %d, the dictionary holds %d", models.ErrCorrupt, p.Set.Keys()[i], b.LoadedItems()-1, p.Dict.Len())
		}
	}
	if cp.Items != 0 && uint64(p.Dict.Len()) != cp.Items {
		return fmt.Errorf("%w: the checkpoint records %d items, the dictionary holds %d", store.ErrCorrupt, cp.Items, p.Dict.Len())
	}
	p.cp = cp
	if cp.DecayRef != 0 {
		p.setDecayRef(cp.DecayRef)
	}
	return nil
}

// runTasks runs tasks on up to workers goroutines and returns the first
// error, after which the tasks not yet started are not run and the running
// ones see their context cancelled.
func runTasks(ctx context.Context, workers int, tasks []func(context.Context) error) error {
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	var (
		mu    sync.Mutex
		next  int
		first error
		wg    sync.WaitGroup
	)
	take := func() func(context.Context) error {
		mu.Lock()
		defer mu.Unlock()
		if first != nil || next == len(tasks) {
			return nil
		}
		next++
		return tasks[next-1]
	}
	for range min(max(workers, 1), len(tasks)) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for t := take(); t != nil; t = take() {
				if err := t(ctx); err != nil {
					mu.Lock()
					if first == nil {
						first = err
						cancel()
					}
					mu.Unlock()
				}
			}
		}()
	}
	wg.Wait()
	return first
}

// Track updates the session's window with ev without teaching any model;
// a temporal-split evaluation uses it for test sessions, which must be
// tracked to form queries but must not be learned.
func (p *Pipeline) Track(ev *stream.Event) Click {
	item, ok := p.intern(ev.Item)
	if !ok {
		return Click{}
	}
	p.cp.Touches++
	c := p.Tracker.Observe(ev.Session, item, ev.TS, p.cp.Touches, p.nextSession, p.buf)
	p.buf = c.Window[:0]
	if ev.TS > p.cp.Watermark {
		p.cp.Watermark = ev.TS
	}
	return c
}

// ApplyItem learns one valid catalogue record.
func (p *Pipeline) ApplyItem(rec *stream.ItemRecord, ts int64) {
	item, ok := p.intern(rec.Item)
	if !ok {
		return
	}
	info := models.ItemInfo{
		Item:      item,
		Attrs:     rec.Attrs,
		Vector:    rec.Vector,
		Available: rec.Available == nil || *rec.Available,
		Published: rec.Published,
		TS:        ts,
	}
	if ts == 0 {
		info.TS = p.cp.Watermark
	}
	for _, m := range p.learners {
		if c, ok := m.(models.CatalogLearner); ok {
			c.ObserveItem(&info)
		}
	}
	p.cp.Catalog++
}

// Forget deletes a session everywhere: its window in the tracker and
// whatever a model keeps about its past instances. It is applied from the
// log, so every replica forgets at the same point.
func (p *Pipeline) Forget(session string) {
	p.Tracker.Delete(session)
	h := models.HashSession(session)
	for _, m := range p.learners {
		if f, ok := m.(models.Forgetter); ok {
			f.ForgetSession(h)
		}
	}
}

// Served records the items a response showed in its exploration slots for
// session (empty for a sent sequence) at event time ts.
func (p *Pipeline) Served(session string, items []string, ts int64) {
	var no uint64
	if session != "" {
		if _, n, ok := p.Tracker.Window(session, 0, nil); ok {
			no = n
		}
	}
	ids := make([]models.ItemID, 0, len(items))
	for _, it := range items {
		if id, ok := p.Dict.Lookup(it); ok {
			ids = append(ids, id)
		}
	}
	for _, m := range p.learners {
		if e, ok := m.(models.ExposureLearner); ok {
			e.Served(no, ids, ts)
		}
	}
}

// ApplyPrior learns one imported neighbour list.
func (p *Pipeline) ApplyPrior(row *stream.PriorRow) {
	item, ok := p.intern(row.Item)
	if !ok {
		return
	}
	ns := make([]models.Scored, 0, len(row.Neighbors))
	for _, n := range row.Neighbors {
		if id, ok := p.intern(n.Item); ok {
			ns = append(ns, models.Scored{Item: id, Score: n.Weight})
		}
	}
	for _, m := range p.learners {
		if pl, ok := m.(models.PriorLearner); ok {
			pl.ObservePrior(item, ns)
		}
	}
}

// ExportPriors calls f with each item's learned neighbours from every model
// that can export them, scores scaled to [0, 1] per item.
func (p *Pipeline) ExportPriors(f func(row stream.PriorRow) error) error {
	keys := p.Set.Keys()
	for i, m := range p.learners {
		ex, ok := m.(models.Exporter)
		if !ok {
			continue
		}
		err := ex.Export(p.cp.Watermark, func(item models.ItemID, ns []models.Scored) error {
			row := stream.PriorRow{Model: keys[i], Item: p.Dict.Name(item), Neighbors: make([]stream.PriorNeighbor, len(ns))}
			for j, n := range ns {
				row.Neighbors[j] = stream.PriorNeighbor{Item: p.Dict.Name(n.Item), Weight: n.Score}
			}
			return f(row)
		})
		if err != nil {
			return err
		}
	}
	return nil
}

// DirtyBytes estimates what the next Flush writes, from the models that can
// tell and the session windows.
func (p *Pipeline) DirtyBytes() int {
	n := p.Tracker.DirtyBytes()
	for _, m := range p.learners {
		if d, ok := m.(models.DirtySizer); ok {
			n += d.DirtyBytes()
		}
	}
	return n
}
