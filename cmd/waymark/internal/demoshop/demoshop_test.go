package demoshop

import (
	"strings"
	"testing"
)

// TestItemIDsKeepTheWholeNoun: ids are the category's noun, dashed, then
// the item's word, so they read as names (issue 16 saw "lante-pocket" for
// a pocket lantern, cut to five letters).
func TestItemIDsKeepTheWholeNoun(t *testing.T) {
	nouns := map[string]string{}
	for _, c := range shopCategories() {
		nouns[c.path] = strings.ReplaceAll(c.noun, " ", "-") + "-"
	}
	sc := Generate(Options{Seed: 1, Days: 1, Sessions: 10})
	for _, it := range sc.Items {
		if !strings.HasPrefix(it.ID, nouns[it.Category]) || strings.Contains(it.ID, " ") {
			t.Errorf("item %q of %s does not start with %q", it.ID, it.Category, nouns[it.Category])
		}
	}
}
