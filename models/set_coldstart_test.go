package models

import (
	"errors"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
)

// Specs of the cold-start models: defaults, parameters, and bad input
// refused with ErrBadSpec naming the parameter.
func TestColdStartSpecs(t *testing.T) {
	good := []struct{ spec, name string }{
		{"sknn", "sknn"},
		{"vsknn(k=50,m=200,idf=1)", "vsknn(k=50,m=200,idf=1)"},
		{"vstan", "vstan(lambda_inh=2,lambda_snh=7,lambda_spw=2)"},
		{"vstan(lambda_spw=1.5,lambda_snh=0,lambda_inh=3,idf=0)", "vstan(idf=0,lambda_inh=3,lambda_snh=0,lambda_spw=1.5)"},
		{"content", "content"},
		{"content(span=1,vector=0.25,candidates=100)", "content(candidates=100,span=1,vector=0.25)"},
		{"fresh", "fresh"},
		{"fresh(window=24,pool=50,content=0)", "fresh(content=0,pool=50,window=24)"},
		{"trending(short=1,long=48)", "trending(long=48,short=1)"},
		{"blend", "blend(learned=1)"},
		{"blend(vstan=0.5,sr=1,backoff=5)", "blend(sr=1,vstan=0.5,pop=0.1)"},
	}
	for _, g := range good {
		t.Run(g.spec, func(t *testing.T) {
			m, err := NewSet(DefaultSetOptions()).Get(g.spec)
			if err != nil {
				t.Fatal(err)
			}
			if m.Name() != g.name {
				t.Errorf("Name() = %q, want %q", m.Name(), g.name)
			}
		})
	}
	bad := []struct{ spec, mention string }{
		{"sknn(k=0)", "k="},
		{"sknn(m=10,k=20)", "M 10 below K 20"},
		{"sknn(lambda_spw=1)", "lambda_spw"}, // vstan only
		{"vsknn(idf=2)", "idf=2"},
		{"vstan(lambda_inh=0)", "lambda_inh"},
		{"vstan(retention=0)", "retention"},
		{"content(vector=1.5)", "VectorWeight"},
		{"content(span=0)", "span"},
		{"content(colour=1)", "colour"},
		{"fresh(prior_a=0)", "prior_a"},
		{"fresh(window=0)", "window"},
		{"fresh(content=2)", "content=2"},
		{"trending(short=10,long=5)", "Long"},
		{"blend(backoff=-1)", "backoff"},
		{"blend(backoff=x,sr=1)", "backoff"},
	}
	for _, b := range bad {
		t.Run(b.spec, func(t *testing.T) {
			_, err := NewSet(DefaultSetOptions()).Get(b.spec)
			if !errors.Is(err, ErrBadSpec) {
				t.Fatalf("Get(%q) = %v, want ErrBadSpec", b.spec, err)
			}
			if !strings.Contains(err.Error(), b.mention) {
				t.Errorf("error %q does not mention %q", err, b.mention)
			}
		})
	}
}

// Models that agree on the index options share one session index, and the
// set's catalogue is one learner whatever uses it.
func TestColdStartSharing(t *testing.T) {
	s := NewSet(DefaultSetOptions())
	for _, spec := range []string{"sknn", "vsknn(k=10)", "vstan", "sknn(sessions=10)", "blend(vsknn=1,content=1)", "fresh"} {
		if _, err := s.Get(spec); err != nil {
			t.Fatal(err)
		}
	}
	var idx, cats int
	for _, m := range s.Learners() {
		switch m.(type) {
		case *SessionIndex:
			idx++
		case *Catalog:
			cats++
		}
	}
	if idx != 2 || cats != 1 {
		t.Errorf("%d session indexes and %d catalogues, want 2 and 1 (keys %v)", idx, cats, s.Keys())
	}
	if !slices.Contains(s.Keys(), "sessions(cap=10)") || !slices.Contains(s.Keys(), "sessions") {
		t.Errorf("keys %v", s.Keys())
	}
}

// The random-hyperplane index finds a vector's near duplicate among
// thousands, most of the time, and every candidate it returns is scored
// exactly.
func TestVectorIndexRecall(t *testing.T) {
	opts := DefaultContentOptions()
	opts.ExactVectors = 100 // far below the catalogue: hashing is used
	c, err := NewContent(opts, nil)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(9, 9))
	const n, dim = 3000, 32
	base := make([][]float32, n/2)
	for i := range base {
		v := make([]float32, dim)
		for j := range v {
			v[j] = float32(rng.NormFloat64())
		}
		base[i] = v
		// item 2i and its twin 2i+1 at cosine about 0.95
		twin := make([]float32, dim)
		for j := range twin {
			twin[j] = v[j] + float32(0.3*rng.NormFloat64())
		}
		c.ObserveItem(&ItemInfo{Item: ItemID(2 * i), Vector: v, Available: true})
		c.ObserveItem(&ItemInfo{Item: ItemID(2*i + 1), Vector: twin, Available: true})
	}
	found := 0
	for i := range 200 {
		nb := c.Neighbors(ItemID(2*i), 1)
		if len(nb) == 1 && nb[0].Item == ItemID(2*i+1) {
			found++
		}
		if len(nb) == 1 && nb[0].Score != c.Similarity(ItemID(2*i), nb[0].Item) {
			t.Errorf("neighbour score %g, similarity %g", nb[0].Score, c.Similarity(ItemID(2*i), nb[0].Item))
		}
	}
	if found < 190 {
		t.Errorf("found the twin for %d of 200 items", found)
	}
	t.Logf("twin found for %d of 200", found)
}
