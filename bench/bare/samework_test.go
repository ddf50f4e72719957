package bare

import (
	"testing"

	"waymark/stream"
)

// TestSameWorkCounts checks the counter on one session worked by hand from
// the learners' definitions (DESIGN.md: markov counts transitions, sr adds
// 1/gap for rules up to its window, iknn counts co-visitation once per
// item pair in a session; a repeat of the last click is not a transition).
func TestSameWorkCounts(t *testing.T) {
	c := NewSameWork()
	for _, it := range []string{"x", "y", "y", "z", "x"} {
		c.Add(&stream.Event{Session: "s1", Item: it})
	}
	x, y, z := c.ids["x"], c.ids["y"], c.ids["z"]
	cases := []struct {
		name string
		m    map[uint64]float64
		a, b uint32
		want float64
	}{
		{"markov x→y", c.markov, x, y, 1},
		{"markov y→z", c.markov, y, z, 1},
		{"markov z→x", c.markov, z, x, 1},
		{"markov y→y (repeat)", c.markov, y, y, 0},
		{"sr x→y", c.sr, x, y, 1},
		{"sr x→z (gap 2)", c.sr, x, z, 0.5},
		{"sr y→x (gap 2)", c.sr, y, x, 0.5},
		{"sr z→x", c.sr, z, x, 1},
		{"covis x,z", c.covis, x, z, 1},
		{"covis z,y", c.covis, z, y, 1},
		{"covis y,x (x's return adds nothing)", c.covis, y, x, 1},
	}
	for _, tc := range cases {
		if got := tc.m[pairKey(tc.a, tc.b)]; got != tc.want {
			t.Errorf("%s = %v, want %v", tc.name, got, tc.want)
		}
	}
	if m, s, v := c.Pairs(); m != 3 || s != 5 || v != 6 {
		t.Errorf("pairs markov %d sr %d covis %d, want 3 5 6", m, s, v)
	}
	if c.pop[y] != 2 || c.support[y] != 1 || c.support[x] != 1 {
		t.Errorf("pop[y] %v support[y] %v support[x] %v, want 2 1 1", c.pop[y], c.support[y], c.support[x])
	}
}

// TestSameWorkWindow checks that a session keeps only its last Window items:
// with a window of 2, the third click's co-visitation reaches back two.
func TestSameWorkWindow(t *testing.T) {
	c := NewSameWork()
	c.Window = 2
	for _, it := range []string{"a", "b", "c", "d"} {
		c.Add(&stream.Event{Session: "s", Item: it})
	}
	a, d := c.ids["a"], c.ids["d"]
	if got := c.covis[pairKey(a, d)]; got != 0 {
		t.Errorf("covis a,d = %v after a left the window, want 0", got)
	}
	if got := len(c.sessions["s"]); got != 2 {
		t.Errorf("window holds %d items, want 2", got)
	}
}
