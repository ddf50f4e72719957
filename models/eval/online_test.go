package eval

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"testing"
)

// onlineReference is testdata/online_reference.json, written by
// testdata/gen_online.py with SciPy 1.10.1, statsmodels 0.13.5 and numpy
// 1.24.2 (Debian's packages).
type onlineReference struct {
	Wilson []struct {
		K, N      int64
		Low, High float64
	}
	ZTest []struct {
		X1, N1, X2, N2 int64
		Z, P           float64
		NeededPerArm   int64 `json:"needed_per_arm"`
	}
	Sign []struct {
		K, N int64
		P    float64
	}
	OffPolicy []struct {
		Logged, Target, Reward []float64
		IPS                    float64 `json:"ips"`
		IPSLow                 float64 `json:"ips_low"`
		IPSHigh                float64 `json:"ips_high"`
		SNIPS                  float64 `json:"snips"`
		SNIPSLow               float64 `json:"snips_low"`
		SNIPSHigh              float64 `json:"snips_high"`
		ESS                    float64 `json:"ess"`
	} `json:"offpolicy"`
}

func loadOnlineReference(t *testing.T) onlineReference {
	t.Helper()
	b, err := os.ReadFile("testdata/online_reference.json")
	if err != nil {
		t.Fatal(err)
	}
	var r onlineReference
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	if len(r.Wilson) == 0 || len(r.ZTest) == 0 || len(r.Sign) == 0 || len(r.OffPolicy) == 0 {
		t.Fatal("reference file has an empty section")
	}
	return r
}

func near(a, b, tol float64) bool {
	return math.Abs(a-b) <= tol*math.Max(1, math.Max(math.Abs(a), math.Abs(b)))
}

// TestWilsonAgainstSciPy checks the click-through intervals against
// scipy.stats.binomtest(k, n).proportion_ci(method="wilson").
func TestWilsonAgainstSciPy(t *testing.T) {
	for _, c := range loadOnlineReference(t).Wilson {
		p := NewProportion(c.K, c.N)
		if !near(p.Low, c.Low, 1e-9) || !near(p.High, c.High, 1e-9) {
			t.Errorf("%d/%d: [%v, %v], SciPy [%v, %v]", c.K, c.N, p.Low, p.High, c.Low, c.High)
		}
	}
	if p := NewProportion(0, 0); p.Low != 0 || p.High != 1 || p.Rate != 0 {
		t.Errorf("no trial: %+v", p)
	}
}

// TestZTestAgainstStatsmodels checks the two-proportion z-test against
// statsmodels' proportions_ztest, and the sample size against the formula
// evaluated with SciPy's normal quantiles.
func TestZTestAgainstStatsmodels(t *testing.T) {
	for _, c := range loadOnlineReference(t).ZTest {
		r := CompareProportions(NewProportion(c.X1, c.N1), NewProportion(c.X2, c.N2))
		if !near(r.Z, c.Z, 1e-9) || !near(r.P, c.P, 1e-7) {
			t.Errorf("%d/%d vs %d/%d: z %v p %v, statsmodels z %v p %v", c.X1, c.N1, c.X2, c.N2, r.Z, r.P, c.Z, c.P)
		}
		if r.NeededPerArm != c.NeededPerArm {
			t.Errorf("%d/%d vs %d/%d: %d per arm, reference %d", c.X1, c.N1, c.X2, c.N2, r.NeededPerArm, c.NeededPerArm)
		}
		if r.DiffCI95[0] > r.Diff || r.DiffCI95[1] < r.Diff {
			t.Errorf("difference %v outside its interval %v", r.Diff, r.DiffCI95)
		}
	}
	if r := CompareProportions(NewProportion(0, 0), NewProportion(3, 10)); r.P != 1 || r.Z != 0 {
		t.Errorf("a side with no trial: %+v", r)
	}
}

// TestSignTestAgainstSciPy checks the exact sign test against
// scipy.stats.binomtest(k, n, 0.5).pvalue.
func TestSignTestAgainstSciPy(t *testing.T) {
	for _, c := range loadOnlineReference(t).Sign {
		if got := BinomialSignTest(c.K, c.N); !near(got, c.P, 1e-9) {
			t.Errorf("%d of %d: p %v, SciPy %v", c.K, c.N, got, c.P)
		}
	}
}

// TestOffPolicyAgainstNumpy checks IPS, SNIPS, their intervals and the
// effective sample size against numpy on the same logs.
func TestOffPolicyAgainstNumpy(t *testing.T) {
	for i, c := range loadOnlineReference(t).OffPolicy {
		slots := make([]LoggedSlot, len(c.Logged))
		for j := range slots {
			slots[j] = LoggedSlot{Logged: c.Logged[j], Target: c.Target[j], Reward: c.Reward[j]}
		}
		e := EstimateOffPolicy(slots)
		checks := []struct {
			name      string
			got, want float64
		}{
			{"ips", e.IPS, c.IPS}, {"ips low", e.IPSCI95[0], c.IPSLow}, {"ips high", e.IPSCI95[1], c.IPSHigh},
			{"snips", e.SNIPS, c.SNIPS}, {"snips low", e.SNIPSCI95[0], c.SNIPSLow}, {"snips high", e.SNIPSCI95[1], c.SNIPSHigh},
			{"ess", e.ESS, c.ESS},
		}
		for _, k := range checks {
			if !near(k.got, k.want, 1e-9) {
				t.Errorf("case %d %s: %v, numpy %v", i, k.name, k.got, k.want)
			}
		}
		if (e.ESS < MinESS) != (e.Warning != "") {
			t.Errorf("case %d: ESS %v, warning %q", i, e.ESS, e.Warning)
		}
	}
	if e := EstimateOffPolicy([]LoggedSlot{{Logged: 0, Target: 1, Reward: 1}, {Logged: 0.5, Target: 0, Reward: 1}}); e.Skipped != 1 || e.Supported != 0 || e.Warning == "" {
		t.Errorf("no support: %+v", e)
	}
}

// TestOffPolicyRecoversTheTruth simulates a logging policy that explores
// with known probabilities and checks that the estimate of a target
// policy's click rate covers the rate measured by serving the target
// policy directly (a simulation check, seeded).
func TestOffPolicyRecoversTheTruth(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 2))
	// Two items per slot: the target always shows item 1 (click rate 0.12);
	// the logger shows it with probability 0.7 and item 0 (rate 0.05) else.
	var logs []LoggedSlot
	for range 50_000 {
		showOne := rng.Float64() < 0.7
		rate, logged, target := 0.05, 0.3, 0.0
		if showOne {
			rate, logged, target = 0.12, 0.7, 1.0
		}
		r := 0.0
		if rng.Float64() < rate {
			r = 1
		}
		logs = append(logs, LoggedSlot{Logged: logged, Target: target, Reward: r})
	}
	e := EstimateOffPolicy(logs)
	if e.Warning != "" {
		t.Fatalf("warning %q", e.Warning)
	}
	for _, ci := range [][2]float64{e.IPSCI95, e.SNIPSCI95} {
		if ci[0] > 0.12 || ci[1] < 0.12 {
			t.Errorf("interval %v misses the true rate 0.12 (IPS %v, SNIPS %v)", ci, e.IPS, e.SNIPS)
		}
	}
}

// TestTeamDraft checks the invariants of team-draft interleaving
// (Radlinski, Kurup and Joachims 2008): no item twice; each list's items
// appear in that list's order; after every full round the teams have equal
// size (before one list runs out); and a given coin gives one result.
func TestTeamDraft(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	for trial := range 500 {
		a := rng.Perm(30)[:5+rng.IntN(20)]
		b := rng.Perm(30)[:5+rng.IntN(20)]
		k := 1 + rng.IntN(25)
		seed := rng.Uint64()
		coin := func(r int) bool { return rand.New(rand.NewPCG(seed, uint64(r))).IntN(2) == 0 }
		items, team := TeamDraft(a, b, k, coin)
		again, team2 := TeamDraft(a, b, k, coin)
		if len(items) != len(again) || len(team) != len(team2) {
			t.Fatal("same coin, different result")
		}
		seen := map[int]bool{}
		pos := map[int8]int{TeamA: -1, TeamB: -1}
		idx := func(l []int, x int) int {
			for i, v := range l {
				if v == x {
					return i
				}
			}
			return -1
		}
		var na, nb int
		union := map[int]bool{}
		for _, x := range a {
			union[x] = true
		}
		for _, x := range b {
			union[x] = true
		}
		if want := min(k, len(union)); len(items) != want {
			t.Fatalf("trial %d: %d items, want %d", trial, len(items), want)
		}
		for i, x := range items {
			if seen[x] {
				t.Fatalf("trial %d: %d twice", trial, x)
			}
			seen[x] = true
			src := a
			if team[i] == TeamB {
				src, nb = b, nb+1
			} else {
				na++
			}
			j := idx(src, x)
			if j < 0 || j < pos[team[i]] {
				t.Fatalf("trial %d: item %d out of its list's order", trial, x)
			}
			pos[team[i]] = j
			if d := na - nb; (d > 1 || d < -1) && i < min(len(a), len(b)) {
				t.Fatalf("trial %d: teams %d and %d after %d picks", trial, na, nb, i+1)
			}
		}
	}
	// Worked by hand: A = [1 2 3], B = [2 4 5], A wins the first flip, B
	// the second: A takes 1, B takes 2, then B first takes 4, A takes 3.
	items, team := TeamDraft([]int{1, 2, 3}, []int{2, 4, 5}, 4, func(r int) bool { return r == 0 })
	want := []int{1, 2, 4, 3}
	wantTeam := []int8{TeamA, TeamB, TeamB, TeamA}
	for i := range want {
		if items[i] != want[i] || team[i] != wantTeam[i] {
			t.Fatalf("got %v %v, want %v %v", items, team, want, wantTeam)
		}
	}
	if Credit(team, []int{1, 2}) != OutcomeB || Credit(team, []int{0}) != OutcomeA || Credit(team, []int{0, 1}) != OutcomeTie || Credit(team, []int{9}) != OutcomeTie {
		t.Error("credit")
	}
	if r := Interleaving(60, 40, 20); math.Abs(r.Preference-(70.0/120-0.5)) > 1e-12 || math.Abs(r.P-BinomialSignTest(60, 100)) > 1e-15 {
		t.Errorf("interleaving %+v", r)
	}
}
