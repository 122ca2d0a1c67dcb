package calibrate

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"

	"flowset/internal/site"
)

// coverageSurvey reads one state: a clamp-on flow on every branch, a
// manometer valve differential on every third and a branch differential on
// every other branch, and the pump differential.
func coverageSurvey(s *site.Site) {
	nan := math.NaN()
	for i, b := range s.Branches {
		read(s, "as-found", b.ID, site.Flow, "clamp-on", nan)
		if i%3 == 0 {
			read(s, "as-found", b.ID, site.ValveDiff, "manometer", nan)
		}
		if i%2 == 1 {
			read(s, "as-found", b.ID, site.BranchDiff, "manometer", nan)
		}
	}
	read(s, "as-found", site.AtPump, site.PumpDiff, "manometer", nan)
}

// TestFitCoverage fits simulated surveys of 200 invented 8-branch plants
// (one per seed), each with its own true multipliers drawn at random and
// normal reading errors at the stated uncertainties, and counts how often
// the 95 % intervals of the parameters the readings determine hold the
// truth. A binomial proportion at 0.95 over about 2,000 intervals has an sd
// of 0.5 %; the accepted band, 93-98.5 %, allows for the correlation of
// intervals within one plant and for the covariance being inflated by the
// reduced chi-square whenever that exceeds one (conservative by design).
func TestFitCoverage(t *testing.T) {
	for _, c := range []struct {
		name  string
		opt   *FitOptions
		seeds int
	}{
		// The engine's coverage under the law the truth is drawn from: one
		// wide prior (the mixture's coverage is TestFitMixture's).
		{"dense", &FitOptions{FaultShare: -1}, 200},
		// The matrix-free path with probed variances, forced on a small
		// plant: fewer seeds, the same band.
		{"matrix-free", &FitOptions{MatrixFreeAbove: 1, FaultShare: -1}, 100},
	} {
		t.Run(c.name, func(t *testing.T) { coverage(t, c.opt, c.seeds) })
	}
}

func coverage(t *testing.T, opt *FitOptions, seeds int) {
	if testing.Short() {
		seeds /= 5
	}
	ctx := context.Background()
	type tally struct{ in, n int }
	count := map[ParamKind]*tally{}
	var adopted int
	for seed := 1; seed <= seeds; seed++ {
		s := newPlantSite(t, plantSpec{branches: 8, arrangement: site.DirectReturn, seed: uint64(seed)})
		coverageSurvey(s)
		m := mustModel(t, s)
		tr := newTruth(m)
		rng := rand.New(rand.NewPCG(uint64(seed), 100))
		for i := range tr.p.Resistance {
			tr.p.Resistance[i] = math.Exp(0.3 * rng.NormFloat64())
			tr.p.KvScale[i] = math.Exp(0.03 * rng.NormFloat64())
		}
		tr.p.Header = math.Exp(0.2 * rng.NormFloat64())
		tr.p.PumpHead = math.Exp(0.05 * rng.NormFloat64())
		simulate(t, m, tr, rng, 1)
		cal, err := Fit(ctx, m, opt)
		if err != nil {
			t.Fatalf("seed %d: %v", seed, err)
		}
		res := cal.Result
		for j, par := range cal.Parameters {
			if !res.Determined[j] {
				continue
			}
			var truth float64
			switch par.Kind {
			case ResistanceParam:
				truth = tr.p.Resistance[par.Branch]
			case KvParam:
				truth = tr.p.KvScale[par.Branch]
			case HeaderParam:
				truth = tr.p.Header
			case PumpParam:
				truth = tr.p.PumpHead
			default:
				adopted++
				continue
			}
			if count[par.Kind] == nil {
				count[par.Kind] = &tally{}
			}
			c := count[par.Kind]
			c.n++
			if x := math.Log(truth); x >= res.Lo95[j] && x <= res.Hi95[j] {
				c.in++
			}
		}
		for _, b := range cal.Branches {
			if b.Valve.Hypothesis == SetElsewhere || b.Valve.Hypothesis == HoldsOneKv {
				adopted++
			}
		}
	}
	var in, n int
	for _, k := range []ParamKind{ResistanceParam, KvParam, HeaderParam, PumpParam} {
		if c := count[k]; c != nil {
			t.Logf("%v: %d of %d intervals hold the truth (%.1f %%)", k, c.in, c.n, 100*float64(c.in)/float64(c.n))
			in += c.in
			n += c.n
		}
	}
	cov := float64(in) / float64(n)
	t.Logf("all determined parameters: %d of %d (%.1f %%) over %d plants; %d valve hypotheses adopted on healthy valves", in, n, 100*cov, seeds, adopted)
	lo, hi := 0.93, 0.985
	if testing.Short() {
		lo, hi = 0.90, 0.99
	}
	if cov < lo || cov > hi {
		t.Errorf("coverage of the 95 %% intervals %.1f %%, want %.1f-%.1f %%", 100*cov, 100*lo, 100*hi)
	}
	if c := count[ResistanceParam]; c == nil || c.n < seeds*5 {
		t.Errorf("too few determined resistances: %v", c)
	}
	// Healthy valves: a hypothesis adopted on more than 2 % of plants
	// would be a false-alarm problem (each test is at "strong" evidence).
	if adopted > seeds/50 {
		t.Errorf("%d valve hypotheses adopted on %d healthy plants", adopted, seeds)
	}
}

// TestFitDetection measures how often the fit flags a fouled branch (×3)
// as restricted (its whole 95 % interval above 1.5) and how often it flags
// a healthy one (true ratio within about ±30 % of design), over 200
// invented 8-branch plants with one fouled branch each, for two surveys: a
// clamp-on flow on every branch plus the pump differential, and the same
// with valve-meter flows (which, fitted as valve differentials at one
// setting, cannot separate valve from branch).
func TestFitDetection(t *testing.T) {
	seeds := 200
	if testing.Short() {
		seeds = 40
	}
	ctx := context.Background()
	nan := math.NaN()
	for _, inst := range []string{"clamp-on", "valve-meter"} {
		t.Run(inst, func(t *testing.T) {
			var hit, miss, fa, healthy int
			for seed := 1; seed <= seeds; seed++ {
				s := newPlantSite(t, plantSpec{branches: 8, arrangement: site.DirectReturn, seed: uint64(seed)})
				for _, b := range s.Branches {
					read(s, "as-found", b.ID, site.Flow, inst, nan)
				}
				read(s, "as-found", site.AtPump, site.PumpDiff, "manometer", nan)
				m := mustModel(t, s)
				tr := newTruth(m)
				rng := rand.New(rand.NewPCG(uint64(seed), 200))
				for i := range tr.p.Resistance {
					tr.p.Resistance[i] = math.Exp(0.15 * rng.NormFloat64())
				}
				fouled := rng.IntN(len(tr.p.Resistance))
				tr.p.Resistance[fouled] = 3
				simulate(t, m, tr, rng, 1)
				cal, err := Fit(ctx, m, nil)
				if err != nil {
					t.Fatalf("seed %d: %v", seed, err)
				}
				for i, b := range cal.Branches {
					switch {
					case i == fouled && b.Above(1.5):
						hit++
					case i == fouled:
						miss++
					default:
						healthy++
						if b.Above(1.5) {
							fa++
						}
					}
				}
			}
			det := float64(hit) / float64(hit+miss)
			far := float64(fa) / float64(healthy)
			t.Logf("%s survey: detection %d of %d (%.1f %%), false alarms %d of %d healthy branches (%.2f %%)", inst, hit, hit+miss, 100*det, fa, healthy, 100*far)
			minDet := 0.95
			if inst == "valve-meter" {
				minDet = 0.5
			}
			if det < minDet {
				t.Errorf("detection %.1f %%, want at least %.0f %%", 100*det, 100*minDet)
			}
			if far > 0.01 {
				t.Errorf("false-alarm rate %.2f %%, want at most 1 %%", 100*far)
			}
		})
	}
}

// TestFitAgainstGaussNewton compares Fit with an independent solver written
// here: an undamped Gauss-Newton iteration on central finite differences of
// plant.Solved.Predict (not the fit's own predictions or Jacobian), the prior
// appended as extra residual rows, normal equations solved by gonum's LU.
// Estimates must agree to 1e-6 and standard deviations, from
// (JᵀJ/c + P)⁻¹ with the fit's chi-square factor c, to 1e-4.
func TestFitAgainstGaussNewton(t *testing.T) {
	ctx := context.Background()
	nan := math.NaN()
	for _, arr := range []site.Arrangement{site.NoHeaderLoss, site.DirectReturn} {
		t.Run(arr.String(), func(t *testing.T) {
			s := newPlantSite(t, plantSpec{branches: 3, arrangement: arr, seed: 41})
			for i, b := range s.Branches {
				read(s, "as-found", b.ID, site.Flow, "clamp-on", nan)
				if i == 1 {
					read(s, "as-found", b.ID, site.BranchDiff, "manometer", nan)
				}
			}
			read(s, "as-found", site.AtPump, site.PumpDiff, "manometer", nan)
			read(s, "as-found", site.AtPump, site.TotalFlow, "clamp-on", nan)
			m := mustModel(t, s)
			tr := newTruth(m)
			tr.p.Resistance = []float64{1.5, 0.8, 1.1}
			tr.p.Header, tr.p.PumpHead = 1.2, 0.95
			simulate(t, m, tr, rand.New(rand.NewPCG(41, 2)), 1)
			// The Gauss-Newton reference weighs every reading by its own sd.
			cal, err := Fit(ctx, m, &FitOptions{OutlierZ: -1, FaultShare: -1, HeaderModel: -1})
			if err != nil {
				t.Fatal(err)
			}
			// The oracle's parameters: ln R per branch, [ln header], ln pump.
			sigmas := []float64{math.Ln2, math.Ln2, math.Ln2}
			if arr != site.NoHeaderLoss {
				sigmas = append(sigmas, math.Ln2)
			}
			sigmas = append(sigmas, 0.1)
			n := len(sigmas)
			if len(cal.Parameters) != n {
				t.Fatalf("fit has %d parameters, oracle %d", len(cal.Parameters), n)
			}
			resid := func(x []float64) []float64 {
				p := m.Design()
				for i := range 3 {
					p.Resistance[i] = math.Exp(x[i])
				}
				if arr != site.NoHeaderLoss {
					p.Header = math.Exp(x[3])
				}
				p.PumpHead = math.Exp(x[n-1])
				sol, err := m.Solve(ctx, p, m.States[0])
				if err != nil {
					t.Fatal(err)
				}
				var r []float64
				for _, rd := range s.Readings {
					v, err := sol.Predict(&rd)
					if err != nil {
						t.Fatal(err)
					}
					r = append(r, (v-rd.Value)/rd.Sigma)
				}
				return r
			}
			x := make([]float64, n)
			var jd *mat.Dense
			mo := len(s.Readings)
			for range 50 {
				r := resid(x)
				jd = mat.NewDense(mo, n, nil)
				const h = 1e-6
				for j := range n {
					xp := append([]float64(nil), x...)
					xp[j] += h
					rp := resid(xp)
					xp[j] -= 2 * h
					rm := resid(xp)
					for i := range mo {
						jd.Set(i, j, (rp[i]-rm[i])/(2*h))
					}
				}
				// Augmented system [J; P^½] dx = -[r; P^½ x].
				a := mat.NewDense(mo+n, n, nil)
				b := mat.NewVecDense(mo+n, nil)
				for i := range mo {
					for j := range n {
						a.Set(i, j, jd.At(i, j))
					}
					b.SetVec(i, -r[i])
				}
				for j := range n {
					a.Set(mo+j, j, 1/sigmas[j])
					b.SetVec(mo+j, -x[j]/sigmas[j])
				}
				var ata mat.Dense
				ata.Mul(a.T(), a)
				var atb mat.VecDense
				atb.MulVec(a.T(), b)
				var dx mat.VecDense
				if err := dx.SolveVec(&ata, &atb); err != nil {
					t.Fatal(err)
				}
				var step float64
				for j := range n {
					x[j] += dx.AtVec(j)
					step = max(step, math.Abs(dx.AtVec(j)))
				}
				if step < 1e-12 {
					break
				}
			}
			c := cal.Result.CovScale
			info := mat.NewDense(n, n, nil)
			info.Mul(jd.T(), jd)
			info.Scale(1/c, info)
			for j := range n {
				info.Set(j, j, info.At(j, j)+1/(sigmas[j]*sigmas[j]))
			}
			var cov mat.Dense
			if err := cov.Inverse(info); err != nil {
				t.Fatal(err)
			}
			for j := range n {
				if d := math.Abs(cal.Result.X[j] - x[j]); d > 1e-6 {
					t.Errorf("%v %d: fit %.9f, Gauss-Newton %.9f", cal.Parameters[j].Kind, cal.Parameters[j].Branch, cal.Result.X[j], x[j])
				}
				sd := math.Sqrt(cov.At(j, j))
				if e := math.Abs(cal.Result.StdErr[j]/sd - 1); e > 1e-4 {
					t.Errorf("%v %d: sd %.6g, Gauss-Newton %.6g", cal.Parameters[j].Kind, cal.Parameters[j].Branch, cal.Result.StdErr[j], sd)
				}
			}
			t.Logf("x %v, chi-square factor %.3g", fmt.Sprintf("%.5f", cal.Result.X), c)
		})
	}
}
