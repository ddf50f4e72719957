package main

import (
	"cmp"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"time"

	"waymark/stream"
)

// Options size the scenario. Zero values take DefaultOptions' values.
type Options struct {
	Seed  uint64
	Start time.Time // first site's opening, the stream's start
	Days  int       // length of the first site's stream
	// Items is the first site's opening catalogue; LaunchesPerDay items
	// launch on each day after that, in the daytime.
	Items          int
	LaunchesPerDay int
	SessionsPerDay int // first site
	// BOpen is when the second site opens, after Start; it runs to the
	// end of the first site's stream with BSessionsPerDay sessions a day.
	BOpen           time.Duration
	BSessionsPerDay int
	// BShare is the share of the first site's items the second sells
	// (opening items and launches alike); BLocal items are its own.
	BShare float64
	BLocal int
	// BNoise is the spread (standard deviation of the log) of an item's
	// appeal on the second site around its appeal on the first.
	BNoise float64
}

// DefaultOptions returns the scenario of bench/RESULTS.md.
func DefaultOptions() Options {
	return Options{
		Seed:            1,
		Start:           time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC),
		Days:            14,
		Items:           1500,
		LaunchesPerDay:  40,
		SessionsPerDay:  1800,
		BOpen:           10*24*time.Hour + 8*time.Hour,
		BSessionsPerDay: 2400,
		BShare:          0.85,
		BLocal:          60,
		BNoise:          0.5,
	}
}

var errBadOption = errors.New("coldscenario: bad option")

func (o *Options) validate() error {
	d := DefaultOptions()
	if o.Start.IsZero() {
		o.Start = d.Start
	}
	fill := func(v *int, def int) {
		if *v == 0 {
			*v = def
		}
	}
	fill(&o.Days, d.Days)
	fill(&o.Items, d.Items)
	fill(&o.SessionsPerDay, d.SessionsPerDay)
	fill(&o.BSessionsPerDay, d.BSessionsPerDay)
	if o.BOpen == 0 {
		o.BOpen = d.BOpen
	}
	span := time.Duration(o.Days) * 24 * time.Hour
	switch {
	case o.Days < 1:
		return fmt.Errorf("%w: Days %d below 1", errBadOption, o.Days)
	case o.Items < len(categories):
		return fmt.Errorf("%w: Items %d below one per category (%d)", errBadOption, o.Items, len(categories))
	case o.LaunchesPerDay < 0 || o.BLocal < 0:
		return fmt.Errorf("%w: LaunchesPerDay and BLocal must be >= 0", errBadOption)
	case o.SessionsPerDay < 1 || o.BSessionsPerDay < 1:
		return fmt.Errorf("%w: SessionsPerDay and BSessionsPerDay must be >= 1", errBadOption)
	case o.BOpen <= 0 || o.BOpen >= span:
		return fmt.Errorf("%w: BOpen %s must lie inside the %d-day stream", errBadOption, o.BOpen, o.Days)
	case !(o.BShare > 0 && o.BShare <= 1):
		return fmt.Errorf("%w: BShare %g not in (0, 1]", errBadOption, o.BShare)
	case !(o.BNoise >= 0):
		return fmt.Errorf("%w: BNoise %g below 0", errBadOption, o.BNoise)
	}
	return nil
}

// The invented catalogue. Each category names two related ones: a visitor
// who changes course goes there, and an item's complements come from there.
type category struct {
	dept, name, noun string
	related          [2]int
}

var categories = func() []category {
	depts := []struct {
		name  string
		cats  [5]string
		nouns [5]string
	}{
		{"garden", [5]string{"planters", "seed-trays", "hand-tools", "hoses", "bird-feeders"}, [5]string{"planter", "seed tray", "trowel", "hose", "feeder"}},
		{"kitchen", [5]string{"mugs", "pans", "knives", "jars", "boards"}, [5]string{"mug", "pan", "knife", "jar", "board"}},
		{"lighting", [5]string{"lamps", "lanterns", "bulbs", "shades", "string-lights"}, [5]string{"lamp", "lantern", "bulb", "shade", "light string"}},
		{"bath", [5]string{"towels", "mats", "soap-dishes", "mirrors", "baskets"}, [5]string{"towel", "mat", "soap dish", "mirror", "basket"}},
		{"storage", [5]string{"boxes", "shelves", "hooks", "crates", "racks"}, [5]string{"box", "shelf", "hook", "crate", "rack"}},
		{"textiles", [5]string{"cushions", "throws", "curtains", "rugs", "napkins"}, [5]string{"cushion", "throw", "curtain", "rug", "napkin"}},
	}
	var cs []category
	for d, dp := range depts {
		for c := range 5 {
			// One related category in the same department, one in the
			// next: fixed, so the structure does not depend on the seed.
			cs = append(cs, category{dept: dp.name, name: dp.cats[c], noun: dp.nouns[c],
				related: [2]int{d*5 + (c+1)%5, ((d+1)%len(depts))*5 + (c+2)%5}})
		}
	}
	return cs
}()

var (
	styles    = []string{"rustic", "modern", "coastal", "nordic", "industrial", "vintage"}
	materials = []string{"oak", "steel", "ceramic", "linen", "glass", "rattan", "copper", "bamboo", "wool", "stoneware"}
	colours   = []string{"white", "charcoal", "sage", "ochre", "terracotta", "navy", "sand", "rose"}
	bands     = []string{"low", "mid", "high"}
	names     = []string{"alder", "brook", "cinder", "dell", "ember", "fallow", "glen", "heath", "isle", "juniper",
		"kestrel", "larch", "moss", "nettle", "orchard", "pebble", "quarry", "rowan", "sorrel", "thistle",
		"umber", "vale", "willow", "yarrow", "aspen", "bramble", "cove", "drift", "elm", "fern"}
)

// Behaviour of a visitor (common practice for a synthetic shop: these are
// chosen, not measured). Each step after the first follows the clicked
// item's complements, stays in the intended category, moves to a related
// category, or jumps anywhere, with these probabilities.
const (
	pComplement = 0.35
	pSameCat    = 0.45
	pRelated    = 0.10
	// pContinue: after each click the session goes on with this
	// probability (about five clicks a session), up to maxLen.
	pContinue = 0.8
	maxLen    = 40
	// A visitor with a style in mind weighs other styles this much.
	offStyle = 0.2
	// pStyled visitors have a style in mind.
	pStyled = 0.75
	// An item launched after its site opened draws (1 + freshBoost) times
	// its appeal at launch, fading with freshDecay.
	freshBoost = 5.0
	freshDecay = 36 * time.Hour
	// Time between clicks: minGap plus an exponential of meanGap.
	minGap  = 15 * time.Second
	meanGap = 40 * time.Second
)

// hourShare weighs each hour of the day (UTC) for session starts: quiet at
// night, busiest in the evening.
var hourShare = [24]float64{0.3, 0.2, 0.15, 0.1, 0.1, 0.15, 0.3, 0.6, 0.9, 1, 1, 1.05,
	1.1, 1.05, 1, 1, 1.05, 1.15, 1.3, 1.45, 1.5, 1.3, 0.9, 0.55}

// product is one item of the invented world, sold by one site or both.
type product struct {
	cat, style, material, colour, maker, band, name int
	launch                                          int64 // unix ms
	appeal                                          [2]float64
	id                                              [2]string // per site; "" when not sold there
	comps                                           []int
}

// site holds one market's view of the world.
type site struct {
	no           int
	open, end    int64 // unix ms
	perDay       int
	styleWeights []float64
	catWeights   []float64
	prefix       string
}

// Scenario is everything generated.
type Scenario struct {
	Opts     Options
	products []product
	byCat    [][]int
	sites    [2]site
	Events   [2][]stream.Event
	Catalog  [2][]stream.ItemRecord
	IDMap    [][2]string // from (first site), to (second site)
}

// Generate builds the scenario for opts.
func Generate(opts Options) (*Scenario, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	s := &Scenario{Opts: opts, byCat: make([][]int, len(categories))}
	rng := rand.New(rand.NewPCG(opts.Seed, 0x636f6c64)) // "cold"
	start := opts.Start.UnixMilli()
	end := opts.Start.Add(time.Duration(opts.Days) * 24 * time.Hour).UnixMilli()
	bOpen := opts.Start.Add(opts.BOpen).UnixMilli()
	s.sites[0] = site{no: 0, open: start, end: end, perDay: opts.SessionsPerDay, prefix: "a-s",
		styleWeights: []float64{0.25, 0.2, 0.15, 0.15, 0.15, 0.1}, catWeights: zipfWeights(rng, len(categories), 0.8)}
	// The second market likes other styles best and ranks categories a
	// little differently: the same kind of shop, not the same shop.
	bCats := slices.Clone(s.sites[0].catWeights)
	for range 6 {
		i, j := rng.IntN(len(bCats)), rng.IntN(len(bCats))
		bCats[i], bCats[j] = bCats[j], bCats[i]
	}
	s.sites[1] = site{no: 1, open: bOpen, end: end, perDay: opts.BSessionsPerDay, prefix: "b-s",
		styleWeights: []float64{0.1, 0.15, 0.1, 0.35, 0.1, 0.2}, catWeights: bCats}

	// The first site's opening catalogue, then its launches.
	for i := range opts.Items {
		s.addProduct(rng, i%len(categories), start, true)
	}
	for d := range opts.Days {
		day := start + int64(d)*day
		for range opts.LaunchesPerDay {
			at := day + int64((7+13*rng.Float64())*float64(time.Hour.Milliseconds()))
			s.addProduct(rng, rng.IntN(len(categories)), at, true)
		}
	}
	// The second site's local items open with it.
	for range opts.BLocal {
		s.addProduct(rng, rng.IntN(len(categories)), bOpen, false)
	}
	s.assignIDs(rng, bOpen)
	for i := range s.products {
		s.linkComplements(rng, i)
	}
	for no := range s.sites {
		s.Events[no] = s.simulate(rng, &s.sites[no])
		s.Catalog[no] = s.catalog(no)
	}
	return s, nil
}

const day = 24 * 60 * 60 * 1000

// zipfWeights returns n weights 1/r^a over a random order of ranks.
func zipfWeights(rng *rand.Rand, n int, a float64) []float64 {
	w := make([]float64, n)
	for i, r := range rng.Perm(n) {
		w[i] = 1 / math.Pow(float64(r+1), a)
	}
	return w
}

// addProduct creates an item of category cat launched at launch; inA says
// the first site sells it (a local item of the second site is not).
func (s *Scenario) addProduct(rng *rand.Rand, cat int, launch int64, inA bool) {
	p := product{
		cat: cat, style: rng.IntN(len(styles)), material: rng.IntN(len(materials)), colour: rng.IntN(len(colours)),
		maker: rng.IntN(25), band: rng.IntN(len(bands)), name: rng.IntN(len(names)), launch: launch,
	}
	// Appeal is log-normal (common practice for synthetic popularity); the
	// second market's is the first's with noise of its own.
	a := math.Exp(rng.NormFloat64() * 0.9)
	p.appeal = [2]float64{a, a * math.Exp(rng.NormFloat64()*s.Opts.BNoise)}
	if inA {
		p.id[0] = "-" // named in assignIDs
	}
	s.byCat[cat] = append(s.byCat[cat], len(s.products))
	s.products = append(s.products, p)
}

// assignIDs names the items: the first site numbers them in launch order,
// the second draws its numbers from a shuffled range, so nothing but the
// id map relates the two.
func (s *Scenario) assignIDs(rng *rand.Rand, bOpen int64) {
	nums := rng.Perm(len(s.products))
	for i := range s.products {
		p := &s.products[i]
		if p.id[0] != "" {
			p.id[0] = fmt.Sprintf("fh-%05d", i+1)
		}
		if p.id[0] == "" || rng.Float64() < s.Opts.BShare {
			p.id[1] = fmt.Sprintf("nm-%06d", 104729+7*nums[i])
			if p.id[0] != "" {
				s.IDMap = append(s.IDMap, [2]string{p.id[0], p.id[1]})
			}
		}
	}
	slices.SortFunc(s.IDMap, func(a, b [2]string) int { return strings.Compare(a[0], b[0]) })
}

// linkComplements gives item i three complements from its category's
// related categories, preferring its own style, among items launched no
// later than it; and makes a new item a complement of two older items, so
// the sequential path leads to new items too.
func (s *Scenario) linkComplements(rng *rand.Rand, i int) {
	p := &s.products[i]
	var cands []int
	var w []float64
	for _, rc := range categories[p.cat].related {
		for _, j := range s.byCat[rc] {
			q := &s.products[j]
			if q.launch > p.launch {
				continue
			}
			cands = append(cands, j)
			f := 1.0
			if q.style == p.style {
				f = 3
			}
			w = append(w, f*(q.appeal[0]+q.appeal[1]))
		}
	}
	for range 3 {
		if len(cands) == 0 {
			break
		}
		k := pick(rng, w)
		p.comps = append(p.comps, cands[k])
		w[k] = 0
		if sum(w) == 0 {
			break
		}
	}
	if p.launch == s.products[0].launch {
		return
	}
	// Older items whose related categories hold p's category.
	var back []int
	for c, cat := range categories {
		if cat.related[0] != p.cat && cat.related[1] != p.cat {
			continue
		}
		for _, j := range s.byCat[c] {
			if s.products[j].launch < p.launch {
				back = append(back, j)
			}
		}
	}
	for range 2 {
		if len(back) > 0 {
			j := back[rng.IntN(len(back))]
			s.products[j].comps = append(s.products[j].comps, i)
		}
	}
}

func sum(w []float64) float64 {
	t := 0.0
	for _, v := range w {
		t += v
	}
	return t
}

// pick draws an index with probability proportional to w (sum > 0).
func pick(rng *rand.Rand, w []float64) int {
	r := rng.Float64() * sum(w)
	for i, v := range w {
		if r < v {
			return i
		}
		r -= v
	}
	for i := len(w) - 1; i >= 0; i-- {
		if w[i] > 0 {
			return i
		}
	}
	return 0
}

// weight is item i's pull on a visitor of site st at t who wants style
// (-1: any).
func (s *Scenario) weight(st *site, i int, t int64, style int) float64 {
	p := &s.products[i]
	if p.id[st.no] == "" || p.launch > t {
		return 0
	}
	w := p.appeal[st.no]
	if style >= 0 && p.style != style {
		w *= offStyle
	}
	if p.launch > st.open {
		age := float64(t-p.launch) / float64(freshDecay.Milliseconds())
		w *= 1 + freshBoost*math.Exp(-age)
	}
	return w
}

// choose draws one of items (never avoid) by weight; false when none can
// be drawn.
func (s *Scenario) choose(rng *rand.Rand, st *site, items []int, t int64, style, avoid int, buf []float64) (int, bool) {
	buf = buf[:0]
	for _, i := range items {
		w := 0.0
		if i != avoid {
			w = s.weight(st, i, t, style)
		}
		buf = append(buf, w)
	}
	if sum(buf) <= 0 {
		return 0, false
	}
	return items[pick(rng, buf)], true
}

// simulate writes the sessions of one site, in event-time order.
func (s *Scenario) simulate(rng *rand.Rand, st *site) []stream.Event {
	var evs []stream.Event
	buf := make([]float64, 0, 256)
	hour := time.Hour.Milliseconds()
	nSess := 0
	for h0 := st.open; h0 < st.end; h0 += hour {
		hod := time.UnixMilli(h0).UTC().Hour()
		n := poisson(rng, float64(st.perDay)*hourShare[hod]/sum(hourShare[:]))
		for range n {
			t := h0 + rng.Int64N(hour)
			nSess++
			sess := fmt.Sprintf("%s%06d", st.prefix, nSess)
			style := -1
			if rng.Float64() < pStyled {
				style = pick(rng, st.styleWeights)
			}
			intent := pick(rng, st.catWeights)
			cur, ok := s.choose(rng, st, s.byCat[intent], t, style, -1, buf)
			if !ok {
				continue
			}
			for clicks := 0; ; clicks++ {
				evs = append(evs, stream.Event{Session: sess, Item: s.products[cur].id[st.no], TS: t})
				if clicks+1 >= maxLen || rng.Float64() >= pContinue {
					break
				}
				t += minGap.Milliseconds() + int64(rng.ExpFloat64()*float64(meanGap.Milliseconds()))
				next, ok := s.step(rng, st, &intent, cur, t, style, buf)
				if !ok {
					break
				}
				cur = next
			}
		}
	}
	slices.SortStableFunc(evs, func(a, b stream.Event) int { return cmp.Compare(a.TS, b.TS) })
	// A session may run past the end of the stream; cut there.
	for len(evs) > 0 && evs[len(evs)-1].TS >= st.end {
		evs = evs[:len(evs)-1]
	}
	return evs
}

// step draws the click after cur.
func (s *Scenario) step(rng *rand.Rand, st *site, intent *int, cur int, t int64, style int, buf []float64) (int, bool) {
	r := rng.Float64()
	if r < pComplement {
		if j, ok := s.choose(rng, st, s.products[cur].comps, t, style, cur, buf); ok {
			return j, true
		}
		r = pComplement // no complement on sale yet: stay in the category
	}
	switch {
	case r < pComplement+pSameCat:
	case r < pComplement+pSameCat+pRelated:
		*intent = categories[*intent].related[rng.IntN(2)]
	default:
		return s.choose(rng, st, s.byCat[pick(rng, st.catWeights)], t, -1, cur, buf)
	}
	return s.choose(rng, st, s.byCat[*intent], t, style, cur, buf)
}

// poisson draws a Poisson variate by Knuth's multiplication method
// (fine for the means of an hour's sessions, below a few hundred).
func poisson(rng *rand.Rand, mean float64) int {
	l, k, p := math.Exp(-mean), 0, 1.0
	for {
		p *= rng.Float64()
		if p <= l {
			return k
		}
		k++
	}
}

// catalog returns one site's records in publication order: an item takes
// effect when its site opens or when it launches, whichever is later.
func (s *Scenario) catalog(no int) []stream.ItemRecord {
	var recs []stream.ItemRecord
	for i := range s.products {
		p := &s.products[i]
		if p.id[no] == "" {
			continue
		}
		c := &categories[p.cat]
		style := styles[p.style]
		title := fmt.Sprintf("%s%s %s %s %s", strings.ToUpper(style[:1]), style[1:], materials[p.material], c.noun, names[p.name])
		recs = append(recs, stream.ItemRecord{
			Item: p.id[no],
			Attrs: map[string][]string{
				"category":   {c.dept + "/" + c.name},
				"tags":       {style, materials[p.material], colours[p.colour]},
				"title":      {title},
				"maker":      {fmt.Sprintf("maker-%02d", p.maker+1)},
				"price_band": {bands[p.band]},
			},
			Published: max(p.launch, s.sites[no].open),
		})
	}
	slices.SortStableFunc(recs, func(a, b stream.ItemRecord) int { return cmp.Compare(a.Published, b.Published) })
	return recs
}
