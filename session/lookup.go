package session

// ItemLabel is what the catalogue says of an item, for people reading the
// operator page: its title and category paths, both empty without a record.
type ItemLabel struct {
	Title      string
	Categories []string
}

// Labels returns the catalogue's label of each named item that has a title
// or a category; items the catalogue knows nothing of are left out.
func (e *Engine) Labels(names []string) map[string]ItemLabel {
	out := make(map[string]ItemLabel, len(names))
	e.mu.RLock()
	defer e.mu.RUnlock()
	cat := e.p.Set.Catalog()
	for _, n := range names {
		id, ok := e.p.Dict.Lookup(n)
		if !ok {
			continue
		}
		l := ItemLabel{Title: cat.Title(id), Categories: cat.Categories(id)}
		if l.Title != "" || len(l.Categories) > 0 {
			out[n] = l
		}
	}
	return out
}

// SessionItems returns the items of a tracked session's window, oldest
// first, and whether the session is tracked.
func (e *Engine) SessionItems(id string) ([]string, bool) {
	e.mu.RLock()
	defer e.mu.RUnlock()
	q, ok := e.p.SessionQuery(id)
	if !ok {
		return nil, false
	}
	out := make([]string, len(q.Session))
	for i, st := range q.Session {
		out[i] = e.p.Dict.Name(st.Item)
	}
	return out, true
}
