package eval

import (
	"context"
	"math/rand/v2"

	"waymark/models"
	"waymark/stream"
)

// runKFold runs the sequence-prediction protocol: sessions with
// consecutive repeats removed, the first MaxSessions of at least MinLength
// items in log order, shuffled and cut into Folds folds; for each fold a
// fresh pipeline learns the other folds' sessions, then each of the fold's
// sessions is asked once, its last Targets items the relevant set and up
// to Context items before them the query.
func runKFold(ctx context.Context, l *Log, o *Options, pl *plan, rep *Report) (*evaluator, error) {
	k := o.KFold
	seqs := make([][]uint32, len(pl.infos))
	lastIdx := make([]int, len(pl.infos))
	for i, r := range l.ev {
		if !pl.keep[i] {
			continue
		}
		in := pl.inst[i]
		s := seqs[in]
		if n := len(s); n == 0 || s[n-1] != r.item {
			seqs[in] = append(s, r.item)
		}
		lastIdx[in] = i
	}
	// Instances are numbered in the order they start, which is log order.
	var sel []int32
	for in, s := range seqs {
		if k.MaxSessions > 0 && len(sel) == k.MaxSessions {
			break
		}
		if len(s) < k.MinLength {
			rep.Scoring.TooShort++
			continue
		}
		sel = append(sel, int32(in))
	}
	if len(sel) < k.Folds {
		return nil, bad("KFold.Folds", "%d folds need at least as many sessions of length %d or more, the log has %d",
			k.Folds, k.MinLength, len(sel))
	}
	end := 0
	for _, in := range sel {
		end = max(end, lastIdx[in])
	}
	order := shuffled(sel, k.Seed)
	fold := make([]int32, len(pl.infos))
	for i := range fold {
		fold[i] = -1
	}
	for j, in := range order {
		fold[in] = int32(j % k.Folds)
	}
	pl.prep.TestSessions = int64(len(sel))

	// Coverage counts against the items of the sessions taking part.
	inSel := make([]bool, len(l.items))
	nItems := 0
	for _, in := range sel {
		for _, li := range seqs[in] {
			if !inSel[li] {
				inSel[li] = true
				nItems++
			}
		}
	}
	e := newEvaluator(l, o, nItems)
	skipSession := o.Exclude == ExcludeSession
	last := make([]int64, len(pl.infos))
	sc := &rep.Scoring
	names := make([]string, 0, k.Context)
	for f := range int32(k.Folds) {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		if o.Progress != nil {
			o.Progress(int64(f), int64(k.Folds))
		}
		p, err := newPipeline(o)
		if err != nil {
			return nil, err
		}
		e.bind(p, p.Dict)
		e.resetCounts()
		if f == 0 {
			for _, m := range e.ms {
				m.params = effectiveParams(p.Set, m.spec)
			}
		}
		for i := range last {
			last[i] = -1
		}
		cat := catalogCursor{l: l}
		for i := 0; i <= end; i++ {
			if !pl.keep[i] {
				continue
			}
			r := l.ev[i]
			in := pl.inst[i]
			if fold[in] < 0 || fold[in] == f || last[in] == int64(r.item) {
				continue
			}
			last[in] = int64(r.item)
			cat.upTo(p, r.ts)
			ev := stream.Event{Session: l.sessions[r.sess], Item: l.items[r.item], TS: r.ts, Kind: r.kind}
			p.Apply(&ev)
			e.learned(r.item)
			sc.Learned++
		}
		e.sync()
		for _, in := range order {
			if fold[in] != f {
				continue
			}
			s := seqs[in]
			n := len(s)
			targets := s[n-k.Targets:]
			context := s[max(0, n-k.Targets-k.Context) : n-k.Targets]
			names = names[:0]
			for _, li := range context {
				names = append(names, l.items[li])
			}
			q := p.NewQuery(names, 0)
			var skip func(models.ItemID) bool
			if skipSession {
				skip = func(id models.ItemID) bool {
					for _, st := range q.Session {
						if st.Item == id {
							return true
						}
					}
					return false
				}
			}
			nRel := 0
			for i, t := range targets {
				dup := false
				for _, u := range targets[:i] {
					dup = dup || u == t
				}
				if !dup {
					nRel++
				}
			}
			isRel := func(li uint32) bool {
				for _, t := range targets {
					if t == li {
						return true
					}
				}
				return false
			}
			e.score(&q, skip, isRel, nRel, targets[0], len(context))
			sc.Queries++
		}
	}
	if o.Progress != nil {
		o.Progress(int64(k.Folds), int64(k.Folds))
	}
	return e, nil
}

// shuffled returns a copy of ids in a random order fixed by seed. The
// Fisher-Yates loop is written out over PCG, whose output the math/rand/v2
// documentation specifies, so the folds stay the same across Go releases.
func shuffled(ids []int32, seed uint64) []int32 {
	out := append([]int32(nil), ids...)
	rng := rand.NewPCG(seed, seed^0x9e3779b97f4a7c15)
	for i := len(out) - 1; i > 0; i-- {
		j := int(rng.Uint64() % uint64(i+1))
		out[i], out[j] = out[j], out[i]
	}
	return out
}
