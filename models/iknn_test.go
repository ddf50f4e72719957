package models

import (
	"bufio"
	"compress/gzip"
	"math"
	"os"
	"strconv"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// msnbcSessions reads the first n sessions of at most maxLen clicks from
// the MSNBC.com Anonymous Web Data (UCI Machine Learning Repository, CC BY
// 4.0; see ../shared/data/README.md), items 1..17 as ids 0..16.
func msnbcSessions(t *testing.T, n, maxLen int) [][]ItemID {
	t.Helper()
	const path = "../../shared/data/msnbc/msnbc990928.seq.gz"
	f, err := os.Open(path)
	if err != nil {
		t.Skipf("needs the open dataset %s (../shared/data beside the project): %v", path, err)
	}
	defer f.Close()
	zr, err := gzip.NewReader(f)
	if err != nil {
		t.Fatal(err)
	}
	sc := bufio.NewScanner(zr)
	var out [][]ItemID
	started := false
	for sc.Scan() && len(out) < n {
		line := strings.TrimSpace(sc.Text())
		if strings.HasPrefix(line, "% Sequences:") {
			started = true
			continue
		}
		if !started || line == "" || strings.HasPrefix(line, "%") {
			continue
		}
		fields := strings.Fields(line)
		if len(fields) > maxLen {
			continue
		}
		s := make([]ItemID, len(fields))
		for i, f := range fields {
			v, err := strconv.Atoi(f)
			if err != nil {
				t.Fatalf("bad line %q", line)
			}
			s[i] = ItemID(v - 1)
		}
		out = append(out, s)
	}
	if len(out) < n {
		t.Fatalf("read %d sessions, want %d", len(out), n)
	}
	return out
}

// TestIKNNMatchesGonum checks co-visitation counts and cosine similarities
// against gonum v0.17.0: with X the binary session × item incidence matrix,
// XᵀX holds n_ab off the diagonal and n_a on it, and the cosine is
// XᵀX_ab / sqrt(XᵀX_aa · XᵀX_bb). Sessions are the first 3,000 of at most 20
// clicks of the MSNBC data (so the window of 20 holds each whole session).
func TestIKNNMatchesGonum(t *testing.T) {
	const items = 17
	sessions := msnbcSessions(t, 3000, 20)
	m := NewIKNN(IKNNOptions{})
	feed([]Model{m}, sessions)

	x := mat.NewDense(len(sessions), items, nil)
	for r, s := range sessions {
		for _, it := range s {
			x.Set(r, int(it), 1)
		}
	}
	var g mat.Dense
	g.Mul(x.T(), x)
	checked := 0
	for a := 0; a < items; a++ {
		if got, want := m.support.get(ItemID(a)), g.At(a, a); got != want {
			t.Fatalf("n_%d = %g, gonum %g", a, got, want)
		}
		for b := 0; b < items; b++ {
			if a == b {
				continue
			}
			nab := g.At(a, b)
			if got := m.covis.get(ItemID(a), ItemID(b)); got != nab {
				t.Fatalf("n_%d,%d = %g, gonum %g", a, b, got, nab)
			}
			if nab == 0 {
				continue
			}
			want := nab / math.Sqrt(g.At(a, a)*g.At(b, b))
			got := m.sim(ItemID(a), ItemID(b), m.covis.get(ItemID(a), ItemID(b)), 1)
			if math.Abs(got-want) > 1e-12 {
				t.Fatalf("cos(%d,%d) = %.15f, gonum %.15f", a, b, got, want)
			}
			checked++
		}
	}
	if checked < 100 {
		t.Fatalf("only %d pairs compared", checked)
	}
	// Neighbors ranks by that cosine.
	ns := m.Neighbors(0, 5, 1)
	for i := 1; i < len(ns); i++ {
		if ns[i].Score > ns[i-1].Score {
			t.Fatalf("neighbours not sorted: %v", ns)
		}
	}
}
