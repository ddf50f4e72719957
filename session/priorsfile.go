package session

import (
	"bufio"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"strings"

	"waymark/stream"
)

// PriorsImport says how a priors file (stream/FORMAT.md) is mapped into
// the importing deployment: `waymark priors import`'s flags.
type PriorsImport struct {
	// IDMap maps the exporter's item ids to the importer's; nil keeps ids
	// as they are.
	IDMap map[string]string
	// KeepUnmapped keeps items missing from IDMap under their own ids
	// instead of dropping them.
	KeepUnmapped bool
	// Weight scales every imported weight: more than 0, at most 1 (at 1
	// an imported best neighbour counts like the best local one; more
	// would let another site's clicks outweigh this site's own).
	Weight float64
	// Models, when not empty, takes only rows these exporting models wrote.
	Models map[string]bool
}

// PriorModels names the models a priors export holds rows of: those
// that can export their neighbours (models.Exporter).
func PriorModels() []string { return []string{"iknn", "markov", "sr"} }

// Validate checks the import options: the weight's range and the model
// names.
func (o PriorsImport) Validate() error {
	if !(o.Weight > 0 && o.Weight <= 1) {
		return fmt.Errorf("priors: weight %g: must be more than 0 and at most 1", o.Weight)
	}
	for m := range o.Models {
		if !slices.Contains(PriorModels(), m) {
			return fmt.Errorf("priors: unknown model %q: an export holds rows of %s", m, strings.Join(PriorModels(), ", "))
		}
	}
	return nil
}

// ReadPriors reads a priors file from r: its header line, then one row per
// line, mapped by o (ids through the map, weights scaled; a row left with
// no neighbours is dropped). It calls each with every row to import, in
// file order, and returns how many it imported and how many it dropped.
// Errors name the line; each's error stops the read and is returned. A
// file with no header, a row of an unknown model or a weight outside
// [0, 1], and a file that leaves nothing to import are errors: run it once
// with an each that does nothing to check a whole file before publishing.
func ReadPriors(r io.Reader, o PriorsImport, each func(stream.PriorRow) error) (rows, dropped int, err error) {
	if err := o.Validate(); err != nil {
		return 0, 0, err
	}
	header, skipped := false, 0
	mapID := func(id string) (string, bool) {
		if o.IDMap == nil {
			return id, true
		}
		if to, ok := o.IDMap[id]; ok {
			return to, true
		}
		return id, o.KeepUnmapped
	}
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 1<<20), 64<<20)
	for line := 1; sc.Scan(); line++ {
		if line == 1 {
			var hdr struct {
				Format  string `json:"format"`
				Version int    `json:"version"`
			}
			if err := json.Unmarshal(sc.Bytes(), &hdr); err != nil || hdr.Format != PriorsFormat || hdr.Version != 1 {
				return rows, dropped, fmt.Errorf("the first line is not a %s version 1 header", PriorsFormat)
			}
			header = true
			continue
		}
		var row stream.PriorRow
		if err := json.Unmarshal(sc.Bytes(), &row); err != nil {
			return rows, dropped, fmt.Errorf("line %d: %w", line, err)
		}
		if !slices.Contains(PriorModels(), row.Model) {
			return rows, dropped, fmt.Errorf("line %d: model %q: an export holds rows of %s", line, row.Model, strings.Join(PriorModels(), ", "))
		}
		for _, n := range row.Neighbors {
			if !(n.Weight >= 0 && n.Weight <= 1) {
				return rows, dropped, fmt.Errorf("line %d: neighbour %q: weight %g outside [0, 1], the range of an export", line, n.Item, n.Weight)
			}
		}
		if len(o.Models) > 0 && !o.Models[row.Model] {
			skipped++
			continue
		}
		item, ok := mapID(row.Item)
		if !ok {
			dropped++
			continue
		}
		out := stream.PriorRow{Item: item}
		for _, n := range row.Neighbors {
			if to, ok := mapID(n.Item); ok {
				out.Neighbors = append(out.Neighbors, stream.PriorNeighbor{Item: to, Weight: n.Weight * o.Weight})
			}
		}
		if len(out.Neighbors) == 0 {
			dropped++
			continue
		}
		if err := out.Validate(); err != nil {
			return rows, dropped, fmt.Errorf("line %d: %w", line, err)
		}
		if err := each(out); err != nil {
			return rows, dropped, err
		}
		rows++
	}
	switch {
	case sc.Err() != nil:
		return rows, dropped, sc.Err()
	case !header:
		return rows, dropped, fmt.Errorf("the file is empty: no %s header line", PriorsFormat)
	case rows == 0:
		return rows, dropped, fmt.Errorf("nothing to import: %d rows dropped as unmapped or left without neighbours, %d of other models", dropped, skipped)
	}
	return rows, dropped, nil
}

// ReadIDMap reads a CSV file of from,to item id pairs; a first line
// "from,to" is a header.
func ReadIDMap(path string) (map[string]string, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.FieldsPerRecord = 2
	m := map[string]string{}
	for n := 1; ; n++ {
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			return m, nil
		}
		if err != nil {
			return nil, fmt.Errorf("id map %s: %w", path, err)
		}
		if n == 1 && rec[0] == "from" && rec[1] == "to" {
			continue
		}
		m[rec[0]] = rec[1]
	}
}

// ParseModelList turns a comma-separated list of model names into a set;
// an empty list gives an empty set (take every model).
func ParseModelList(list string) map[string]bool {
	keep := map[string]bool{}
	for _, m := range strings.Split(list, ",") {
		if m = strings.TrimSpace(m); m != "" {
			keep[m] = true
		}
	}
	return keep
}
