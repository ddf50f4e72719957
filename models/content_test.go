package models

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"slices"
	"strings"
	"testing"
)

// Tokens follows the rules in its doc comment; the record is an invented
// shop's.
func TestTokens(t *testing.T) {
	tests := []struct {
		name  string
		attrs map[string][]string
		want  []string
	}{
		{
			name: "category prefixes, tags, title words, other attributes",
			attrs: map[string][]string{
				"category": {"Camping > Tents"},
				"tags":     {"Tent", " waterproof "},
				"title":    {"Ridge tent, 2-person: waterproof!"},
				"colour":   {"Green"},
			},
			want: []string{
				"cat:camping", "cat:camping/tents",
				"colour=green",
				"tag:tent", "tag:waterproof",
				"w:ridge", "w:tent", "w:person", "w:waterproof", // "2" is one character: dropped
			},
		},
		{
			name:  "empty values give nothing",
			attrs: map[string][]string{"category": {" / "}, "tags": {""}, "size": {"  "}},
			want:  nil,
		},
		{
			name:  "repeats are kept as term counts",
			attrs: map[string][]string{"description": {"pan pan PAN"}},
			want:  []string{"w:pan", "w:pan", "w:pan"},
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := Tokens(tt.attrs); !slices.Equal(got, tt.want) {
				t.Errorf("Tokens = %q, want %q", got, tt.want)
			}
		})
	}
	if got := NormalizeCategory(" Kitchen >Pans/ Lids "); got != "kitchen/pans/lids" {
		t.Errorf("NormalizeCategory = %q", got)
	}
	if long := Tokens(map[string][]string{"tags": {strings.Repeat("é", 200)}}); len(long) != 1 || len(long[0]) > maxTokenBytes {
		t.Errorf("a long tag gives %d tokens of %d bytes", len(long), len(long[0]))
	}
}

type sklearnGolden struct {
	Library      string             `json:"library"`
	Docs         [][]string         `json:"docs"`
	Vectors      [][]float32        `json:"vectors"`
	VectorWeight float64            `json:"vector_weight"`
	IDF          map[string]float64 `json:"idf"`
	Similarity   [][]float64        `json:"similarity"`
	TFIDFCosine  [][]float64        `json:"tfidf_cosine"`
}

// The content model's similarities equal scikit-learn's TfidfVectorizer
// and cosine_similarity on the same token lists and vectors (values in
// testdata/tfidf_sklearn.json, made by testdata/tfidf_sklearn.py; library
// and version recorded in the file). The model learns incrementally, in an
// order of its own, with one record replaced on the way; the reference saw
// the final corpus at once.
func TestContentMatchesSklearn(t *testing.T) {
	raw, err := os.ReadFile("testdata/tfidf_sklearn.json")
	if err != nil {
		t.Fatal(err)
	}
	var g sklearnGolden
	if err := json.Unmarshal(raw, &g); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(g.Library, "scikit-learn") {
		t.Fatalf("golden file made by %q", g.Library)
	}
	// Vectors are float32 in the model and float64 in the reference, so
	// similarities that involve vectors agree to about 1e-8 only; TF-IDF
	// alone (VectorWeight 0) agrees to rounding.
	tests := []struct {
		name   string
		exact  int
		weight float64
		want   [][]float64
		tol    float64
	}{
		{"tfidf", 100, 0, g.TFIDFCosine, 1e-12},
		{"mixed", 100, g.VectorWeight, g.Similarity, 1e-7},
		{"mixed-hyperplanes", 1, g.VectorWeight, g.Similarity, 1e-7},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			opts := DefaultContentOptions()
			opts.ExactVectors, opts.VectorWeight = tt.exact, tt.weight
			c, err := NewContent(opts, nil)
			if err != nil {
				t.Fatal(err)
			}
			n := len(g.Docs)
			// an early, different record for doc 2, replaced later
			c.setItem(2, c.intern([]string{"cat:kitchen", "w:pan", "w:dome"}), []float32{1, 1, 1})
			for _, i := range []int{5, 2, 7, 0, 3, 6, 1, 4} {
				c.setItem(ItemID(i), c.intern(g.Docs[i]), g.Vectors[i])
			}
			for tok, want := range g.IDF {
				id, ok := c.tokID[tok]
				if !ok {
					t.Fatalf("token %q unknown", tok)
				}
				if got := c.idf(id, math.Log1p(float64(c.nDocs))); math.Abs(got-want) > 1e-12 {
					t.Errorf("idf(%s) = %.15g, want %.15g", tok, got, want)
				}
			}
			for i := range n {
				for j := range n {
					got := c.Similarity(ItemID(i), ItemID(j))
					if want := tt.want[i][j]; math.Abs(got-want) > tt.tol {
						t.Errorf("similarity(%d, %d) = %.12f, want %.12f", i, j, got, want)
					}
				}
				// Neighbors finds, through the inverted index, every item
				// with a positive similarity, in the reference's order. The
				// hyperplane index may miss vector-only neighbours (it is
				// approximate); what it finds must still be right.
				var want []Neighbor
				for j := range n {
					if j != i && tt.want[i][j] > 1e-12 {
						want = append(want, Neighbor{ItemID(j), tt.want[i][j]})
					}
				}
				slices.SortFunc(want, func(x, y Neighbor) int { return cmpScore(x.Score, y.Score, x.Item, y.Item) })
				got := c.Neighbors(ItemID(i), n)
				if tt.exact == 1 {
					for _, nb := range got {
						if w := tt.want[i][nb.Item]; math.Abs(nb.Score-w) > tt.tol {
							t.Errorf("Neighbors(%d) gives %v, want score %.12f", i, nb, w)
						}
					}
					continue
				}
				if len(got) != len(want) {
					t.Fatalf("Neighbors(%d) = %v, want %v", i, got, want)
				}
				for k := range got {
					if got[k].Item != want[k].Item || math.Abs(got[k].Score-want[k].Score) > tt.tol {
						t.Errorf("Neighbors(%d)[%d] = %v, want %v", i, k, got[k], want[k])
					}
				}
			}
		})
	}
}

// csTentShop is an invented outdoor shop like the one of the acceptance
// check coldstart-item, generated here: five tents, five stoves, sessions
// that stay within one of the two groups.
func csTentShop(seed uint64) (evs []csEvent, names map[string]ItemID) {
	names = map[string]ItemID{}
	id := func(s string) ItemID {
		if v, ok := names[s]; ok {
			return v
		}
		names[s] = ItemID(len(names))
		return names[s]
	}
	t0 := int64(1_767_225_600_000)
	rec := func(name, cat string, tags []string, title string) {
		evs = append(evs, csEvent{Info: &ItemInfo{Item: id(name), Available: true, TS: t0, Attrs: map[string][]string{
			"category": {cat}, "tags": tags, "title": {title}}}})
	}
	for n, w := range []string{"ridge", "dome", "tunnel", "canopy", "bivvy"} {
		rec(fmt.Sprintf("T%d", n), "camping/tents", []string{"tent", "waterproof", w}, w+" tent two person waterproof")
	}
	for n, w := range []string{"canister", "liquid", "wood", "alcohol", "solid"} {
		rec(fmt.Sprintf("S%d", n), "cooking/stoves", []string{"stove", "burner", w}, w+" fuel camping stove")
	}
	rng := rand.New(rand.NewPCG(seed, 3))
	ts := t0
	for s := range 300 {
		group := "S"
		if s%2 == 1 {
			group = "T"
		}
		for range 4 {
			ts += 500
			evs = append(evs, csEvent{Session: fmt.Sprintf("v%d", s), Item: id(fmt.Sprintf("%s%d", group, rng.IntN(5))), TS: ts})
		}
	}
	evs = append(evs, csEvent{Info: &ItemInfo{Item: id("T9"), Available: true, TS: ts, Attrs: map[string][]string{
		"category": {"camping/tents"}, "tags": {"tent", "waterproof", "tunnel"}, "title": {"tunnel tent three person waterproof"}}}})
	return evs, names
}

// The scenario of the acceptance check coldstart-item, on data generated
// here, through the default blend: an item with a record and zero clicks is
// recommended beside similar items, and a session ending on it gets similar
// items.
func TestContentColdItemInDefaultBlend(t *testing.T) {
	evs, names := csTentShop(1)
	s := NewSet(DefaultSetOptions())
	m, err := s.Get(DefaultBlendSpec)
	if err != nil {
		t.Fatal(err)
	}
	d := newCSDriver(s)
	d.play(evs)
	r := s.Recommender(m)
	byID := map[ItemID]string{}
	for n, id := range names {
		byID[id] = n
	}
	nameList := func(sc []Scored) []string {
		var out []string
		for _, x := range sc {
			out = append(out, byID[x.Item])
		}
		return out
	}
	now := evs[len(evs)-1].Info.TS
	t9 := names["T9"]
	got := nameList(r.Recommend(csQuery(now, 0, t9), 5, nil, nil))
	tents := 0
	for _, n := range got {
		if strings.HasPrefix(n, "T") {
			tents++
		}
	}
	if len(got) != 5 || tents != 5 {
		t.Errorf("a session ending on the unclicked tent T9 got %v, want five tents", got)
	}
	for n := range 5 {
		q := csQuery(now, 0, names[fmt.Sprintf("T%d", n)])
		got := nameList(r.Recommend(q, 5, nil, nil))
		if !slices.Contains(got, "T9") {
			t.Errorf("T9 missing beside T%d: %v", n, got)
		}
		for _, x := range got {
			if strings.HasPrefix(x, "S") {
				t.Errorf("a stove beside tent T%d: %v", n, got)
			}
		}
	}
	// The unclicked tunnel tent resembles the clicked tunnel tent most.
	c := mustContent(t, s)
	if nb := c.Neighbors(t9, 1); len(nb) != 1 || nb[0].Item != names["T2"] {
		t.Errorf("T9's nearest item %v, want T2 (tunnel)", nb)
	}
	// Once the catalogue marks T9 unavailable, no answer carries it.
	d.apply(&csEvent{Info: &ItemInfo{Item: t9, Available: false, TS: now, Attrs: evs[len(evs)-1].Info.Attrs}})
	for n := range 5 {
		for _, x := range r.Recommend(csQuery(now, 0, names[fmt.Sprintf("T%d", n)]), 10, nil, nil) {
			if x.Item == t9 {
				t.Errorf("unavailable T9 recommended beside T%d", n)
			}
		}
	}
}

func mustContent(t *testing.T, s *Set) *Content {
	t.Helper()
	m, err := s.Get("content")
	if err != nil {
		t.Fatal(err)
	}
	return m.(*Content)
}
