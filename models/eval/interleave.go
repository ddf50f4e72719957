package eval

// Team labels of an interleaved list.
const (
	TeamA int8 = 1
	TeamB int8 = 2
)

// TeamDraft interleaves two ranked lists into one of at most k items by
// team-draft interleaving (Radlinski, Kurup and Joachims, "How does
// clickthrough data reflect retrieval quality?", CIKM 2008): in each round
// the team with fewer picks so far, or on a tie the one a coin flip
// names, adds its highest-ranked item not yet taken. coin(round) gives the
// flip of round r (true: A first); callers draw it from a seed so that
// replicas and replays interleave alike. The result's team[i] says which
// list contributed item i; a click on it credits that team.
func TeamDraft[T comparable](a, b []T, k int, coin func(round int) bool) (items []T, team []int8) {
	taken := make(map[T]bool, k)
	var ia, ib, na, nb, round int
	aFirst := false
	// next returns l's highest-ranked item not yet taken, from *i on.
	next := func(l []T, i *int) (T, bool) {
		for *i < len(l) {
			x := l[*i]
			*i++
			if !taken[x] {
				return x, true
			}
		}
		var zero T
		return zero, false
	}
	for len(items) < k {
		if na == nb { // a new round: the coin says who picks first
			aFirst = coin(round)
			round++
		}
		pickA := na < nb || (na == nb && aFirst)
		var x T
		var ok bool
		if pickA {
			x, ok = next(a, &ia)
		} else {
			x, ok = next(b, &ib)
		}
		if !ok { // this list is used up: the other fills the rest
			pickA = !pickA
			if pickA {
				x, ok = next(a, &ia)
			} else {
				x, ok = next(b, &ib)
			}
			if !ok {
				break
			}
		}
		taken[x] = true
		items = append(items, x)
		if pickA {
			team = append(team, TeamA)
			na++
		} else {
			team = append(team, TeamB)
			nb++
		}
	}
	return items, team
}

// InterleaveOutcome is one interleaved impression's verdict.
type InterleaveOutcome int8

// Outcomes: the team with more credited clicks wins; equal counts (no
// click at all included) are a tie.
const (
	OutcomeTie InterleaveOutcome = iota
	OutcomeA
	OutcomeB
)

// Credit returns the verdict of one interleaved impression from the teams
// of its clicked positions.
func Credit(team []int8, clicked []int) InterleaveOutcome {
	var ca, cb int
	for _, pos := range clicked {
		if pos < 0 || pos >= len(team) {
			continue
		}
		switch team[pos] {
		case TeamA:
			ca++
		case TeamB:
			cb++
		}
	}
	switch {
	case ca > cb:
		return OutcomeA
	case cb > ca:
		return OutcomeB
	}
	return OutcomeTie
}

// InterleaveTestName names the statistic and the test of interleaving.
const InterleaveTestName = "team-draft interleaving: preference (wins_A + ties/2)/n − 1/2 over impressions with a click; exact two-sided sign test on wins against losses, ties dropped"

// InterleaveResult sums up interleaved impressions.
type InterleaveResult struct {
	WinsA, WinsB, Ties int64
	// Preference is (WinsA + Ties/2)/(WinsA + WinsB + Ties) − 1/2: positive
	// when A is preferred, in [−1/2, 1/2].
	Preference float64
	P          float64
}

// Interleaving sums up the outcomes of impressions that drew at least one
// click (impressions without clicks say nothing about preference, and are
// left out by the caller or counted as ties here, which only scales the
// preference toward 0).
func Interleaving(winsA, winsB, ties int64) InterleaveResult {
	r := InterleaveResult{WinsA: winsA, WinsB: winsB, Ties: ties, P: 1}
	if n := winsA + winsB + ties; n > 0 {
		r.Preference = (float64(winsA)+float64(ties)/2)/float64(n) - 0.5
	}
	r.P = BinomialSignTest(winsA, winsA+winsB)
	return r
}
