package balance_test

import (
	"context"
	"fmt"
	"math"
	"slices"
	"strings"
	"testing"

	"flowset/internal/balance"
	"flowset/internal/calibrate"
	"flowset/internal/plant"
	"flowset/internal/site"
	"flowset/internal/synth"
)

// outcome is a plan applied to the true plant.
type outcome struct {
	within    float64 // fraction of terminal branches within ±10 % of target
	worstLow  float64 // lowest flow, % of target
	worstHigh float64 // highest flow, % of target
	head      float64 // source differential over the least the true plant needs
}

// apply sets a plan's valves and pump on the true plant (synth.Simulate:
// mis-set valves land off their marks, stuck ones stay put) and measures the
// flows against the targets. The pump speed or the held differential of the
// plan is put on a copy of the site and truth, since Simulate runs the
// site's boundary.
func apply(t *testing.T, s *site.Site, tr *synth.Truth, m *plant.Model, pl *balance.Plan, least float64) outcome {
	t.Helper()
	cs, ct := *s, *tr
	if pl.Speed > 0 {
		cs.Boundary.Speed = pl.Speed
	} else {
		ct.Differential = pl.Differential
	}
	sol, err := synth.Simulate(context.Background(), &cs, &ct, pl.Settings)
	if err != nil {
		t.Fatal(err)
	}
	o := outcome{worstLow: math.Inf(1), worstHigh: math.Inf(-1), head: sol.PumpDiff() / least}
	var n, in int
	for _, b := range pl.Branches {
		if b.Riser {
			continue
		}
		i, _ := m.Index(b.ID)
		r := sol.Flow(i) / b.Target
		n++
		if r >= 0.9 && r <= 1.1 {
			in++
		}
		o.worstLow, o.worstHigh = min(o.worstLow, 100*r), max(o.worstHigh, 100*r)
	}
	o.within = float64(in) / float64(n)
	return o
}

// metered is a survey with a flow reading on every branch, half the valve
// differentials, a fifth of the branch differentials and the pump, header
// and total readings.
var metered = synth.ReadingMix{ClampOn: 1, ValveDiff: 0.5, BranchDiff: 0.2, HeaderDiff: true, PumpDiff: true, TotalFlow: true}

// TestClosedLoop plans synthetic plants three ways — on the true
// multipliers (oracle), on the design and on the calibration of the
// simulated survey — applies each plan to the true plant and compares the
// flows with the targets and the pump differential with the least the true
// plant needs. The specs have fouled and free branches but no valve faults
// (a mis-set or stuck valve cannot be set by any plan: the valve-fault test
// below). Target (the project brief): the calibrated plan puts at least
// 95 % of branches within ±10 % with a differential within 5 % of the
// least; asserted for surveys that read every branch's flow. With synth's
// default survey mix some branches are not read well enough to pin their
// resistance; there the plan must name any such branch that could raise the
// differential needed.
func TestClosedLoop(t *testing.T) {
	if testing.Short() {
		t.Skip("closed loop calibrates simulated surveys")
	}
	ctx := context.Background()
	type tc struct {
		spec   synth.Spec
		assert bool // the survey reads every branch: hold the calibrated plan to the target
	}
	withMix := func(s synth.Spec, mix synth.ReadingMix) synth.Spec { s.Readings = mix; return s }
	direct := synth.Spec{Branches: 20, Arrangement: site.DirectReturn, Boundary: site.PumpCurve, Seed: 11, Noise: 1, States: 2, Fouled: 0.15, Free: 0.1}
	reverse := synth.Spec{Branches: 24, Arrangement: site.ReverseReturn, Nested: true, Boundary: site.ConstantDiff, Seed: 12, Noise: 1, States: 2, Fouled: 0.15, Free: 0.1}
	nested := synth.Spec{Branches: 30, Arrangement: site.DirectReturn, Nested: true, Boundary: site.PumpCurve, Seed: 13, Noise: 1, States: 2, Fouled: 0.1, Free: 0.1, Header: 1.2, PumpHead: 0.95}
	measured := synth.Spec{Branches: 16, Arrangement: site.NoHeaderLoss, Boundary: site.MeasuredDiff, Seed: 14, Noise: 1, States: 2, Fouled: 0.15, Free: 0.1}
	cases := map[string]tc{
		"direct pump 20/metered":            {withMix(direct, metered), true},
		"reverse constant 24/metered":       {withMix(reverse, metered), true},
		"nested direct pump 30/metered":     {withMix(nested, metered), true},
		"measured none 16/metered":          {withMix(measured, metered), true},
		"direct pump 20/default mix":        {direct, false},
		"reverse constant 24/default mix":   {reverse, false},
		"nested direct pump 30/default mix": {nested, false},
	}
	names := make([]string, 0, len(cases))
	for k := range cases {
		names = append(names, k)
	}
	slices.Sort(names)
	for _, name := range names {
		c := cases[name]
		t.Run(name, func(t *testing.T) {
			s, tr, err := synth.Generate(ctx, c.spec)
			if err != nil {
				t.Fatal(err)
			}
			// synth sizes the pump 15 % above the design need; a fouled
			// index can need more. The drive is allowed to over-speed here
			// so the test measures the plan, not the pump's size
			// (TestClosedLoopShortPump covers a pump that falls short).
			s.Boundary.MaxSpeed = 1.5
			m, err := plant.New(s)
			if err != nil {
				t.Fatal(err)
			}
			opt := &balance.Options{Rounding: balance.Smart}
			oracle, err := balance.Compute(ctx, m, tr.Params, opt)
			if err != nil {
				t.Fatal(err)
			}
			design, err := balance.Compute(ctx, m, m.Design(), opt)
			if err != nil {
				t.Fatal(err)
			}
			// synth's headers follow the model's one multiplier exactly:
			// the header model's error (calibrate.DefaultHeaderModel) is
			// then only information set aside, and the test measures the plan.
			cal, err := calibrate.Fit(ctx, m, &calibrate.FitOptions{HeaderModel: -1})
			if err != nil {
				t.Fatal(err)
			}
			unc := &balance.Uncertainty{LnResistance: cal.LogSD, LnKvScale: make([]float64, len(m.Branches)), LnHeader: cal.Header.SD, LnPumpHead: cal.Pump.SD}
			for i, b := range cal.Branches {
				if b.ID == oracle.Index {
					t.Logf("true index %s: fitted %.3f sd %.3f determined %v fault probability %.3f", b.ID, b.Ratio, cal.LogSD[i], b.Determined, b.FaultProb)
				}
			}
			for i, b := range cal.Branches {
				if b.KvFitted {
					unc.LnKvScale[i] = b.KvSD
				}
			}
			copt := *opt
			copt.Uncertainty = unc
			calibrated, err := balance.Compute(ctx, m, cal.Params, &copt)
			if err != nil {
				t.Fatal(err)
			}
			least := oracle.Least
			for _, p := range []struct {
				name string
				pl   *balance.Plan
			}{{"oracle", oracle}, {"design", design}, {"calibrated", calibrated}} {
				o := apply(t, s, tr, m, p.pl, least)
				t.Logf("%-10s within ±10 %%: %5.1f %%  flows %5.1f-%5.1f %% of target  differential %.3f × least (%.1f kPa)",
					p.name, 100*o.within, o.worstLow, o.worstHigh, o.head, least/1e3)
				ok := o.within >= 0.95 && math.Abs(o.head-1) <= 0.05
				switch {
				case p.name == "oracle" && !ok:
					t.Errorf("oracle plan: %.1f %% within ±10 %%, differential %.3f × least; want ≥ 95 %% and within 5 %%", 100*o.within, o.head)
				case p.name == "calibrated" && c.assert && !ok:
					t.Errorf("calibrated plan: %.1f %% within ±10 %%, differential %.3f × least; want ≥ 95 %% and within 5 %%", 100*o.within, o.head)
				case p.name == "calibrated" && o.head < 0.95:
					// The plan under-pumps: it must have flagged the true
					// index as poorly known.
					if !slices.ContainsFunc(calibrated.Warnings, func(w string) bool { return strings.Contains(w, fmt.Sprintf("%q", oracle.Index)) }) {
						t.Errorf("calibrated plan under-pumps (%.3f × least) without naming the true index %q: warnings %q", o.head, oracle.Index, calibrated.Warnings)
					}
					t.Logf("calibrated plan's high-end differential %.1f kPa (%.3f × least)", calibrated.LeastHigh/1e3, calibrated.LeastHigh/least)
				}
			}
			var banded int
			for _, b := range calibrated.Branches {
				if b.BandInTolerance {
					banded++
				}
			}
			t.Logf("calibrated plan: %d of %d branches have their whole band in tolerance", banded, len(calibrated.Branches))
		})
	}
}

// TestClosedLoopValveFaults applies plans to a plant whose valves are partly
// mis-set (handwheel scale offset) or stuck. A plan of settings alone cannot
// serve those branches; told the offsets (as a calibration's valve verdict
// could), the technician sets each mis-set valve's handwheel by its offset
// and only the stuck valves stay wrong. The test measures both and checks
// that with the offsets applied every branch with a working valve is within
// ±10 %.
func TestClosedLoopValveFaults(t *testing.T) {
	if testing.Short() {
		t.Skip("closed loop calibrates simulated surveys")
	}
	ctx := context.Background()
	spec := synth.Spec{Branches: 20, Arrangement: site.DirectReturn, Boundary: site.PumpCurve, Seed: 21, Noise: 1, States: 2, Fouled: 0.1, MisSet: 0.1, Stuck: 0.05}
	s, tr, err := synth.Generate(ctx, spec)
	if err != nil {
		t.Fatal(err)
	}
	s.Boundary.MaxSpeed = 1.5
	m, err := plant.New(s)
	if err != nil {
		t.Fatal(err)
	}
	oracle, err := balance.Compute(ctx, m, tr.Params, &balance.Options{Rounding: balance.Smart})
	if err != nil {
		t.Fatal(err)
	}
	plain := apply(t, s, tr, m, oracle, oracle.Least)
	corrected := *oracle
	corrected.Settings = slices.Clone(oracle.Settings)
	var faulty []string
	for i, f := range tr.Faults {
		switch f {
		case synth.MisSet:
			corrected.Settings[i] -= tr.ActualSetting[i] - m.Branches[i].AsFound
		case synth.Stuck:
		default:
			continue
		}
		faulty = append(faulty, fmt.Sprintf("%s (%s)", m.Branches[i].ID, f))
	}
	cs := *s
	cs.Boundary.Speed = corrected.Speed
	sol, err := synth.Simulate(ctx, &cs, tr, corrected.Settings)
	if err != nil {
		t.Fatal(err)
	}
	for _, b := range corrected.Branches {
		i, _ := m.Index(b.ID)
		r := sol.Flow(i) / b.Target
		if tr.Faults[i] != synth.Stuck && (r < 0.9 || r > 1.1) {
			t.Errorf("branch %s (%q): %.1f %% of target with the offsets applied, want within ±10 %%", b.ID, tr.Faults[i], 100*r)
		}
	}
	fixed := apply(t, s, tr, m, &corrected, oracle.Least)
	t.Logf("valve faults %v: plan as is %.1f %% within ±10 %% (flows %.1f-%.1f %%); offsets applied %.1f %% (flows %.1f-%.1f %%)",
		faulty, 100*plain.within, plain.worstLow, plain.worstHigh, 100*fixed.within, fixed.worstLow, fixed.worstHigh)
}

// TestClosedLoopShortPump plans a plant whose fouled index needs more than
// the pump can give at its maximum speed, both ways a shortfall can be
// shared out, and applies each plan to the true plant. Design first: the
// plan runs the pump flat out, names the starved branches in Unmet with a
// remedy and opens their valves fully, and every other branch gets its
// target (within the ±10 % band on the true plant). Proportional: a balanced
// circuit scales together (the proportionality law of shared/references.md
// §6), so the flows spread by under 10 points.
func TestClosedLoopShortPump(t *testing.T) {
	ctx := context.Background()
	spec := synth.Spec{Branches: 20, Arrangement: site.DirectReturn, Boundary: site.PumpCurve, Seed: 11, Noise: 1, States: 2, Fouled: 0.15, Free: 0.1}
	s, tr, err := synth.Generate(ctx, spec)
	if err != nil {
		t.Fatal(err)
	}
	m, err := plant.New(s)
	if err != nil {
		t.Fatal(err)
	}
	for _, share := range []balance.Share{balance.DesignFirst, balance.Proportional} {
		t.Run(share.String(), func(t *testing.T) {
			pl, err := balance.Compute(ctx, m, tr.Params, &balance.Options{Rounding: balance.Smart, Share: share})
			if err != nil {
				t.Fatal(err)
			}
			if !pl.Pump.Short || !(pl.Pump.NeededSpeed > pl.Pump.MaxSpeed) || pl.Speed != pl.Pump.MaxSpeed {
				t.Fatalf("short %v, needed speed %g, max %g, plan speed %g: want a pump short of the targets run at its maximum", pl.Pump.Short, pl.Pump.NeededSpeed, pl.Pump.MaxSpeed, pl.Speed)
			}
			if len(pl.Unmet) == 0 {
				t.Errorf("no shortfall reported")
			}
			o := apply(t, s, tr, m, pl, pl.Least)
			switch share {
			case balance.Proportional:
				if o.worstHigh-o.worstLow > 10 {
					t.Errorf("flows %.1f-%.1f %% of target: want a spread under 10 points when the balanced circuit is short", o.worstLow, o.worstHigh)
				}
			case balance.DesignFirst:
				unmet := map[string]bool{}
				for _, u := range pl.Unmet {
					unmet[u.ID] = true
					if u.Remedy == "" {
						t.Errorf("unmet %s: no remedy", u.ID)
					}
				}
				cs := *s
				cs.Boundary.Speed = pl.Speed
				sol, err := synth.Simulate(ctx, &cs, tr, pl.Settings)
				if err != nil {
					t.Fatal(err)
				}
				for _, b := range pl.Branches {
					i, _ := m.Index(b.ID)
					r := sol.Flow(i) / b.Target
					if !unmet[b.ID] && !b.Riser && (r < 0.9 || r > 1.1) {
						t.Errorf("branch %s not named unmet: %.1f %% of target on the true plant, want within ±10 %%", b.ID, 100*r)
					}
					if unmet[b.ID] && b.Valve != "" {
						if _, hi := m.Branches[i].Valve.Range(); b.New != hi {
							t.Errorf("unmet branch %s: setting %g, want fully open %g", b.ID, b.New, hi)
						}
					}
				}
			}
			t.Logf("short pump, %s: needed speed %.3f (max %.3f), flows %.1f-%.1f %% of target, %.0f %% within ±10 %%, %d unmet; summary: %q", share, pl.Pump.NeededSpeed, pl.Pump.MaxSpeed, o.worstLow, o.worstHigh, 100*o.within, len(pl.Unmet), pl.Summary())
		})
	}
}
