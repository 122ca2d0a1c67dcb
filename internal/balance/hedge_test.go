package balance

import (
	"errors"
	"math"
	"testing"
)

// quadCase is a branch whose fixed parts drop R q² (turbulent, fully rough:
// the square law), so every flow has the closed form q = √(D/(rR + k)).
func quadCase(R, D, target, open float64) HedgeCase {
	return HedgeCase{Rest: func(q float64) (float64, float64) { return R * q * q, 2 * R * q }, Diff: D, Target: target, Open: open}
}

func closedFlow(R, D, r, k float64) float64 { return math.Sqrt(D / (r*R + k)) }

// TestBranchFlowLinearQuadratic checks the root-finder away from the square
// law: fixed parts dropping a·q + b·q² (a laminar part in series with a
// turbulent one) give (rb + k) q² + ra q - D = 0, solved by the quadratic
// formula.
func TestBranchFlowLinearQuadratic(t *testing.T) {
	const a, b, D, target = 4e7, 5e9, 60e3, 2e-3
	c := HedgeCase{Rest: func(q float64) (float64, float64) { return a*q + b*q*q, a + 2*b*q }, Diff: D, Target: target}
	for _, r := range []float64{0.3, 1, 4} {
		for _, k := range []float64{0, 1e9, 5e10} {
			A, B := r*b+k, r*a
			want := (-B + math.Sqrt(B*B+4*A*D)) / (2 * A)
			if got := branchFlow(c, r, k); math.Abs(got/want-1) > 1e-10 {
				t.Errorf("r %g k %g: flow %.12g, quadratic formula %.12g", r, k, got, want)
			}
		}
	}
}

func TestBranchFlowClosedForm(t *testing.T) {
	c := quadCase(2e9, 60e3, 1e-3, 1e3)
	for _, tc := range []struct {
		name string
		r, k float64
	}{
		{"fixed parts alone", 1, 0},
		{"valve alone", 1e-9, 3e10},
		{"both", 2.5, 4e10},
		{"far above target", 0.01, 1e8},
	} {
		t.Run(tc.name, func(t *testing.T) {
			got, want := branchFlow(c, tc.r, tc.k), closedFlow(2e9, 60e3, tc.r, tc.k)
			if math.Abs(got/want-1) > 1e-9 {
				t.Errorf("flow %.9g, closed form %.9g", got, want)
			}
		})
	}
}

// lossAt is the hedge's loss at multiplier mc, worked out from the closed
// form, independently of Hedge's own evaluation.
func lossAt(R, D, target, open, mc float64, hs []Hypothesis, band bool) float64 {
	k := max(D-mc*R*target*target, open) / (target * target)
	var l float64
	for _, h := range hs {
		d := closedFlow(R, D, h.Multiplier, k)/target - 1
		l += h.Weight * d * d
		if band {
			l += h.Weight * outOfBand * (1 - inBandProb(d, -0.1, 0.1, 0.025))
		}
	}
	return l
}

func TestHedge(t *testing.T) {
	const R, D, target = 2e10, 100e3, 1e-3 // the fixed parts take 20 kPa at target, as designed
	const open = 2e3
	for _, tc := range []struct {
		name string
		hs   []Hypothesis
		band bool
		// check holds the case's own assertions on the result.
		check func(t *testing.T, r HedgeResult)
	}{
		{"one explanation: planned as it", []Hypothesis{{2, 1}}, true, func(t *testing.T, r HedgeResult) {
			if r.Multiplier != 2 || math.Abs(r.Flows[0]-1) > 1e-9 {
				t.Errorf("multiplier %g, flow %g; want 2 and 1", r.Multiplier, r.Flows[0])
			}
		}},
		{"equal weights, squared loss: between the two", []Hypothesis{{3, 1}, {1, 1}}, false, func(t *testing.T, r HedgeResult) {
			if !(r.Multiplier > 1 && r.Multiplier < 3) || !(r.Flows[0] < 1 && r.Flows[1] > 1) {
				t.Errorf("multiplier %g, flows %v: want strictly between, one short and one over", r.Multiplier, r.Flows)
			}
		}},
		{"a likely fault and an unlikely reading error far apart: the fault kept in band", []Hypothesis{{4, 0.7}, {1, 0.3}}, true, func(t *testing.T, r HedgeResult) {
			if r.Flows[0] < 0.9 || r.Flows[0] > 1.1 {
				t.Errorf("likeliest flow %.3f, want it within ±10 %%", r.Flows[0])
			}
			if !(r.Multiplier < 4) || !(r.Flows[1] < 1.5) {
				t.Errorf("multiplier %g, other flow %.3f: want the other pulled in", r.Multiplier, r.Flows[1])
			}
		}},
		{"the same without the band: the likeliest given up for the squared loss", []Hypothesis{{4, 0.7}, {1, 0.3}}, false, func(t *testing.T, r HedgeResult) {
			if r.Flows[0] >= 0.9 {
				t.Errorf("likeliest flow %.3f: squared loss alone should trade it below the band", r.Flows[0])
			}
		}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			c := quadCase(R, D, target, open)
			if tc.band {
				c.Low, c.High, c.Spread = -0.1, 0.1, 0.025
			}
			r, err := Hedge(c, tc.hs)
			if err != nil {
				t.Fatal(err)
			}
			tc.check(t, r)
			// The choice is the least loss over a grid 20 times finer than
			// Hedge's, evaluated from the closed form, to within the loss
			// change over one of Hedge's steps.
			lo, hi := math.Inf(1), math.Inf(-1)
			for _, h := range tc.hs {
				lo, hi = min(lo, h.Multiplier), max(hi, h.Multiplier)
			}
			got := lossAt(R, D, target, open, r.Multiplier, tc.hs, tc.band)
			for g := 0; g <= 20*hedgeGrid; g++ {
				mc := lo * math.Pow(hi/lo, float64(g)/float64(20*hedgeGrid))
				if l := lossAt(R, D, target, open, mc, tc.hs, tc.band); l < got-2e-4 {
					t.Errorf("loss %.6f at %.4f below the choice's %.6f at %.4f", l, mc, got, r.Multiplier)
					break
				}
			}
		})
	}
}

func TestHedgeErrors(t *testing.T) {
	good := quadCase(2e10, 100e3, 1e-3, 2e3)
	for _, tc := range []struct {
		name string
		c    HedgeCase
		hs   []Hypothesis
	}{
		{"no hypotheses", good, nil},
		{"zero weight", good, []Hypothesis{{2, 0}}},
		{"negative multiplier", good, []Hypothesis{{-1, 1}}},
		{"no rest", HedgeCase{Diff: 1, Target: 1}, []Hypothesis{{1, 1}}},
		{"no differential", quadCase(2e10, 0, 1e-3, 0), []Hypothesis{{1, 1}}},
		{"NaN target", quadCase(2e10, 1e5, math.NaN(), 0), []Hypothesis{{1, 1}}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if _, err := Hedge(tc.c, tc.hs); !errors.Is(err, errHedge) {
				t.Errorf("error %v, want errHedge", err)
			}
		})
	}
}
