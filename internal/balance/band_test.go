package balance

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"flowset/internal/site"
)

// TestBandClosedForm checks the band on parallel square-law branches held
// at a constant differential: each branch sees the source differential
// whatever the others do, so q_i = √(Δp_s / (R_i r_i + r_v,i)) and
// d ln q_i / d ln R_i = -½ Δp_fixed,i / Δp_branch,i exactly (differentiate
// the square law), with no effect on the other branches.
func TestBandClosedForm(t *testing.T) {
	m := mustModel(t, parallelSite())
	const sd, k = 0.2, 2.0
	for j := range m.Branches {
		t.Run(m.Branches[j].ID, func(t *testing.T) {
			u := &Uncertainty{LnResistance: make([]float64, len(m.Branches)), Coverage: k}
			u.LnResistance[j] = sd
			// The multipliers' spread alone (ModelSD -1), then with the
			// model's own error added in quadrature (the default).
			for _, model := range []float64{-1, 0} {
				pl := mustCompute(t, m, m.Design(), &Options{Uncertainty: u, ModelSD: model})
				for _, b := range pl.Branches {
					i, _ := m.Index(b.ID)
					want := 0.0
					if i == j {
						fd, _ := m.FixedElement(i, 1).Drop(b.Predicted, m.Fluid)
						want = k * sd * 0.5 * fd / b.BranchDiff
					}
					if model == 0 {
						want = k * math.Hypot(want/k, DefaultModelSD)
					}
					if got := math.Log(b.BandHigh / b.Percent); math.Abs(got-want) > 1e-9 {
						t.Errorf("model %g, branch %s: ln(high/predicted) = %.12f, want %.12f", model, b.ID, got, want)
					}
					if got := math.Log(b.Percent / b.BandLow); math.Abs(got-want) > 1e-9 {
						t.Errorf("model %g, branch %s: ln(predicted/low) = %.12f, want %.12f", model, b.ID, got, want)
					}
				}
			}
		})
	}
}

// TestBandFiniteDifference checks the linearised band of every branch
// against central finite differences of full network solves (the plan's
// state with one multiplier moved by e^±δ), for each kind of parameter, on
// random ladders with risers, pumps and both return arrangements.
func TestBandFiniteDifference(t *testing.T) {
	ctx := context.Background()
	const sd, delta = 0.1, 1e-5
	for seed := range uint64(3) {
		rng := rand.New(rand.NewPCG(seed, 23))
		o := genOpts{n: 5 + rng.IntN(8), header: site.Arrangement(1 + seed%2), risers: true, pump: seed != 1}
		s := randomSite(rng, o)
		m := mustModel(t, s)
		if o.pump {
			m = withPump(t, s)
		}
		p := randomParams(rng, m)
		p.PumpHead = 1.1
		n := len(m.Branches)
		kinds := []string{"resistance", "kv", "header"}
		if o.pump {
			kinds = append(kinds, "pump")
		}
		for _, kind := range kinds {
			for j := range n {
				if kind != "resistance" && kind != "kv" && j > 0 {
					break
				}
				if kind == "kv" && m.Branches[j].Valve == nil {
					continue
				}
				name := fmt.Sprintf("seed=%d/%s/%s", seed, kind, m.Branches[j].ID)
				u := &Uncertainty{LnResistance: make([]float64, n), LnKvScale: make([]float64, n)}
				switch kind {
				case "resistance":
					u.LnResistance[j] = sd
				case "kv":
					u.LnKvScale[j] = sd
				case "header":
					u.LnHeader = sd
				case "pump":
					u.LnPumpHead = sd
				}
				pl, err := Compute(ctx, m, p, &Options{Uncertainty: u, ModelSD: -1})
				if err != nil {
					t.Fatalf("%s: %v", name, err)
				}
				flows := func(f float64) []float64 {
					q := p.Clone()
					switch kind {
					case "resistance":
						q.Resistance[j] *= f
					case "kv":
						q.KvScale[j] *= f
					case "header":
						q.Header *= f
					case "pump":
						q.PumpHead *= f
					}
					sol, err := m.Solve(ctx, q, pl.State())
					if err != nil {
						t.Fatalf("%s: %v", name, err)
					}
					out := make([]float64, n)
					for i := range out {
						out[i] = sol.Flow(i)
					}
					return out
				}
				hi, lo := flows(math.Exp(delta)), flows(math.Exp(-delta))
				for _, b := range pl.Branches {
					i, _ := m.Index(b.ID)
					want := 2 * sd * math.Abs(math.Log(hi[i]/lo[i])/(2*delta))
					got := math.Log(b.BandHigh / b.Percent)
					if math.Abs(got-want) > 1e-5*max(want, 1e-3) {
						t.Errorf("%s: branch %s: band half-width %.9f in ln q, finite difference %.9f", name, b.ID, got, want)
					}
				}
			}
		}
	}
}

// TestLeastHigh checks the shortcut behind Plan.LeastHigh (the chains
// through a branch move by the change of its fixed drop, header flows being
// fixed by the targets) against a whole re-plan with that branch's
// multiplier at the end of its band, branch by branch, on random plants
// with risers.
func TestLeastHigh(t *testing.T) {
	const sd, k = 0.3, 2.0
	for seed := range uint64(3) {
		rng := rand.New(rand.NewPCG(seed, 41))
		s := randomSite(rng, genOpts{n: 8 + rng.IntN(10), header: site.Arrangement(seed), risers: true, noValve: seed == 2})
		m := mustModel(t, s)
		p := randomParams(rng, m)
		n := len(m.Branches)
		q := make([]float64, n)
		for j := range n {
			for _, kind := range []string{"resistance", "kv"} {
				if kind == "kv" && m.Branches[j].Valve == nil {
					continue
				}
				u := &Uncertainty{LnResistance: make([]float64, n), LnKvScale: make([]float64, n), Coverage: k}
				moved := p.Clone()
				if kind == "resistance" {
					u.LnResistance[j] = sd
					moved.Resistance[j] *= math.Exp(k * sd)
				} else {
					u.LnKvScale[j] = sd
					moved.KvScale[j] *= math.Exp(-k * sd)
				}
				pl := mustCompute(t, m, p, &Options{Uncertainty: u, ModelSD: -1})
				for i, b := range m.Branches {
					q[i] = b.Target
				}
				ex, err := newExact(m, moved, q)
				if err != nil {
					t.Fatal(err)
				}
				if want := max(ex.least, pl.Least); math.Abs(pl.LeastHigh-want) > 1e-9*want {
					t.Errorf("seed %d, %s of %s: LeastHigh = %.9g Pa, re-plan %.9g", seed, kind, m.Branches[j].ID, pl.LeastHigh, want)
				}
			}
		}
	}
}

// TestBandMonteCarlo checks the linearised band against a seeded Monte
// Carlo over the same independent log-normal multipliers (sd 0.15 on every
// resistance, 0.05 on every Kv scale, 0.1 on the header): the sample
// standard deviation of each branch's ln q must agree with the linearised
// one within 15 % (400 samples: the sampling error of an sd is about
// 1/√800 ≈ 3.5 %; the rest allows for the curvature the linearisation
// drops).
func TestBandMonteCarlo(t *testing.T) {
	ctx := context.Background()
	rng := rand.New(rand.NewPCG(5, 43))
	s := randomSite(rng, genOpts{n: 10, header: site.DirectReturn, risers: true})
	m := mustModel(t, s)
	p := randomParams(rng, m)
	n := len(m.Branches)
	u := &Uncertainty{LnResistance: make([]float64, n), LnKvScale: make([]float64, n), LnHeader: 0.1, Coverage: 1}
	for i := range n {
		u.LnResistance[i], u.LnKvScale[i] = 0.15, 0.05
	}
	pl := mustCompute(t, m, p, &Options{Uncertainty: u, ModelSD: -1})
	const samples = 400
	sum, sum2 := make([]float64, n), make([]float64, n)
	for range samples {
		q := p.Clone()
		for i := range n {
			q.Resistance[i] *= math.Exp(0.15 * rng.NormFloat64())
			q.KvScale[i] *= math.Exp(0.05 * rng.NormFloat64())
		}
		q.Header *= math.Exp(0.1 * rng.NormFloat64())
		sol, err := m.Solve(ctx, q, pl.State())
		if err != nil {
			t.Fatal(err)
		}
		for i := range n {
			l := math.Log(sol.Flow(i))
			sum[i] += l
			sum2[i] += l * l
		}
	}
	for _, b := range pl.Branches {
		i, _ := m.Index(b.ID)
		mean := sum[i] / samples
		sd := math.Sqrt((sum2[i] - samples*mean*mean) / (samples - 1))
		lin := math.Log(b.BandHigh / b.Percent) // Coverage 1: one sd
		if math.Abs(sd/lin-1) > 0.15 {
			t.Errorf("branch %s: Monte Carlo sd of ln q %.4f, linearised %.4f", b.ID, sd, lin)
		}
	}
}
