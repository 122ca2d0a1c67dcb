package calibrate

import (
	"context"
	"math"
	"testing"

	"flowset/internal/balance"
	"flowset/internal/plant"
	"flowset/internal/synth"
)

// TestFitPressureIndependent fits the constructed clinic wing
// (synth.Ward, readings simulated on its hidden truth with the instruments'
// stated uncertainties) and plans on the fit: a round trip on a plant with
// pressure-independent valves, one starved behind a fouled strainer, one
// whose setting passes 0.8 of its table's flow. The checks (the truth is
// the constructed plant's; the 95 % intervals are the fit's own):
//   - the starved branch's resistance (three times design) is determined
//     and its interval holds 3;
//   - the mis-limited valve's flow scale is determined, its interval holds
//     0.8 and not 1;
//   - a branch whose valve regulates in every state is reported as not
//     determined, kept at design (1), not fitted to noise;
//   - the plan on the fit, applied to the true plant, gives every branch
//     its target within ±10 % and no valve starved.
func TestFitPressureIndependent(t *testing.T) {
	ctx := context.Background()
	s, tr, err := synth.Ward(ctx)
	if err != nil {
		t.Fatal(err)
	}
	m, err := plant.New(s)
	if err != nil {
		t.Fatal(err)
	}
	cal, err := Fit(ctx, m, nil)
	if err != nil {
		t.Fatal(err)
	}
	byID := map[string]*BranchFit{}
	for i := range cal.Branches {
		b := &cal.Branches[i]
		byID[b.ID] = b
		t.Logf("%-6s R %.3f [%.3f, %.3f] det %v  k %.3f [%.3f, %.3f] det %v  held %v regulates %v", b.ID, b.Ratio, b.Lo, b.Hi, b.Determined, b.KvScale, b.KvLo, b.KvHi, b.KvDetermined, b.Held, b.Regulates)
	}
	f8 := byID["FCU-8"]
	if !f8.Held || f8.Regulates || !f8.HeldStates[0].Starved {
		t.Errorf("FCU-8: held %v, regulates %v, states %+v; want starved", f8.Held, f8.Regulates, f8.HeldStates)
	}
	if !f8.Determined || !(f8.Lo < 3 && f8.Hi > 3) || !(f8.Lo > 1.5) {
		t.Errorf("FCU-8: resistance %.3f [%.3f, %.3f], determined %v; want an interval holding the true 3, above 1.5", f8.Ratio, f8.Lo, f8.Hi, f8.Determined)
	}
	f3 := byID["FCU-3"]
	if !f3.KvFitted || !f3.KvDetermined || !(f3.KvLo < 0.8 && f3.KvHi > 0.8) || !(f3.KvHi < 0.95) {
		t.Errorf("FCU-3: flow scale %.3f [%.3f, %.3f], determined %v; want an interval holding the true 0.8 and below 0.95", f3.KvScale, f3.KvLo, f3.KvHi, f3.KvDetermined)
	}
	var regulating int
	for _, b := range cal.Branches {
		if !b.Regulates {
			continue
		}
		regulating++
		if b.Determined || b.Ratio != 1 || cal.Params.Resistance[b.Index] != 1 {
			t.Errorf("%s regulates in every state but its resistance is %.3f (determined %v), want 1, not determined", b.ID, b.Ratio, b.Determined)
		}
	}
	if regulating == 0 {
		t.Error("no branch regulates in every state: the case does not test the rule")
	}
	pl, err := balance.Compute(ctx, m, cal.Params, nil)
	if err != nil {
		t.Fatal(err)
	}
	cs, ct := *s, *tr
	cs.Boundary.Speed = pl.Speed
	sol, err := synth.Simulate(ctx, &cs, &ct, pl.Settings)
	if err != nil {
		t.Fatal(err)
	}
	for _, bp := range pl.Branches {
		i, _ := m.Index(bp.ID)
		r := sol.Flow(i) / bp.Target
		t.Logf("%-6s set %g -> %.1f %% of target, valve %.1f kPa", bp.ID, bp.New, 100*r, sol.ValveDiff(i)/1e3)
		if math.Abs(r-1) > 0.1 {
			t.Errorf("%s: %.1f %% of target on the true plant", bp.ID, 100*r)
		}
		if m.Branches[i].PI != nil && !sol.Regulates(i) {
			t.Errorf("%s: valve starved on the true plant at the plan (%.1f kPa)", bp.ID, sol.ValveDiff(i)/1e3)
		}
	}
}
