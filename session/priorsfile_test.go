package session

import (
	"context"
	"math"
	"slices"
	"strings"
	"testing"

	"waymark/models"
	"waymark/store"
	"waymark/stream"
)

// TestReadPriorsRefuses: a priors import refuses what would import nothing
// or something other than an export (issue 12: an empty file, an unknown
// model and --weight 2000 were taken without complaint). Ranges are the
// format's (stream/FORMAT.md: weights in [0, 1], models iknn, markov, sr).
func TestReadPriorsRefuses(t *testing.T) {
	const hdr = `{"format":"waymark-priors","version":1}` + "\n"
	const row = `{"model":"iknn","item":"A","neighbors":[{"item":"B","weight":1},{"item":"C","weight":0.5}]}` + "\n"
	ok := PriorsImport{Weight: 0.5}
	tests := []struct {
		name, file string
		o          PriorsImport
		want       string // "" : accepted
	}{
		{"valid", hdr + row, ok, ""},
		{"weight 1", hdr + row, PriorsImport{Weight: 1}, ""},
		{"empty file", "", ok, "empty"},
		{"header only", hdr, ok, "nothing to import"},
		{"unknown row model", hdr + `{"model":"pop","item":"A","neighbors":[{"item":"B","weight":1}]}` + "\n", ok, `model "pop"`},
		{"row without model", hdr + `{"item":"A","neighbors":[{"item":"B","weight":1}]}` + "\n", ok, `model ""`},
		{"file weight over 1", hdr + `{"model":"sr","item":"A","neighbors":[{"item":"B","weight":7}]}` + "\n", ok, "outside [0, 1]"},
		{"weight 2000", hdr + row, PriorsImport{Weight: 2000}, "at most 1"},
		{"weight 0", hdr + row, PriorsImport{Weight: 0}, "more than 0"},
		{"weight NaN", hdr + row, PriorsImport{Weight: math.NaN()}, "more than 0"},
		{"unknown --models", hdr + row, PriorsImport{Weight: 0.5, Models: ParseModelList("iknn,knn")}, `unknown model "knn"`},
		{"--models leaves nothing", hdr + row, PriorsImport{Weight: 0.5, Models: ParseModelList("sr")}, "nothing to import"},
		{"map leaves nothing", hdr + row, PriorsImport{Weight: 0.5, IDMap: map[string]string{"Z": "z"}}, "nothing to import"},
		{"bad line after a good one", hdr + row + `{"model":"x","item":"A","neighbors":[]}` + "\n", ok, "line 3"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			n := 0
			rows, _, err := ReadPriors(strings.NewReader(tt.file), tt.o, func(stream.PriorRow) error { n++; return nil })
			if tt.want == "" {
				if err != nil || rows != 1 || n != 1 {
					t.Fatalf("want 1 row imported; got %d (%d calls), %v", rows, n, err)
				}
				return
			}
			if err == nil || !strings.Contains(err.Error(), tt.want) {
				t.Fatalf("want an error containing %q, got %v (rows %d)", tt.want, err, rows)
			}
		})
	}
}

// TestPriorModelsAreTheExporters: PriorModels names exactly the models of
// the default set that export their neighbours, so an import accepts every
// row an export writes and nothing else.
func TestPriorModelsAreTheExporters(t *testing.T) {
	ctx := context.Background()
	so := store.DefaultOptions()
	so.MemTableSize = 8 << 20
	st, err := store.Open(ctx, t.TempDir(), so)
	if err != nil {
		t.Fatal(err)
	}
	defer func() { _ = st.Close() }()
	eng, err := NewEngine(ctx, st, nil, DefaultEngineOptions())
	if err != nil {
		t.Fatal(err)
	}
	keys := eng.p.Set.Keys()
	var got []string
	for i, m := range eng.p.learners {
		if _, ok := m.(models.Exporter); ok {
			got = append(got, keys[i])
		}
	}
	slices.Sort(got)
	if want := slices.Sorted(slices.Values(PriorModels())); !slices.Equal(got, want) {
		t.Fatalf("the default set's exporters are %v, PriorModels says %v", got, PriorModels())
	}
}
