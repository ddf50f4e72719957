// Package synth generates synthetic click streams for benchmarks: Zipf item
// popularity, sessions of 2 to 12 clicks and a first-order drift so that
// transitions carry signal. Same shape as the acceptance checks' generator.
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
}

// Generate returns opts.Events events in time order.
func Generate(opts Options) []stream.Event {
	if opts.Items == 0 {
		opts.Items = 5000
	}
	if opts.Zipf == 0 {
		opts.Zipf = 1.1
	}
	if opts.Concurrent < 1 {
		opts.Concurrent = 1
	}
	rng := rand.New(rand.NewPCG(opts.Seed, 17))
	cum := make([]float64, opts.Items)
	acc := 0.0
	for r := range cum {
		acc += 1 / math.Pow(float64(r+1), opts.Zipf)
		cum[r] = acc
	}
	draw := func() int { return sort.SearchFloat64s(cum, rng.Float64()*acc) }
	names := make([]string, opts.Items)
	for i := range names {
		names[i] = "p" + strconv.Itoa(i)
	}
	type live struct {
		id        string
		cur, left int
	}
	out := make([]stream.Event, 0, opts.Events)
	t := int64(1767225600000)
	s := 0
	newSession := func() live {
		s++
		return live{id: "v" + strconv.Itoa(s), cur: draw(), left: 2 + rng.IntN(11)}
	}
	active := make([]live, opts.Concurrent)
	for i := range active {
		active[i] = newSession()
	}
	steps := []int{1, 1, 1, 2, 3, 7}
	for len(out) < opts.Events {
		i := rng.IntN(len(active))
		a := &active[i]
		t += 1 + rng.Int64N(50)
		out = append(out, stream.Event{Session: a.id, Item: names[a.cur], TS: t})
		if rng.Float64() < 0.7 {
			a.cur = (a.cur + steps[rng.IntN(len(steps))]) % opts.Items
		} else {
			a.cur = draw()
		}
		if a.left--; a.left == 0 {
			active[i] = newSession()
		}
	}
	return out
}
