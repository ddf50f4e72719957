package models

// Preferences are what a visitor declared at a first visit, before any
// click: items they picked, or categories (paths as written in catalogue
// records, such as "camping/tents").
type Preferences struct {
	Items      []ItemID
	Categories []string
}

// DefaultSeedsPerCategory is how many items stand for one declared
// category.
const DefaultSeedsPerCategory = 2

// MaxSeeds bounds the pseudo-clicks a query gets from preferences, so a
// long declaration cannot crowd out the window of real clicks.
const MaxSeeds = 10

// SeedQuery returns q with the preferences prepended as pseudo-clicks, so
// every model reads them as the session's earliest clicks and the real
// clicks keep the most recent positions. Each category stands for its
// perCategory most popular available items (from the set's trending model,
// when it has one), topped up with the category's newest items (from its
// content model); declared items follow the categories. Seeds already in
// the session, unavailable items and repeats are dropped; at most MaxSeeds
// are added. perCategory <= 0 means DefaultSeedsPerCategory. Pseudo-clicks
// carry the time of the first real click, or q.Now for an empty session.
func (s *Set) SeedQuery(q Query, p Preferences, perCategory int) Query {
	if perCategory <= 0 {
		perCategory = DefaultSeedsPerCategory
	}
	var trend *Trending
	var content *Content
	for _, m := range s.learners {
		switch x := m.(type) {
		case *Trending:
			if trend == nil {
				trend = x
			}
		case *Content:
			if content == nil {
				content = x
			}
		}
	}
	cat := s.Catalog()
	var seeds []ItemID
	ok := func(id ItemID) bool {
		if !cat.Available(id) || len(seeds) >= MaxSeeds {
			return false
		}
		for _, st := range q.Session {
			if st.Item == id {
				return false
			}
		}
		for _, x := range seeds {
			if x == id {
				return false
			}
		}
		return true
	}
	for _, c := range p.Categories {
		path := NormalizeCategory(c)
		if path == "" {
			continue
		}
		n := 0
		if trend != nil {
			for _, sc := range trend.TopIn("category="+path, perCategory, nil) {
				if n < perCategory && ok(sc.Item) {
					seeds = append(seeds, sc.Item)
					n++
				}
			}
		}
		if content != nil && n < perCategory {
			for _, id := range content.InCategory(path, perCategory+MaxSeeds) {
				if n < perCategory && ok(id) {
					seeds = append(seeds, id)
					n++
				}
			}
		}
	}
	for _, id := range p.Items {
		if ok(id) {
			seeds = append(seeds, id)
		}
	}
	if len(seeds) == 0 {
		return q
	}
	ts := q.Now
	if len(q.Session) > 0 {
		ts = q.Session[0].TS
	}
	out := q
	out.Session = make([]Step, 0, len(seeds)+len(q.Session))
	for _, id := range seeds {
		out.Session = append(out.Session, Step{Item: id, TS: ts})
	}
	out.Session = append(out.Session, q.Session...)
	return out
}
