package calibrate

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"flowset/internal/site"
)

// faultSurvey reads, in two states, a clamp-on flow and a manometer valve
// differential on every branch, the pump and header differentials; between
// the states valve b05 is moved from 2.5 to 3.8 turns and b06 from 3.0 to
// 2.0 turns (b03 stays where it was).
func faultSurvey(s *site.Site) {
	nan := math.NaN()
	s.Branches[3].Setting = 2.5
	s.Branches[5].Setting = 2.5
	s.Branches[6].Setting = 3.0
	for _, st := range []string{"as-found", "moved"} {
		for _, b := range s.Branches {
			set := nan
			if st == "moved" {
				switch b.ID {
				case "b05":
					set = 3.8
				case "b06":
					set = 2.0
				}
			}
			read(s, st, b.ID, site.Flow, "clamp-on", set)
			read(s, st, b.ID, site.ValveDiff, "manometer", set)
		}
		read(s, st, site.AtPump, site.PumpDiff, "manometer", nan)
		read(s, st, site.AtHeader, site.HeaderDiff, "manometer", nan)
	}
}

// TestFitPlantedFaults plants a fouled branch (×3), a free one (×0.4), a
// valve set at 1.5 turns though 2.5 was recorded and a seized valve that
// holds its 2.5-turn Kv although it was moved to 3.8 turns, and wants each
// found and named, with every other valve left on its table. Noise is
// normal at the instruments' stated uncertainties, over several seeds.
func TestFitPlantedFaults(t *testing.T) {
	ctx := context.Background()
	for seed := uint64(1); seed <= 4; seed++ {
		t.Run(fmt.Sprintf("seed=%d", seed), func(t *testing.T) {
			s := newPlantSite(t, plantSpec{branches: 8, arrangement: site.DirectReturn, seed: seed})
			faultSurvey(s)
			m := mustModel(t, s)
			tr := newTruth(m)
			rng := rand.New(rand.NewPCG(seed, 3))
			for i := range tr.p.Resistance {
				tr.p.Resistance[i] = math.Exp(0.1 * rng.NormFloat64())
			}
			tr.p.Resistance[1] = 3   // fouled
			tr.p.Resistance[2] = 0.4 // free
			tr.actual[3] = 1.5       // mis-set: 2.5 recorded
			tr.stuck[5] = 2.5        // seized at 2.5 turns
			simulate(t, m, tr, rng, 1)
			cal, err := Fit(ctx, m, nil)
			if err != nil {
				t.Fatal(err)
			}
			if !cal.Converged {
				t.Errorf("status %v", cal.Status)
			}
			b := cal.Branches
			if !b[1].Above(1.5) {
				t.Errorf("fouled b01: ratio %.3g [%.3g, %.3g], want the interval above 1.5", b[1].Ratio, b[1].Lo, b[1].Hi)
			}
			if !b[2].Below(1 / 1.5) {
				t.Errorf("free b02: ratio %.3g [%.3g, %.3g], want the interval below 1/1.5", b[2].Ratio, b[2].Lo, b[2].Hi)
			}
			for _, i := range []int{1, 2} {
				if !within3SD(b[i].Ratio, b[i].SD, tr.p.Resistance[i]) {
					t.Errorf("%s: truth %.3g beyond 3 sd of %.3g [%.3g, %.3g]", b[i].ID, tr.p.Resistance[i], b[i].Ratio, b[i].Lo, b[i].Hi)
				}
			}
			if v := b[3].Valve; v.Hypothesis != SetElsewhere {
				t.Errorf("mis-set b03: %v (%s), want %v", v.Hypothesis, v.Note, SetElsewhere)
			} else if got := v.Implied[0]; math.Abs(got-1.5) > 0.2 {
				// ±0.2 turn: the valve-differential sd of 1 % gives about
				// ±1 % on Kv, a few hundredths of a turn, plus the fit's
				// trade-off with the branch resistance.
				t.Errorf("mis-set b03: implied setting %.3g, want 1.5 ± 0.2 (recorded %.3g)", got, v.Recorded[0])
			}
			if v := b[5].Valve; v.Hypothesis != HoldsOneKv {
				t.Errorf("seized b05: %v (%s), scores %v, want %v", v.Hypothesis, v.Note, v.Score, HoldsOneKv)
			} else {
				kv, _ := m.Branches[5].Valve.KvAt(2.5)
				for k, got := range v.Kv {
					if math.Abs(got/kv-1) > 0.05 {
						t.Errorf("seized b05: kv %.3g in state %s, want %.3g ± 5 %%", got, cal.States[k], kv)
					}
				}
			}
			for i, bf := range b {
				if i == 3 || i == 5 {
					continue
				}
				if h := bf.Valve.Hypothesis; h != FollowsTable {
					t.Errorf("healthy valve %s: %v (%s), want %v", bf.ID, h, bf.Valve.Note, FollowsTable)
				}
				if i != 1 && i != 2 && (bf.Above(1.5) || bf.Below(1/1.5)) {
					t.Errorf("healthy branch %s flagged: ratio %.3g [%.3g, %.3g] (truth %.3g)", bf.ID, bf.Ratio, bf.Lo, bf.Hi, tr.p.Resistance[i])
				}
			}
			t.Logf("b01 %.3g [%.3g, %.3g]; b02 %.3g [%.3g, %.3g]; b03 %v implied %.3g ΔBIC %.1f; b05 %v ΔBIC %.1f; χ²/DOF %.2f; %d solves",
				b[1].Ratio, b[1].Lo, b[1].Hi, b[2].Ratio, b[2].Lo, b[2].Hi, b[3].Valve.Hypothesis, b[3].Valve.Implied[0],
				b[3].Valve.DeltaScore, b[5].Valve.Hypothesis, b[5].Valve.DeltaScore, cal.ReducedChiSquare, cal.Solves)
		})
	}
}

// TestFitSeizedAgainstResistance is the trap of the tech notes: a valve
// found at 1.5 turns is opened to 3.8 turns for a second state but is
// seized, so its branch's flow does not rise. A model with resistance
// multipliers alone explains the missing flow by a large resistance; the
// hypothesis test must blame the valve and leave the branch's resistance
// near its truth, unflagged. Every branch is read with a clamp-on meter and
// a valve meter, as on a thorough survey. The fit without the test is
// logged for comparison.
func TestFitSeizedAgainstResistance(t *testing.T) {
	ctx := context.Background()
	nan := math.NaN()
	for seed := uint64(11); seed <= 13; seed++ {
		t.Run(fmt.Sprintf("seed=%d", seed), func(t *testing.T) {
			s := newPlantSite(t, plantSpec{branches: 6, arrangement: site.DirectReturn, seed: seed})
			s.Branches[2].Setting = 1.5
			for _, st := range []string{"as-found", "opened"} {
				for _, b := range s.Branches {
					set := nan
					if st == "opened" && b.ID == "b02" {
						set = 3.8
					}
					read(s, st, b.ID, site.Flow, "clamp-on", set)
					read(s, st, b.ID, site.Flow, "valve-meter", set)
				}
				read(s, st, site.AtPump, site.PumpDiff, "manometer", nan)
			}
			m := mustModel(t, s)
			tr := newTruth(m)
			tr.stuck[2] = 1.5
			simulate(t, m, tr, rand.New(rand.NewPCG(seed, 1)), 1)
			plain, err := Fit(ctx, m, &FitOptions{NoHypotheses: true})
			if err != nil {
				t.Fatal(err)
			}
			cal, err := Fit(ctx, m, nil)
			if err != nil {
				t.Fatal(err)
			}
			b := cal.Branches[2]
			if b.Valve.Hypothesis != HoldsOneKv {
				t.Errorf("b02: %v (%s), scores %v, want %v", b.Valve.Hypothesis, b.Valve.Note, b.Valve.Score, HoldsOneKv)
			}
			if b.Above(1.5) || !within3SD(b.Ratio, b.SD, 1) {
				t.Errorf("b02 ratio %.3g [%.3g, %.3g], want its truth 1 within 3 sd and no flag", b.Ratio, b.Lo, b.Hi)
			}
			for _, r := range cal.Readings {
				if s.Readings[r.Index].Instrument == "valve-meter" && !r.AsValveDiff {
					t.Errorf("%v: valve-meter flow not fitted as a valve differential", r)
				}
			}
			pb := plain.Branches[2]
			t.Logf("b02 with the test: %v (ΔBIC %.1f), ratio %.3g [%.3g, %.3g]; without: ratio %.3g [%.3g, %.3g], kv scale %.3g, χ²/DOF %.1f",
				b.Valve.Hypothesis, b.Valve.DeltaScore, b.Ratio, b.Lo, b.Hi, pb.Ratio, pb.Lo, pb.Hi, pb.KvScale, plain.ReducedChiSquare)
		})
	}
}

// TestFitValveMeterKvOff: a valve whose Kv is 0.6 of its table, read with
// both a clamp-on meter and a valve meter. Fitted as the differential it
// measured, the valve-meter reading separates the valve from the branch and
// the Kv scale comes out near 0.6; the meter's flow (1/0.6 of the true flow)
// is not averaged with the clamp-on's.
func TestFitValveMeterKvOff(t *testing.T) {
	ctx := context.Background()
	nan := math.NaN()
	for seed := uint64(21); seed <= 23; seed++ {
		t.Run(fmt.Sprintf("seed=%d", seed), func(t *testing.T) {
			s := newPlantSite(t, plantSpec{branches: 5, arrangement: site.DirectReturn, seed: seed})
			for _, b := range s.Branches {
				read(s, "as-found", b.ID, site.Flow, "clamp-on", nan)
				read(s, "as-found", b.ID, site.Flow, "valve-meter", nan)
			}
			read(s, "as-found", site.AtPump, site.PumpDiff, "manometer", nan)
			m := mustModel(t, s)
			tr := newTruth(m)
			tr.p.KvScale[1] = 0.6
			simulate(t, m, tr, rand.New(rand.NewPCG(seed, 1)), 1)
			cal, err := Fit(ctx, m, nil)
			if err != nil {
				t.Fatal(err)
			}
			b := cal.Branches[1]
			if !b.KvFitted {
				t.Fatalf("b01 kv not fitted")
			}
			if !within3SD(b.KvScale, b.KvSD, 0.6) || b.KvHi > 0.85 {
				t.Errorf("b01 kv scale %.3g [%.3g, %.3g] (sd of ln %.3g), want 0.6 within 3 sd and the interval below 0.85", b.KvScale, b.KvLo, b.KvHi, b.KvSD)
			}
			if b.Valve.Hypothesis != SetElsewhere {
				t.Errorf("b01 valve: %v (%s), want %v", b.Valve.Hypothesis, b.Valve.Note, SetElsewhere)
			}
			if !within3SD(b.Ratio, b.SD, 1) {
				t.Errorf("b01 resistance ratio %.3g [%.3g, %.3g]: its truth 1 is beyond 3 sd", b.Ratio, b.Lo, b.Hi)
			}
		})
	}
}

// TestFitOutlier corrupts one flow reading (read as 1.6 times the truth)
// and wants it removed and named by its place in the sheet, with the other
// branches' intervals still holding their truth.
func TestFitOutlier(t *testing.T) {
	ctx := context.Background()
	s := newPlantSite(t, plantSpec{branches: 8, arrangement: site.DirectReturn, seed: 31})
	flowSurvey(s, "as-found")
	m := mustModel(t, s)
	tr := newTruth(m)
	simulate(t, m, tr, rand.New(rand.NewPCG(31, 1)), 1)
	bad := -1
	for ri, r := range s.Readings {
		if r.Where == "b04" && r.What == site.Flow {
			bad = ri
		}
	}
	s.Readings[bad].Value *= 1.6
	cal, err := Fit(ctx, m, nil)
	if err != nil {
		t.Fatal(err)
	}
	out := cal.Outliers()
	if len(out) != 1 || out[0].Index != bad {
		t.Fatalf("outliers %v, want only reading %d (%v)", out, bad, s.Readings[bad].Pos)
	}
	if got := out[0].String(); !strings.Contains(got, s.Readings[bad].Pos.String()) || !strings.Contains(got, "outlier") {
		t.Errorf("outlier described as %q, want its position %v", got, s.Readings[bad].Pos)
	}
	for i, b := range cal.Branches {
		if b.Determined && !within3SD(b.Ratio, b.SD, tr.p.Resistance[i]) {
			t.Errorf("%s: truth %.3g beyond 3 sd of %.3g [%.3g, %.3g]", b.ID, tr.p.Resistance[i], b.Ratio, b.Lo, b.Hi)
		}
	}
}

// within3SD reports whether truth lies within 3 sd of a fitted multiplier
// in log space: a check that fails 0.3 % of the time by chance, where one
// 95 % interval would fail 5 %; the coverage test checks the 95 % intervals
// over many seeds.
func within3SD(fitted, sd, truth float64) bool {
	return math.Abs(math.Log(fitted/truth)) <= 3*sd
}
