package eval

import "math"

// instInfo is one session instance: the clicks of one session key with no
// gap longer than the tracker's timeout, the unit the service calls a
// session.
type instInfo struct {
	start int64 // event time of the first click
	n     int32 // clicks kept
}

// instances numbers the session instances of the kept events (keep nil
// keeps all) with the tracker's rule: a click more than timeout after the
// session's latest click starts a new instance. Dropped events get -1.
func instances(l *Log, keep []bool, timeout int64) ([]int32, []instInfo) {
	inst := make([]int32, len(l.ev))
	last := make([]int64, len(l.sessions))
	cur := make([]int32, len(l.sessions))
	for i := range cur {
		cur[i] = -1
	}
	var infos []instInfo
	for i, r := range l.ev {
		if keep != nil && !keep[i] {
			inst[i] = -1
			continue
		}
		c := cur[r.sess]
		if c < 0 || r.ts-last[r.sess] > timeout {
			c = int32(len(infos))
			infos = append(infos, instInfo{start: r.ts})
			cur[r.sess] = c
		}
		last[r.sess] = max(last[r.sess], r.ts)
		infos[c].n++
		inst[i] = c
	}
	return inst, infos
}

// Preprocessing counts what the preprocessing options dropped; nothing is
// dropped silently.
type Preprocessing struct {
	MinSessionLength int  `json:"min_session_length"`
	MinItemSupport   int  `json:"min_item_support"`
	DropUnseen       bool `json:"drop_unseen"`

	RareItems          int64 `json:"rare_items_dropped"`
	RareItemEvents     int64 `json:"rare_item_events_dropped"`
	ShortSessions      int64 `json:"short_sessions_dropped"`
	ShortSessionEvents int64 `json:"short_session_events_dropped"`
	UnseenTestEvents   int64 `json:"unseen_test_events_dropped"`

	EventsKept   int64 `json:"events_kept"`
	SessionsKept int64 `json:"sessions_kept"`
	// TestSessions counts the sessions scored: all of them for the
	// prequential protocol, those starting at or after the split for the
	// temporal one, the selected sessions for kfold.
	TestSessions int64 `json:"test_sessions"`
}

// plan is a log after preprocessing: which events take part, their session
// instances, and the split.
type plan struct {
	keep  []bool
	inst  []int32
	infos []instInfo
	split int64 // first test time; math.MinInt64 when every session is a test session
	prep  Preprocessing
}

// splitTime returns the temporal split in unix ms.
func splitTime(l *Log, o *Options) int64 {
	if o.Protocol != Temporal {
		return math.MinInt64
	}
	if !o.SplitAt.IsZero() {
		return o.SplitAt.UnixMilli()
	}
	last := l.ev[len(l.ev)-1].ts
	return last - int64(o.TestDays*86_400_000)
}

// isTest reports whether an instance is scored.
func (p *plan) isTest(in int32) bool { return p.infos[in].start >= p.split }

func preprocess(l *Log, o *Options) *plan {
	p := &plan{split: splitTime(l, o), keep: make([]bool, len(l.ev))}
	p.prep.MinSessionLength, p.prep.MinItemSupport, p.prep.DropUnseen = o.MinSessionLength, o.MinItemSupport, o.DropUnseen
	for i := range p.keep {
		p.keep[i] = true
	}
	timeout := o.Pipeline.Tracker.Timeout.Milliseconds()

	// Items first, then sessions, the order of the session-based
	// literature's preprocessing: dropping items can shorten sessions.
	if o.MinItemSupport > 1 {
		support := make([]int64, len(l.items))
		present := make([]bool, len(l.items))
		for _, r := range l.ev {
			present[r.item] = true
			if r.ts < p.split || p.split == math.MinInt64 {
				support[r.item]++
			}
		}
		for it, n := range support {
			if present[it] && n < int64(o.MinItemSupport) {
				p.prep.RareItems++
			}
		}
		for i, r := range l.ev {
			if support[r.item] < int64(o.MinItemSupport) {
				p.keep[i] = false
				p.prep.RareItemEvents++
			}
		}
	}
	p.dropShort(l, o, timeout)

	if o.DropUnseen {
		seen := make([]bool, len(l.items))
		for i, r := range l.ev {
			if p.keep[i] && r.ts < p.split {
				seen[r.item] = true
			}
		}
		dropped := false
		for i, r := range l.ev {
			if p.keep[i] && p.isTest(p.inst[i]) && !seen[r.item] {
				p.keep[i] = false
				p.prep.UnseenTestEvents++
				dropped = true
			}
		}
		if dropped {
			p.dropShort(l, o, timeout)
		}
	}
	for i := range l.ev {
		if p.keep[i] {
			p.prep.EventsKept++
		}
	}
	p.prep.SessionsKept = int64(len(p.infos))
	for in := range p.infos {
		if p.isTest(int32(in)) {
			p.prep.TestSessions++
		}
	}
	return p
}

// dropShort recomputes instances and drops those shorter than the minimum,
// then recomputes them once more so numbering covers kept events only.
func (p *plan) dropShort(l *Log, o *Options, timeout int64) {
	p.inst, p.infos = instances(l, p.keep, timeout)
	if o.MinSessionLength <= 1 {
		return
	}
	short := false
	for _, in := range p.infos {
		if in.n < int32(o.MinSessionLength) {
			p.prep.ShortSessions++
			short = true
		}
	}
	if !short {
		return
	}
	for i := range l.ev {
		if p.keep[i] && p.infos[p.inst[i]].n < int32(o.MinSessionLength) {
			p.keep[i] = false
			p.prep.ShortSessionEvents++
		}
	}
	// Dropping whole instances cannot merge or split the others: each
	// session key's remaining clicks keep their gaps.
	p.inst, p.infos = instances(l, p.keep, timeout)
}
