// Package demoshop generates the demo's invented scenario: Quillmoor, a
// made-up shop for camping and kitchen goods, with a small catalogue and a
// few simulated days of anonymous visitor sessions. The structure is what a
// real shop shows: a few items take most clicks, visitors browse within a
// category and move to complementary ones, and new items launch mid-way.
// Every name is invented.
package demoshop

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sort"
	"strings"
	"time"

	"waymark/stream"
)

// Item is one catalogue entry.
type Item struct {
	ID       string
	Category string
	Title    string
	Tags     []string
	// Launch is when the item enters the catalogue; zero for items that
	// are there from the start.
	Launch time.Time
}

// Record returns the item's catalogue record.
func (it Item) Record() stream.ItemRecord {
	avail := true
	rec := stream.ItemRecord{
		Item:      it.ID,
		Attrs:     map[string][]string{"category": {it.Category}, "tags": it.Tags, "title": {it.Title}},
		Available: &avail,
	}
	if !it.Launch.IsZero() {
		rec.Published = it.Launch.UnixMilli()
	}
	return rec
}

// Scenario is the generated shop and its traffic.
type Scenario struct {
	Start    time.Time
	Items    []Item
	Events   []stream.Event // in event-time order
	Launched []Item         // items launched mid-way
	// Catalog pairs each record with the event time it is published at.
	Catalog []Timed
}

// Timed is a catalogue record and when it appears.
type Timed struct {
	At     time.Time
	Record stream.ItemRecord
}

type category struct {
	path  string
	noun  string
	tags  []string
	next  []string // categories visitors tend to move on to
	words []string
}

// shopCategories returns the invented catalogue's categories.
func shopCategories() []category {
	return []category{
		{"camping/tents", "tent", []string{"tent", "shelter"}, []string{"camping/sleeping", "camping/lights"}, []string{"ridge", "dome", "tunnel", "canopy", "bivvy", "cabin", "trail", "summit"}},
		{"camping/sleeping", "sleeping bag", []string{"sleep", "warm"}, []string{"camping/tents", "camping/lights"}, []string{"down", "synthetic", "mummy", "square", "alpine", "summer", "quilt", "liner"}},
		{"camping/lights", "lantern", []string{"light", "battery"}, []string{"camping/tents", "kitchen/stoves"}, []string{"pocket", "hanging", "solar", "crank", "beacon", "glow", "clip", "tripod"}},
		{"kitchen/stoves", "stove", []string{"stove", "burner"}, []string{"kitchen/cookware", "kitchen/mugs"}, []string{"canister", "liquid", "wood", "alcohol", "twin", "folding", "windproof", "compact"}},
		{"kitchen/cookware", "pot set", []string{"cook", "pot"}, []string{"kitchen/stoves", "kitchen/mugs"}, []string{"titanium", "steel", "nesting", "kettle", "skillet", "billy", "griddle", "dutch"}},
		{"kitchen/mugs", "mug", []string{"mug", "drink"}, []string{"kitchen/cookware"}, []string{"enamel", "double-wall", "collapsible", "tin", "bamboo", "tall", "squat", "lidded"}},
	}
}

// Options sizes the scenario.
type Options struct {
	Seed     uint64
	Days     int // default 3
	Sessions int // per day, default 1500
}

// Generate builds the scenario deterministically from opts.
func Generate(opts Options) *Scenario {
	if opts.Days == 0 {
		opts.Days = 3
	}
	if opts.Sessions == 0 {
		opts.Sessions = 1500
	}
	rng := rand.New(rand.NewPCG(opts.Seed, 0x9e3779b97f4a7c15))
	sc := &Scenario{Start: time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)}
	cats := shopCategories()
	byCat := map[string][]int{}
	for _, c := range cats {
		for i, w := range c.words {
			it := Item{
				// The whole noun, so ids read as names ("lantern-pocket",
				// "pot-set-titanium"), not cut-off words.
				ID:       strings.ReplaceAll(c.noun, " ", "-") + "-" + w,
				Category: c.path,
				Title:    fmt.Sprintf("%s %s", w, c.noun),
				Tags:     append([]string{w}, c.tags...),
			}
			// The last word of each category launches mid-way.
			if i == len(c.words)-1 {
				it.Launch = sc.Start.Add(time.Duration(opts.Days) * 24 * time.Hour / 2)
				it.ID += "-new"
				it.Title = "new " + it.Title
				sc.Launched = append(sc.Launched, it)
			}
			byCat[c.path] = append(byCat[c.path], len(sc.Items))
			sc.Items = append(sc.Items, it)
		}
	}
	for _, it := range sc.Items {
		at := sc.Start
		if !it.Launch.IsZero() {
			at = it.Launch
		}
		sc.Catalog = append(sc.Catalog, Timed{At: at, Record: it.Record()})
	}
	catIndex := map[string]int{}
	for i, c := range cats {
		catIndex[c.path] = i
	}
	// Zipf-like weights: the first items of a category draw most clicks.
	weight := func(rank int) float64 { return 1 / math.Pow(float64(rank+1), 1.2) }
	pick := func(cat string, now time.Time) int {
		ids := byCat[cat]
		total := 0.0
		ws := make([]float64, len(ids))
		for r, id := range ids {
			it := sc.Items[id]
			if !it.Launch.IsZero() && now.Before(it.Launch) {
				continue // not in the shop yet
			}
			w := weight(r)
			if !it.Launch.IsZero() {
				w = weight(0) * 1.5 // a launch draws attention
			}
			ws[r] = w
			total += w
		}
		x := rng.Float64() * total
		for r, w := range ws {
			if x -= w; x <= 0 && w > 0 {
				return ids[r]
			}
		}
		return ids[0]
	}
	n := 0
	for day := 0; day < opts.Days; day++ {
		for s := 0; s < opts.Sessions; s++ {
			n++
			t := sc.Start.Add(time.Duration(day)*24*time.Hour + time.Duration(rng.Int64N(int64(24*time.Hour))))
			sid := fmt.Sprintf("visitor-%05d", n)
			c := cats[int(math.Min(float64(len(cats)-1), rng.ExpFloat64()*1.5))]
			length := 1 + int(rng.ExpFloat64()*3)
			if length > 12 {
				length = 12
			}
			for k := 0; k < length; k++ {
				id := pick(c.path, t)
				sc.Events = append(sc.Events, stream.Event{Session: sid, Item: sc.Items[id].ID, TS: t.UnixMilli()})
				t = t.Add(time.Duration(20+rng.IntN(160)) * time.Second)
				if rng.Float64() < 0.35 { // move on to a complementary category
					c = cats[catIndex[c.next[rng.IntN(len(c.next))]]]
				}
			}
		}
	}
	sort.SliceStable(sc.Events, func(i, j int) bool { return sc.Events[i].TS < sc.Events[j].TS })
	return sc
}
