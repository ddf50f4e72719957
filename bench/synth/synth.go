// Package synth generates synthetic click streams for benchmarks: Zipf item
// popularity, sessions of 2 to 12 clicks and a first-order drift so that
// transitions carry signal. Same shape as the acceptance checks' generator.
//
// Generate returns a whole stream as a slice; a [Gen] produces the same
// events one at a time, for streams too large to hold (the cost-growth
// benchmark learns 50M events). AppendLine writes an event as one JSON line
// of about 200 bytes, the size issue 6 measures the bus with.
package synth

import (
	"math"
	"math/rand/v2"
	"sort"
	"strconv"

	"waymark/stream"
)

// Options sizes a stream.
type Options struct {
	Events int
	Items  int     // default 5000
	Zipf   float64 // exponent, default 1.1
	Seed   uint64
	// Concurrent interleaves this many sessions at a time (default 1:
	// sessions one after the other).
	Concurrent int
	// Start is the first event time, unix ms (default 2026-01-01).
	Start int64
	// SessionPrefix starts every session id (default "v"), so two streams
	// can be told apart.
	SessionPrefix string
}

// Gen produces a stream one event at a time; its events equal Generate's
// for the same options.
type Gen struct {
	rng    *rand.Rand
	cum    []float64
	acc    float64
	names  []string
	active []live
	t      int64
	s      int
	prefix string
}

type live struct {
	id        string
	cur, left int
}

var steps = [...]int{1, 1, 1, 2, 3, 7}

// NewGen returns a generator for opts (Events is ignored: call Next as
// often as needed).
func NewGen(opts Options) *Gen {
	if opts.Items == 0 {
		opts.Items = 5000
	}
	if opts.Zipf == 0 {
		opts.Zipf = 1.1
	}
	if opts.Concurrent < 1 {
		opts.Concurrent = 1
	}
	if opts.Start == 0 {
		opts.Start = 1767225600000
	}
	if opts.SessionPrefix == "" {
		opts.SessionPrefix = "v"
	}
	g := &Gen{rng: rand.New(rand.NewPCG(opts.Seed, 17)), cum: make([]float64, opts.Items), t: opts.Start, prefix: opts.SessionPrefix}
	for r := range g.cum {
		g.acc += 1 / math.Pow(float64(r+1), opts.Zipf)
		g.cum[r] = g.acc
	}
	g.names = make([]string, opts.Items)
	for i := range g.names {
		g.names[i] = ItemName(i)
	}
	g.active = make([]live, opts.Concurrent)
	for i := range g.active {
		g.active[i] = g.newSession()
	}
	return g
}

// ItemName is the name of the item of popularity rank r (0 is the most
// popular).
func ItemName(r int) string { return "p" + strconv.Itoa(r) }

func (g *Gen) draw() int { return sort.SearchFloat64s(g.cum, g.rng.Float64()*g.acc) }

func (g *Gen) newSession() live {
	g.s++
	return live{id: g.prefix + strconv.Itoa(g.s), cur: g.draw(), left: 2 + g.rng.IntN(11)}
}

// Next returns the next event.
func (g *Gen) Next() stream.Event {
	i := g.rng.IntN(len(g.active))
	a := &g.active[i]
	g.t += 1 + g.rng.Int64N(50)
	ev := stream.Event{Session: a.id, Item: g.names[a.cur], TS: g.t}
	if g.rng.Float64() < 0.7 {
		a.cur = (a.cur + steps[g.rng.IntN(len(steps))]) % len(g.names)
	} else {
		a.cur = g.draw()
	}
	if a.left--; a.left == 0 {
		g.active[i] = g.newSession()
	}
	return ev
}

// LastTS returns the event time of the last event Next returned.
func (g *Gen) LastTS() int64 { return g.t }

// Generate returns opts.Events events in time order.
func Generate(opts Options) []stream.Event {
	g := NewGen(opts)
	out := make([]stream.Event, opts.Events)
	for i := range out {
		out[i] = g.Next()
	}
	return out
}

// AppendLine appends ev as one JSON object of about 200 bytes: the
// canonical fields plus a view kind, an event id and page context fields
// that waymark ignores, as a site's click tracker would send them. seq
// makes the event id unique.
func AppendLine(dst []byte, ev *stream.Event, seq uint64) []byte {
	dst = append(dst, `{"session":"`...)
	dst = append(dst, ev.Session...)
	dst = append(dst, `","item":"`...)
	dst = append(dst, ev.Item...)
	dst = append(dst, `","ts":`...)
	dst = strconv.AppendInt(dst, ev.TS, 10)
	dst = append(dst, `,"kind":"view","id":"e-`...)
	dst = strconv.AppendUint(dst, seq, 36)
	dst = append(dst, `","page":"/shop/c/`...)
	dst = append(dst, ev.Item...)
	dst = append(dst, `?ref=listing&pos=3","locale":"xx-XX","screen":1280,"returning":false,"agent":"bench-client/1.0"}`...)
	return dst
}
