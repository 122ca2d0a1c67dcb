package calibrate

import (
	"context"
	"math"
	"testing"

	"flowset/internal/plant"
	"flowset/internal/site"
	"flowset/internal/synth"
)

// TestFitSynthNoiseFree fits noise-free surveys of synthetic sites (the
// synth package's generator: random designs, hidden fouled and free
// branches, true header and pump multipliers) with every reading's stated
// uncertainty shrunk a thousand times, so that the weak priors pull by
// about 1e-9, and wants every parameter the readings pin down back to 1e-6.
// "Pinned down" is a posterior sd under 1e-3 at that precision: some
// parameters pass the engine's Determined test (sd under half the prior's)
// only in combination with one the readings cannot see (a riser and its
// sub-branches read only by valve meters), and keep an sd near 0.1 however
// precise the readings.
func TestFitSynthNoiseFree(t *testing.T) {
	ctx := context.Background()
	cases := []struct {
		name string
		spec synth.Spec
	}{
		{"direct return, nested, pump", synth.Spec{Branches: 16, Arrangement: site.DirectReturn, Nested: true, Boundary: site.PumpCurve,
			Seed: 7, Fouled: 0.2, Free: 0.1, States: 2, Header: 1.3, PumpHead: 0.9}},
		{"reverse return, pump", synth.Spec{Branches: 10, Arrangement: site.ReverseReturn, Boundary: site.PumpCurve,
			Seed: 8, Fouled: 0.2, Free: 0.1, Header: 0.8, PumpHead: 1.05}},
		{"no header loss, constant differential", synth.Spec{Branches: 8, Arrangement: site.NoHeaderLoss, Boundary: site.ConstantDiff,
			Seed: 9, Fouled: 0.2, Free: 0.2}},
		{"direct return, measured differential", synth.Spec{Branches: 10, Arrangement: site.DirectReturn, Boundary: site.MeasuredDiff,
			Seed: 10, Fouled: 0.2, Free: 0.1, States: 2, Header: 1.2,
			Readings: synth.ReadingMix{ClampOn: 1, ValveDiff: 0.5, BranchDiff: 0.3, HeaderDiff: true, PumpDiff: true}}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			s, tr, err := synth.Generate(ctx, c.spec)
			if err != nil {
				t.Fatal(err)
			}
			for i := range s.Readings {
				s.Readings[i].Sigma *= 1e-3
			}
			m, err := plant.New(s)
			if err != nil {
				t.Fatal(err)
			}
			// synth's headers follow the model exactly: no header model
			// error to weigh against readings made 1000 times finer.
			// synth makes free branches, some read at their test points
			// alone: taken as read (TakeFree).
			cal, err := Fit(ctx, m, &FitOptions{MaxIter: 2000, HeaderModel: -1, TakeFree: true})
			if err != nil {
				t.Fatal(err)
			}
			if !cal.Converged {
				t.Errorf("status %v", cal.Status)
			}
			const pinned = 1e-3
			var checked int
			for i, b := range cal.Branches {
				if !b.Fitted || b.SD > pinned {
					continue
				}
				checked++
				if e := math.Abs(b.Ratio/tr.Params.Resistance[i] - 1); e > 1e-6 {
					t.Errorf("%s (%q): ratio %.9g, truth %.9g", b.ID, tr.Faults[i], b.Ratio, tr.Params.Resistance[i])
				}
			}
			if checked < len(cal.Branches)/2 {
				t.Errorf("only %d of %d resistances determined", checked, len(cal.Branches))
			}
			for _, h := range []struct {
				name       string
				fit        ParamFit
				truth      float64
				identified bool
			}{{"header", cal.Header, tr.Params.Header, c.spec.Arrangement != site.NoHeaderLoss},
				{"pump", cal.Pump, tr.Params.PumpHead, c.spec.Boundary == site.PumpCurve}} {
				if h.identified && (!h.fit.Fitted || h.fit.SD > pinned) {
					t.Errorf("%s multiplier not pinned down: %+v", h.name, h.fit)
					continue
				}
				if h.fit.Fitted && h.fit.SD <= pinned && math.Abs(h.fit.Ratio/h.truth-1) > 1e-6 {
					t.Errorf("%s multiplier %.9g, truth %.9g", h.name, h.fit.Ratio, h.truth)
				}
			}
			if c.spec.Boundary == site.MeasuredDiff {
				var boundary int
				for _, r := range cal.Readings {
					if r.Boundary {
						boundary++
					}
				}
				if boundary == 0 {
					t.Errorf("no reading marked as setting the measured boundary")
				}
			}
			t.Logf("%d of %d resistances pinned down and recovered; %d steps, %d solves", checked, len(cal.Branches), cal.Iterations, cal.Solves)
		})
	}
}

// TestFitSynthFaults fits 30 synthetic sites with every kind of hidden
// fault, two survey states and noise at the stated uncertainties, and
// measures how often each fault is found: a fouled branch flagged
// restricted (interval above 1.5), a free one flagged free (below 1/1.5), a
// mis-set valve given SetElsewhere with its implied setting within 0.3 of
// the truth, a seized valve that was moved given HoldsOneKv; and how often a
// healthy branch or valve is flagged. Only faults the readings can see are
// counted (a determined resistance; a valve with hypothesis evidence).
func TestFitSynthFaults(t *testing.T) {
	seeds := 30
	if testing.Short() {
		seeds = 8
	}
	ctx := context.Background()
	type rate struct{ hit, n int }
	var fouled, free, misset, stuck, healthyR, healthyV rate
	pct := func(r rate) float64 { return 100 * float64(r.hit) / float64(max(r.n, 1)) }
	for seed := int64(1); seed <= int64(seeds); seed++ {
		s, tr, err := synth.Generate(ctx, synth.Spec{Branches: 12, Arrangement: site.DirectReturn, Boundary: site.PumpCurve,
			Seed: seed, Fouled: 0.1, Free: 0.1, MisSet: 0.1, Stuck: 0.1, Noise: 1, States: 2})
		if err != nil {
			t.Fatal(err)
		}
		m, err := plant.New(s)
		if err != nil {
			t.Fatal(err)
		}
		cal, err := Fit(ctx, m, nil)
		if err != nil {
			t.Fatalf("seed %d: %v", seed, err)
		}
		for i, b := range cal.Branches {
			fault := tr.Faults[i]
			v := b.Valve
			switch fault {
			case synth.Fouled, synth.Free, "":
				if b.Determined {
					switch fault {
					case synth.Fouled:
						fouled.n++
						if b.Above(1.5) {
							fouled.hit++
						}
					case synth.Free:
						free.n++
						if b.Below(1 / 1.5) {
							free.hit++
						}
					default:
						healthyR.n++
						if b.Above(1.5) || b.Below(1/1.5) {
							healthyR.hit++
							t.Logf("seed %d: healthy %s flagged: %.3g [%.3g, %.3g]", seed, b.ID, b.Ratio, b.Lo, b.Hi)
						}
					}
				}
				if b.HasValve && v.Hypothesis != NotTested && !v.Assumed {
					healthyV.n++
					if v.Hypothesis != FollowsTable {
						healthyV.hit++
						t.Logf("seed %d: healthy valve %s: %v (%s)", seed, b.ID, v.Hypothesis, v.Note)
					}
				}
			case synth.MisSet:
				if v.Hypothesis == NotTested {
					continue
				}
				misset.n++
				if v.Hypothesis == SetElsewhere && math.Abs(v.Implied[0]-tr.ActualSetting[i]) <= 0.3 {
					misset.hit++
				} else {
					t.Logf("seed %d: mis-set %s (really at %.2f): %v, implied %v (%s)", seed, b.ID, tr.ActualSetting[i], v.Hypothesis, v.Implied, v.Note)
				}
			case synth.Stuck:
				if v.Hypothesis == NotTested || !moved(m, i) {
					continue
				}
				stuck.n++
				if v.Hypothesis == HoldsOneKv {
					stuck.hit++
				} else {
					t.Logf("seed %d: seized %s: %v (%s)", seed, b.ID, v.Hypothesis, v.Note)
				}
			}
		}
	}
	t.Logf("fouled flagged %d/%d (%.0f %%), free flagged %d/%d (%.0f %%), mis-set found %d/%d (%.0f %%), seized found %d/%d (%.0f %%)",
		fouled.hit, fouled.n, pct(fouled), free.hit, free.n, pct(free), misset.hit, misset.n, pct(misset), stuck.hit, stuck.n, pct(stuck))
	t.Logf("false alarms: healthy branches %d/%d (%.1f %%), healthy valves %d/%d (%.1f %%)",
		healthyR.hit, healthyR.n, pct(healthyR), healthyV.hit, healthyV.n, pct(healthyV))
	for _, c := range []struct {
		name string
		r    rate
		min  float64
	}{{"fouled", fouled, 80}, {"free", free, 80}, {"mis-set", misset, 80}, {"seized", stuck, 80}} {
		if c.r.n == 0 {
			t.Errorf("no visible %s faults in %d sites", c.name, seeds)
		} else if pct(c.r) < c.min {
			t.Errorf("%s found in %.0f %% of cases, want at least %.0f %%", c.name, pct(c.r), c.min)
		}
	}
	if pct(healthyR) > 2 || pct(healthyV) > 5 {
		t.Errorf("false alarms %.1f %% of healthy branches, %.1f %% of healthy valves; want at most 2 %% and 5 %%", pct(healthyR), pct(healthyV))
	}
}

// moved reports whether branch i's valve was recorded at two different
// settings.
func moved(m *plant.Model, i int) bool {
	for _, st := range m.States {
		if st.Settings[i] != m.States[0].Settings[i] {
			return true
		}
	}
	return false
}
