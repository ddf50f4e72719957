package models

import (
	"fmt"
	"sort"
	"strings"
)

// SetOptions are the defaults every model of a [Set] shares.
type SetOptions struct {
	// CapPerItem bounds neighbour lists per item (default 200).
	CapPerItem int
	// SRWindow is Sequential Rules' default window m (default 5).
	SRWindow int
	// KNNSessions caps the sessions the session-kNN index keeps unless a
	// spec says sessions= (0: the index's default, 1,000,000). The
	// pipeline sets it to the tracker's cap, so one flag bounds both
	// copies of the sessions.
	KNNSessions int
}

// DefaultSetOptions returns the shared defaults.
func DefaultSetOptions() SetOptions { return SetOptions{CapPerItem: 200, SRWindow: 5} }

// Set builds models from specs and shares one instance of each distinct
// model among everything that uses it, so a blend and a standalone model of
// the same spec learn once.
type Set struct {
	opts     SetOptions
	byName   map[string]Model
	learners []Model  // distinct models, in creation order
	keys     []string // canonical spec of each learner
	pop      *Pop
	builders map[string]builder
}

type builder func(s *Set, p *params) (Model, error)

// NewSet returns an empty set.
func NewSet(opts SetOptions) *Set {
	if opts.CapPerItem == 0 {
		opts.CapPerItem = DefaultSetOptions().CapPerItem
	}
	if opts.SRWindow == 0 {
		opts.SRWindow = DefaultSetOptions().SRWindow
	}
	s := &Set{opts: opts, byName: map[string]Model{}}
	s.builders = map[string]builder{
		"pop": func(s *Set, p *params) (Model, error) { return s.Pop(), p.done() },
		"markov": func(s *Set, p *params) (Model, error) {
			return NewMarkov(p.Int("cap", s.opts.CapPerItem, 0)), p.done()
		},
		"sr": func(s *Set, p *params) (Model, error) {
			return NewSR(p.Int("window", s.opts.SRWindow, 1), p.Int("cap", s.opts.CapPerItem, 0)), p.done()
		},
		"iknn": func(s *Set, p *params) (Model, error) {
			return NewIKNN(IKNNOptions{
				Span:       p.Int("span", 1, 1),
				Shrink:     p.Float("shrink", 0, 0),
				CapPerItem: p.Int("cap", s.opts.CapPerItem, 0),
				CoVisit:    p.Int("covis", 0, 0),
			}), p.done()
		},
		"blend": buildBlend,
	}
	s.registerColdStart()
	return s
}

// DefaultBlendSpec is the blend serve uses unless configured otherwise.
const DefaultBlendSpec = "blend"

// defaultSignals are the blend's parts and weights when none are given.
var defaultSignals = []struct {
	name   string
	weight float64
}{{"markov", 1}, {"sr", 1}, {"iknn", 1}}

func buildBlend(s *Set, p *params) (Model, error) {
	var sigs []Signal
	popW := DefaultPopWeight
	if len(p.spec.Params) == 0 {
		for _, d := range defaultSignals {
			m, err := s.Get(d.name)
			if err != nil {
				return nil, err
			}
			sigs = append(sigs, Signal{Name: d.name, Model: m, Weight: d.weight})
		}
	} else {
		keys := make([]string, 0, len(p.spec.Params))
		for k := range p.spec.Params {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		for _, k := range keys {
			w := p.Float(k, 0, 0)
			if k == "pop" {
				popW = w
				continue
			}
			if k == "blend" {
				return nil, fmt.Errorf("%w: a blend cannot contain a blend", ErrBadSpec)
			}
			m, err := s.Get(k)
			if err != nil {
				return nil, fmt.Errorf("blend part %q: %w", k, err)
			}
			sigs = append(sigs, Signal{Name: k, Model: m, Weight: w})
		}
	}
	if err := p.done(); err != nil {
		return nil, err
	}
	return NewBlend(s.Pop(), popW, sigs...), nil
}

// Pop returns the set's popularity model, creating it on first use.
func (s *Set) Pop() *Pop {
	if s.pop == nil {
		s.pop = NewPop()
		s.byName["pop"] = s.pop
		s.learners = append(s.learners, s.pop)
		s.keys = append(s.keys, "pop")
	}
	return s.pop
}

// Get returns the model for spec, building it on first use.
func (s *Set) Get(spec string) (Model, error) {
	sp, err := ParseSpec(spec)
	if err != nil {
		return nil, err
	}
	key := sp.String()
	if m, ok := s.byName[key]; ok {
		return m, nil
	}
	b, ok := s.builders[sp.Name]
	if !ok {
		return nil, fmt.Errorf("%w: %q (known: %s)", ErrUnknownModel, sp.Name, strings.Join(s.Names(), ", "))
	}
	m, err := b(s, newParams(sp))
	if err != nil {
		return nil, err
	}
	if existing, ok := s.byName[key]; ok { // pop registers itself
		return existing, nil
	}
	s.byName[key] = m
	if _, isBlend := m.(*Blend); !isBlend {
		s.learners = append(s.learners, m)
		s.keys = append(s.keys, key)
	}
	return m, nil
}

// Names lists the model names the set can build.
func (s *Set) Names() []string {
	names := make([]string, 0, len(s.builders))
	for n := range s.builders {
		names = append(names, n)
	}
	sort.Strings(names)
	return names
}

// Learners returns every distinct model that must observe clicks, each
// once, in creation order.
func (s *Set) Learners() []Model { return s.learners }

// Keys returns the canonical spec of each learner, in creation order, for
// use as storage prefixes.
func (s *Set) Keys() []string { return s.keys }
