package models

import (
	"encoding/binary"
	"fmt"
	"slices"
	"strings"
	"unicode/utf8"
)

// Catalog is what a [Set] knows about items beyond clicks: whether each may
// be recommended, and its category paths. Every model of the set consults
// the same Catalog, so one record marking an item unavailable removes it
// from every answer at once. An item with no record is available.
//
// Catalog is a learner like any model: it takes records through
// [Catalog.ObserveItem], ignores clicks, and persists one small entry per
// recorded item. Query methods are safe for concurrent use with each other,
// not with ObserveItem (the pipeline serialises the two).
type Catalog struct {
	state []uint8 // per item: stateUnknown, stateAvailable or stateUnavailable
	// unavailable counts the items in stateUnavailable, so a query can
	// tell at once that no candidate needs the availability check.
	unavailable int
	cats        [][]string // per item: normalised category paths
	titles      []string   // per item: display title, cut to maxTitleBytes
	dirty       []ItemID
	flag        []bool
	decay       Decay
	prefix      string
}

const (
	stateUnknown uint8 = iota // no record: available
	stateAvailable
	stateUnavailable
)

// hasTitle marks, in a stored entry's state byte, that the first string
// after it is the title; entries written before titles were kept lack it.
const hasTitle uint8 = 0x80

// maxTitleBytes bounds the title kept per item: it is for people reading
// the operator page, and memory grows with the catalogue.
const maxTitleBytes = 120

// catalogKey is the Set's storage key and spec of its catalog.
const catalogKey = "catalog"

// NewCatalog returns an empty catalog.
func NewCatalog() *Catalog { return &Catalog{} }

func (c *Catalog) Name() string { return catalogKey }

// Observe ignores clicks: a click says nothing about availability.
func (c *Catalog) Observe(*Observation) {}

// Candidates adds nothing: the catalog filters, it does not propose.
func (c *Catalog) Candidates(*Query, *Scores) {}

// ScoreItems writes zeros.
func (c *Catalog) ScoreItems(_ *Query, _ []ItemID, out []float64) { clear(out) }

// ObserveItem records the item's availability and category paths. A later
// record replaces the earlier one. ItemInfo.Available is taken as given, so
// a caller whose record format leaves availability out should pass the
// item's current state ([Catalog.Available]) or true.
func (c *Catalog) ObserveItem(info *ItemInfo) {
	c.grow(info.Item)
	st := stateUnavailable
	if info.Available {
		st = stateAvailable
	}
	cats := categoryPaths(info.Attrs)
	title := recordTitle(info.Attrs)
	if c.state[info.Item] == st && slices.Equal(c.cats[info.Item], cats) && c.titles[info.Item] == title {
		return
	}
	c.setState(info.Item, st)
	c.cats[info.Item] = cats
	c.titles[info.Item] = title
	c.markDirty(info.Item)
}

// recordTitle is a record's "title" attribute, its words joined by spaces
// and cut at a character boundary to maxTitleBytes.
func recordTitle(attrs map[string][]string) string {
	t := strings.TrimSpace(strings.Join(attrs["title"], " "))
	if len(t) <= maxTitleBytes {
		return t
	}
	cut := maxTitleBytes
	for cut > 0 && !utf8.RuneStart(t[cut]) {
		cut--
	}
	return t[:cut] + "…"
}

// Title returns id's title from its catalogue record, "" when it has none.
func (c *Catalog) Title(id ItemID) string {
	if int(id) >= len(c.titles) {
		return ""
	}
	return c.titles[id]
}

// setState sets id's state, keeping the count of unavailable items; id's
// entry must exist (grow).
func (c *Catalog) setState(id ItemID, st uint8) {
	if c.state[id] == stateUnavailable {
		c.unavailable--
	}
	if st == stateUnavailable {
		c.unavailable++
	}
	c.state[id] = st
}

func (c *Catalog) grow(id ItemID) {
	if int(id) < len(c.state) {
		return
	}
	n := int(id) + 1
	c.state = append(c.state, make([]uint8, n-len(c.state))...)
	c.cats = append(c.cats, make([][]string, n-len(c.cats))...)
	c.titles = append(c.titles, make([]string, n-len(c.titles))...)
	c.flag = append(c.flag, make([]bool, n-len(c.flag))...)
}

func (c *Catalog) markDirty(id ItemID) {
	if !c.flag[id] {
		c.flag[id] = true
		c.dirty = append(c.dirty, id)
	}
}

// Available reports whether id may be recommended: true unless its latest
// record said otherwise.
func (c *Catalog) Available(id ItemID) bool {
	return int(id) >= len(c.state) || c.state[id] != stateUnavailable
}

// AllAvailable reports whether every item is available, so a caller may
// skip asking Available of each.
func (c *Catalog) AllAvailable() bool { return c.unavailable == 0 }

// Known reports whether a catalogue record for id has been seen.
func (c *Catalog) Known(id ItemID) bool {
	return int(id) < len(c.state) && c.state[id] != stateUnknown
}

// Categories returns id's normalised category paths (see
// [NormalizeCategory]); the caller must not modify the slice.
func (c *Catalog) Categories(id ItemID) []string {
	if int(id) >= len(c.cats) {
		return nil
	}
	return c.cats[id]
}

// InCategory reports whether one of id's category paths equals path or lies
// below it: "camping" holds "camping/tents". path is normalised first, so a
// request may send it as written in the catalogue.
func (c *Catalog) InCategory(id ItemID, path string) bool {
	p := NormalizeCategory(path)
	if p == "" {
		return false
	}
	for _, have := range c.Categories(id) {
		if have == p || (len(have) > len(p) && strings.HasPrefix(have, p) && have[len(p)] == '/') {
			return true
		}
	}
	return false
}

// SetDecay keeps the pipeline's decay, so a blend can turn landmark click
// counts into decayed counts for its content back-off.
func (c *Catalog) SetDecay(d Decay) { c.decay = d }

// Decay returns the decay last set, zero before the first click.
func (c *Catalog) Decay() Decay { return c.decay }

// decayed turns a landmark-form count into its decayed value at now.
func (c *Catalog) decayed(landmark float64, now int64) float64 {
	if c == nil || c.decay.HalfLifeMS <= 0 {
		return landmark
	}
	return landmark * c.decay.Factor(now)
}

func (c *Catalog) SetPrefix(prefix string) { c.prefix = prefix }
func (c *Catalog) Prefix() string          { return c.prefix }

// Flush writes each changed record as one entry: a state byte (with
// hasTitle set when a title follows), the title if any, then the category
// paths; each string as a uvarint length and its bytes.
func (c *Catalog) Flush(kv KV) error {
	for _, id := range c.dirty {
		c.flag[id] = false
		buf := []byte{c.state[id]}
		if t := c.titles[id]; t != "" {
			buf[0] |= hasTitle
			buf = binary.AppendUvarint(buf, uint64(len(t)))
			buf = append(buf, t...)
		}
		for _, p := range c.cats[id] {
			buf = binary.AppendUvarint(buf, uint64(len(p)))
			buf = append(buf, p...)
		}
		if err := kv.Set(itemKey(c.prefix, id), buf); err != nil {
			return fmt.Errorf("flush catalog item %d: %w", id, err)
		}
	}
	c.dirty = c.dirty[:0]
	return nil
}

// Load restores one entry written by Flush.
func (c *Catalog) Load(key, val []byte) error {
	k := key[len(c.prefix):]
	if len(k) != 4 || len(val) < 1 || val[0]&^hasTitle > stateUnavailable {
		return fmt.Errorf("%w: catalog key %x, %d value bytes", ErrCorrupt, key, len(val))
	}
	id := binary.BigEndian.Uint32(k)
	var strs []string
	for rest := val[1:]; len(rest) > 0; {
		n, w := binary.Uvarint(rest)
		if w <= 0 || uint64(len(rest)-w) < n {
			return fmt.Errorf("%w: catalog item %d: bad category path", ErrCorrupt, id)
		}
		strs = append(strs, string(rest[w:w+int(n)]))
		rest = rest[w+int(n):]
	}
	var title string
	if val[0]&hasTitle != 0 {
		if len(strs) == 0 || len(strs[0]) > maxTitleBytes+len("…") {
			return fmt.Errorf("%w: catalog item %d: bad title", ErrCorrupt, id)
		}
		title, strs = strs[0], strs[1:]
	}
	c.grow(id)
	c.setState(id, val[0]&^hasTitle)
	c.cats[id] = strs
	c.titles[id] = title
	return nil
}
