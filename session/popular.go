package session

import (
	"fmt"
	"sort"
	"strings"

	"waymark/models"
)

// PopularIn returns the k most popular items of a category path (and the
// paths below it, as the category filter of next-item requests takes it).
// A category no catalogue record names is an error wrapping
// ErrUnknownCategory whose message shows some categories that exist, so a
// typo does not pass for "nothing popular here".
func (e *Engine) PopularIn(k int, category string) ([]PopularItem, error) {
	e.mu.RLock()
	defer e.mu.RUnlock()
	pop := e.p.Set.Pop()
	cat := e.p.Set.Catalog()
	f := e.p.Decay().Factor(e.p.Checkpoint().Watermark)
	// The popularity top list holds the usual answer; a small category
	// may lie below it, and then every item is looked at once.
	var picked []models.ItemID
	for _, id := range pop.Top(1 << 30) {
		if cat.InCategory(id, category) {
			if picked = append(picked, id); len(picked) == k {
				break
			}
		}
	}
	if len(picked) < k {
		seen := make(map[models.ItemID]bool, len(picked))
		for _, id := range picked {
			seen[id] = true
		}
		known := len(picked) > 0
		for i := range e.p.Dict.Len() {
			id := models.ItemID(i)
			if seen[id] || !cat.InCategory(id, category) {
				continue
			}
			known = true
			if pop.Count(id) > 0 {
				picked = append(picked, id)
			}
		}
		if !known {
			return nil, e.unknownCategory(category)
		}
		sort.SliceStable(picked, func(a, b int) bool { return pop.Count(picked[a]) > pop.Count(picked[b]) })
		picked = picked[:min(k, len(picked))]
	}
	out := make([]PopularItem, len(picked))
	for i, id := range picked {
		out[i] = PopularItem{Item: e.p.Dict.Name(uint32(id)), Clicks: pop.Count(id) * f}
	}
	return out, nil
}

// unknownCategory builds the error for a category no item is in, naming
// up to five top-level categories of the catalogue. Call with the read
// lock held.
func (e *Engine) unknownCategory(category string) error {
	cat := e.p.Set.Catalog()
	tops := map[string]bool{}
	for i := range e.p.Dict.Len() {
		for _, path := range cat.Categories(models.ItemID(i)) {
			top, _, _ := strings.Cut(path, "/")
			tops[top] = true
		}
	}
	if len(tops) == 0 {
		return fmt.Errorf("%w %q: no catalogue record has a category yet (attrs.category of POST /v1/items or the catalogue subject)", ErrUnknownCategory, category)
	}
	names := make([]string, 0, len(tops))
	for t := range tops {
		names = append(names, t)
	}
	sort.Strings(names)
	more := ""
	if len(names) > 5 {
		more = fmt.Sprintf(" and %d more", len(names)-5)
		names = names[:5]
	}
	return fmt.Errorf("%w %q: no catalogue item is in it; categories are paths such as %s%s", ErrUnknownCategory, category, strings.Join(names, ", "), more)
}
