package balance

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"flowset/internal/plant"
	"flowset/internal/site"
)

// TestRankIndexFirst: of two branches whose flows after setting are equally
// uncertain, the one whose reading decides the index circuit (its chain may
// need more than the index's) is ranked before the one far from being the
// index, whose reading cannot change the pump; a branch the fit knows
// exactly is not listed at all.
func TestRankIndexFirst(t *testing.T) {
	ctx := context.Background()
	for _, tc := range rankPlants {
		t.Run(tc.name, func(t *testing.T) {
			m, p, base := rankPlant(t, tc.seed, tc.header)
			n := len(m.Branches)
			// The runner-up to the index (largest chain need but the
			// index's) and the branch needing the least.
			order := byChainNeed(base)
			slices.Reverse(order)
			idx, _ := m.Index(base.Index)
			near, far := order[0], order[n-1]
			if near == idx {
				near = order[1]
			}
			// Put the runner-up within reach of the index: its
			// uncertainty spans the gap between their needs.
			gap := math.Log(base.Needs[idx].Chain / base.Needs[near].Chain)
			sNear := max(0.15, gap/(base.Needs[near].Fixed/base.Needs[near].Chain))
			u := evenSpread(n, 0.005)
			u.LnResistance[near], u.LnResistance[far] = sNear, sNear
			plan := mustCompute(t, m, p, &Options{Rounding: Smart, Uncertainty: u})
			sol, err := m.Solve(ctx, p, plan.State())
			if err != nil {
				t.Fatal(err)
			}
			// Equal flow spread: scale the far branch's sd so that its
			// flow band matches the runner-up's.
			sd, err := flowSD(m, p, u, sol)
			if err != nil {
				t.Fatal(err)
			}
			u.LnResistance[far] *= sd[near] / sd[far]
			u.LnResistance[idx] = 0 // the index known exactly
			rp, err := RankReadings(ctx, m, p, plan, &ReadOptions{Uncertainty: u})
			if err != nil {
				t.Fatal(err)
			}
			rank := func(i int) int {
				return slices.IndexFunc(rp.Readings, func(c Candidate) bool { return c.Index == i })
			}
			rn, rf := rank(near), rank(far)
			var lines []string
			for _, c := range rp.Readings {
				lines = append(lines, c.Where+" "+c.How.String()+": "+c.Settles)
			}
			t.Log(strings.Join(lines, "\n"))
			if rn < 0 || rf >= 0 && rf < rn {
				t.Errorf("runner-up %s ranked %d, far branch %s ranked %d; want the runner-up first:\n%s", m.Branches[near].ID, rn, m.Branches[far].ID, rf, strings.Join(lines, "\n"))
			}
			if rn >= 0 && !strings.Contains(rp.Readings[rn].Settles, "index") {
				t.Errorf("runner-up's reading settles %q, want the index named", rp.Readings[rn].Settles)
			}
			if !(rp.RiskAfter < rp.Risk) {
				t.Errorf("risk %g after the readings, %g before", rp.RiskAfter, rp.Risk)
			}
		})
	}
}

func cmpF(a, b float64) int {
	switch {
	case a < b:
		return -1
	case a > b:
		return 1
	}
	return 0
}

// TestRankMostUncertainFirst: after setting, the branch whose flow as left
// is the most uncertain is read first, whatever its need (here the two
// branches needing the least, far from being the index, one with twice the
// other's spread of flow, every other branch known to 0.005 in ln
// resistance). Reading a branch removes its departure but what the reading
// leaves unknown, so the largest departure expected goes first (the Kalman
// update's variance reduction; common practice, no source).
func TestRankMostUncertainFirst(t *testing.T) {
	ctx := context.Background()
	for _, tc := range rankPlants {
		t.Run(tc.name, func(t *testing.T) {
			m, p, base := rankPlant(t, tc.seed, tc.header)
			n := len(m.Branches)
			order := byChainNeed(base)
			// The two branches needing the least, the one whose flow is
			// the more uncertain as left with twice the other's spread;
			// every other branch known to 0.005 in ln resistance.
			most, next := order[0], order[1]
			u := evenSpread(n, 0.005)
			u.LnResistance[most], u.LnResistance[next] = 0.12, 0.12
			plan := mustCompute(t, m, p, &Options{Rounding: Smart, Uncertainty: u})
			sol, err := m.Solve(ctx, p, plan.State())
			if err != nil {
				t.Fatal(err)
			}
			sd, err := flowSD(m, p, u, sol)
			if err != nil {
				t.Fatal(err)
			}
			if sd[next] > sd[most] {
				most, next = next, most
			}
			u.LnResistance[next] *= sd[most] / sd[next] / 2
			if sd, err = flowSD(m, p, u, sol); err != nil {
				t.Fatal(err)
			}
			if !(sd[most] > 1.5*sd[next]) {
				t.Fatalf("flow sd %g of %s, %g of %s: the construction wants the first twice the second", sd[most], m.Branches[most].ID, sd[next], m.Branches[next].ID)
			}
			rp, err := RankReadings(ctx, m, p, plan, &ReadOptions{Uncertainty: u})
			if err != nil {
				t.Fatal(err)
			}
			first := slices.IndexFunc(rp.Readings, func(r Candidate) bool { return r.Index >= 0 })
			if first < 0 {
				t.Fatalf("no branch ranked: %+v", rp)
			}
			var lines []string
			for _, r := range rp.Readings {
				lines = append(lines, fmt.Sprintf("%s %s: %s", r.Where, r.How, r.Settles))
				// The band the reading should fall in holds the
				// instrument's own spread as well as the flow's.
				inst := map[ReadKind]float64{ByValveMeter: defaultMeterSD, ByClampOn: defaultClampSD}[r.How]
				if half := math.Log(r.High / r.Expect); r.Index >= 0 && !(half >= 2*inst-1e-12) {
					t.Errorf("%s by %v: band ±%.4f in ln, narrower than the instrument's ±%.4f", r.Where, r.How, half, 2*inst)
				}
			}
			if rp.Readings[first].Index != most {
				t.Errorf("first branch read %v, want %s (flow sd %.3f; %s %.3f):\n%s", rp.Readings[first].Where, m.Branches[most].ID, sd[most], m.Branches[next].ID, sd[next], strings.Join(lines, "\n"))
			}
		})
	}
}

// rankPlants are the generated plants both ranking tests use.
var rankPlants = []struct {
	name   string
	seed   uint64
	header site.Arrangement
}{
	{"direct return", 13, site.DirectReturn},
	{"reverse return", 17, site.ReverseReturn},
	{"another direct-return plant", 29, site.DirectReturn},
}

// rankPlant generates a 12-branch plant with a pump and plans it at
// design.
func rankPlant(t *testing.T, seed uint64, header site.Arrangement) (*plant.Model, plant.Params, *Plan) {
	t.Helper()
	rng := rand.New(rand.NewPCG(seed, 1))
	m := withPump(t, randomSite(rng, genOpts{n: 12, header: header}))
	p := m.Design()
	return m, p, mustCompute(t, m, p, &Options{Rounding: Smart})
}

// byChainNeed returns the branch indices of plan in ascending order of
// their chains' need at the pump.
func byChainNeed(plan *Plan) []int {
	order := make([]int, len(plan.Needs))
	for i := range order {
		order[i] = i
	}
	slices.SortStableFunc(order, func(a, b int) int { return cmpF(plan.Needs[a].Chain, plan.Needs[b].Chain) })
	return order
}

// TestRankDecidesFirst: a branch planned on one of two explanations its
// readings cannot yet tell apart, whose reading at its new setting decides
// it (ReadOptions.Decides: the chance, 0.6, that the plan's setting leaves
// it outside the tolerance), is read before the most uncertain branch of
// TestRankMostUncertainFirst's construction, whose band alone removes less
// than that (a risk of at most one branch, halved at best by a reading);
// the reading says what it decides, the risk before counts it and the risk
// after does not. Without Decides the same branch is not read first.
func TestRankDecidesFirst(t *testing.T) {
	ctx := context.Background()
	for _, tc := range rankPlants {
		t.Run(tc.name, func(t *testing.T) {
			m, p, base := rankPlant(t, tc.seed, tc.header)
			n := len(m.Branches)
			order := byChainNeed(base)
			// The branch needing the least is the most uncertain; the
			// one needing the next least is known well but undecided.
			most, undecided := order[0], order[1]
			u := evenSpread(n, 0.005)
			u.LnResistance[most] = 0.12
			plan := mustCompute(t, m, p, &Options{Rounding: Smart, Uncertainty: u})
			plain, err := RankReadings(ctx, m, p, plan, &ReadOptions{Uncertainty: u})
			if err != nil {
				t.Fatal(err)
			}
			dec := make([]float64, n)
			why := make([]string, n)
			dec[undecided], why[undecided] = 0.6, "decides its explanation"
			rp, err := RankReadings(ctx, m, p, plan, &ReadOptions{Uncertainty: u, Decides: dec, DecidesWhy: why})
			if err != nil {
				t.Fatal(err)
			}
			first := func(rp *ReadPlan) Candidate {
				k := slices.IndexFunc(rp.Readings, func(r Candidate) bool { return r.Index >= 0 })
				if k < 0 {
					t.Fatalf("no branch ranked: %+v", rp)
				}
				return rp.Readings[k]
			}
			if c := first(plain); c.Index == undecided {
				t.Errorf("without Decides %s is read first", c.Where)
			}
			c := first(rp)
			if c.Index != undecided || !strings.HasPrefix(c.Settles, "decides its explanation") || !(c.Gain >= 0.6) {
				t.Errorf("first branch read %s (gain %.3f, %q), want %s with a gain of at least 0.6 saying what it decides", c.Where, c.Gain, c.Settles, m.Branches[undecided].ID)
			}
			if math.Abs(rp.Risk-plain.Risk-0.6) > 1e-9 {
				t.Errorf("risk %.4f with Decides, %.4f without: want 0.6 more", rp.Risk, plain.Risk)
			}
			for _, r := range rp.Readings[1:] {
				if r.Index == undecided && r.Gain >= 0.6 {
					t.Errorf("%s counted as deciding twice", r.Where)
				}
			}
		})
	}
}

// evenSpread is an Uncertainty of n branches, each resistance's ln with sd
// sd and nothing else uncertain.
func evenSpread(n int, sd float64) *Uncertainty {
	u := &Uncertainty{LnResistance: make([]float64, n), LnKvScale: make([]float64, n)}
	for i := range u.LnResistance {
		u.LnResistance[i] = sd
	}
	return u
}

// TestUnrecoverable: the share of a branch's risk no trim removes is the
// normal probability of a shortfall beyond its headroom, half the ln of
// what the pump can give at most over what the branch's chain needs. Known
// answers from the standard normal CDF (Abramowitz & Stegun 26.2): a branch
// needing all the pump gives, with sd 0.1 in ln flow and the -10 % edge,
// Φ(ln 0.9 / 0.1) = Φ(-1.0536) = 0.14604; one needing a quarter of it has
// ln 2 of headroom, Φ(-7.985), nothing; no curve (Available NaN or +Inf),
// nothing.
func TestUnrecoverable(t *testing.T) {
	m, _, base := rankPlant(t, 13, site.DirectReturn)
	tlo := math.Log(0.9)
	sd := func(int) float64 { return 0.1 }
	for _, tc := range []struct {
		name  string
		avail float64
		need  float64
		want  float64
	}{
		{"all the pump gives", 50e3, 50e3, 0.14604},
		{"a quarter of it", 50e3, 12.5e3, 0},
		{"no curve", math.NaN(), 50e3, 0},
		{"an ideal source", math.Inf(1), 50e3, 0},
	} {
		t.Run(tc.name, func(t *testing.T) {
			plan := *base
			plan.Needs = slices.Clone(base.Needs)
			plan.Pump.Available = tc.avail + m.Lift()
			plan.Needs[0].Chain = tc.need
			got := unrecoverable(m, &plan, []int{0}, tlo, sd)
			if math.Abs(got[0]-tc.want) > 5e-5 {
				t.Errorf("floor %.5f, want %.5f", got[0], tc.want)
			}
		})
	}
}
