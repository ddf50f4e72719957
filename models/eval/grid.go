package eval

import (
	"fmt"
	"sort"
	"strings"

	"waymark/models"
)

// MaxGrid bounds how many models one --models list may expand to.
const MaxGrid = 256

// ExpandModels turns a comma-separated list of model specs into specs, one
// per model to score. A parameter may list alternatives separated by '|':
//
//	sr(window=2|5|10),markov,blend(markov=1,sr=0.5|1)
//
// gives sr(window=2), sr(window=5), sr(window=10), markov,
// blend(markov=1,sr=0.5) and blend(markov=1,sr=1): the cartesian product of
// each spec's alternatives. Specs come back in canonical form (parameters
// sorted by name), in the order written, without duplicates.
func ExpandModels(list string) ([]string, error) {
	specs, err := models.SplitSpecs(list)
	if err != nil {
		return nil, err
	}
	if len(specs) == 0 {
		return nil, fmt.Errorf("%w: Models: empty list", ErrBadOption)
	}
	var out []string
	seen := map[string]bool{}
	for _, s := range specs {
		sp, err := models.ParseSpec(s)
		if err != nil {
			return nil, err
		}
		keys := make([]string, 0, len(sp.Params))
		for k := range sp.Params {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		combos := []map[string]string{{}}
		for _, k := range keys {
			alts := strings.Split(sp.Params[k], "|")
			var next []map[string]string
			for _, c := range combos {
				for _, a := range alts {
					a = strings.TrimSpace(a)
					if a == "" {
						return nil, fmt.Errorf("%w: %q: parameter %q has an empty alternative", models.ErrBadSpec, s, k)
					}
					m := make(map[string]string, len(c)+1)
					for ck, cv := range c {
						m[ck] = cv
					}
					m[k] = a
					next = append(next, m)
				}
			}
			combos = next
			if len(out)+len(combos) > MaxGrid {
				return nil, fmt.Errorf("%w: Models: %q expands to more than %d models", ErrBadOption, list, MaxGrid)
			}
		}
		for _, c := range combos {
			name := models.Spec{Name: sp.Name, Params: c}.String()
			if seen[name] {
				continue
			}
			seen[name] = true
			out = append(out, name)
		}
	}
	if len(out) > MaxGrid {
		return nil, fmt.Errorf("%w: Models: %q expands to more than %d models", ErrBadOption, list, MaxGrid)
	}
	return out, nil
}
