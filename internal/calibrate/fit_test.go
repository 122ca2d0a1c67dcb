package calibrate

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/mat"

	"flowset/internal/lsq"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// richSurvey reads every quantity in two states; valve b00 is moved from its
// as-found setting to 3.5 turns in the second state and b02 to 1.5 turns.
func richSurvey(s *site.Site) {
	nan := math.NaN()
	for _, st := range []string{"as-found", "after"} {
		set := func(id string) float64 {
			if st == "after" {
				switch id {
				case "b00":
					return 3.5
				case "b02":
					return 1.5
				}
			}
			return nan
		}
		for i, b := range s.Branches {
			if b.Valve == "" {
				read(s, st, b.ID, site.BranchDiff, "manometer", nan)
				continue
			}
			read(s, st, b.ID, site.Flow, "clamp-on", set(b.ID))
			switch i % 3 {
			case 0:
				read(s, st, b.ID, site.ValveDiff, "manometer", set(b.ID))
			case 1:
				read(s, st, b.ID, site.BranchDiff, "manometer", set(b.ID))
			default:
				read(s, st, b.ID, site.Flow, "valve-meter", set(b.ID))
			}
		}
		read(s, st, site.AtHeader, site.HeaderDiff, "manometer", nan)
		read(s, st, site.AtPump, site.PumpDiff, "manometer", nan)
		read(s, st, site.AtPump, site.TotalFlow, "clamp-on", nan)
		for i := range s.Readings {
			// A three-port terminal read with its flow through the bypass
			// in the second state.
			if r := &s.Readings[i]; st == "after" && r.State == st && s.Branch(r.Where) != nil && s.Branch(r.Where).BypassValve != "" {
				r.Bypass = true
			}
		}
		if ids := s.Pumps(); len(ids) > 1 {
			// Several pumps read one by one: P1's flow and P2's
			// differential (its own head in series).
			read(s, st, ids[0], site.TotalFlow, "clamp-on", nan)
			read(s, st, ids[1], site.PumpDiff, "manometer", nan)
		}
	}
}

func richCases() []struct {
	name string
	spec plantSpec
} {
	return []struct {
		name string
		spec plantSpec
	}{
		{"direct return with riser", plantSpec{branches: 5, arrangement: site.DirectReturn, riser: true, seed: 1}},
		{"reverse return", plantSpec{branches: 4, arrangement: site.ReverseReturn, seed: 2}},
		{"no header loss", plantSpec{branches: 4, arrangement: site.NoHeaderLoss, seed: 3}},
		{"constant differential", plantSpec{branches: 4, arrangement: site.DirectReturn, constDiff: true, seed: 4}},
		{"two pumps in parallel, read one by one", plantSpec{branches: 4, arrangement: site.DirectReturn, pumps: "parallel", seed: 5}},
		{"two pumps in series, read one by one", plantSpec{branches: 4, arrangement: site.ReverseReturn, pumps: "series", seed: 6}},
		{"three-port terminal read in both positions", plantSpec{branches: 4, arrangement: site.DirectReturn, bypass: true, seed: 7}},
	}
}

// TestFitPredictions checks the fit's own predictions against the plant
// package's (plant.Solved.Predict) at an arbitrary point, reading by
// reading, valve-meter flows included as the meter would show them.
func TestFitPredictions(t *testing.T) {
	ctx := context.Background()
	for _, c := range richCases() {
		t.Run(c.name, func(t *testing.T) {
			s := newPlantSite(t, c.spec)
			richSurvey(s)
			m := mustModel(t, s)
			tr := newTruth(m)
			rng := rand.New(rand.NewPCG(9, 9))
			for i := range tr.p.Resistance {
				tr.p.Resistance[i] = math.Exp(0.4 * rng.NormFloat64())
				tr.p.KvScale[i] = math.Exp(0.1 * rng.NormFloat64())
			}
			tr.p.Header, tr.p.PumpHead = 1.3, 0.95
			simulate(t, m, tr, nil, 1)
			su, err := newSetup(m, mustOptions(t, nil))
			if err != nil {
				t.Fatal(err)
			}
			hyp := onTable(m)
			for i, h := range hyp {
				su.kvSep[i] = h == FollowsTable // every valve's Kv scale is a parameter
			}
			p, err := su.newProblem(ctx, hyp, su.allObs())
			if err != nil {
				t.Fatal(err)
			}
			x := make([]float64, len(p.params))
			for j, par := range p.params {
				switch par.Kind {
				case ResistanceParam:
					x[j] = math.Log(tr.p.Resistance[par.Branch])
				case KvParam:
					x[j] = math.Log(tr.p.KvScale[par.Branch])
				case HeaderParam:
					x[j] = math.Log(tr.p.Header)
				case PumpParam:
					x[j] = math.Log(tr.p.PumpHead)
				}
			}
			r := make([]float64, len(p.obs))
			if err := p.Residuals(x, r, nil); err != nil {
				t.Fatal(err)
			}
			// At the truth every simulated reading is matched exactly.
			for oi, v := range r {
				if math.Abs(v) > 1e-7 {
					o := p.obs[oi]
					t.Errorf("reading %d (%v at %q, state %d): normalised residual %g at the truth, want 0", o.reading, s.Readings[o.reading].What, s.Readings[o.reading].Where, o.state, v)
				}
			}
		})
	}
}

func mustOptions(tb testing.TB, o *FitOptions) FitOptions {
	tb.Helper()
	out, err := o.withDefaults()
	if err != nil {
		tb.Fatal(err)
	}
	return out
}

// richAtDesign is spec's plant surveyed richly (richSurvey) and read on its
// design, the fit's setup on it, and every valve taken on its table.
func richAtDesign(t *testing.T, spec plantSpec) (*site.Site, *setup, []ValveHypothesis) {
	t.Helper()
	s := newPlantSite(t, spec)
	richSurvey(s)
	m := mustModel(t, s)
	simulate(t, m, newTruth(m), nil, 1)
	su, err := newSetup(m, mustOptions(t, nil))
	if err != nil {
		t.Fatal(err)
	}
	return s, su, onTable(m)
}

// onTable takes every valve of m on its table.
func onTable(m *plant.Model) []ValveHypothesis {
	hyp := make([]ValveHypothesis, len(m.Branches))
	for i, b := range m.Branches {
		if b.Valve != nil {
			hyp[i] = FollowsTable
		}
	}
	return hyp
}

// TestFitJacobian checks the implicit-function Jacobian, forward and
// adjoint, and the matrix-free products against central finite
// differences of the residuals (the test oracle), with a seized valve, a
// mis-set valve, the header and the pump among the parameters.
func TestFitJacobian(t *testing.T) {
	ctx := context.Background()
	for _, c := range richCases() {
		t.Run(c.name, func(t *testing.T) {
			s, su, hyp := richAtDesign(t, c.spec)
			hyp[0], hyp[2] = HoldsOneKv, SetElsewhere
			p, err := su.newProblem(ctx, hyp, su.allObs())
			if err != nil {
				t.Fatal(err)
			}
			n, mo := p.Dims()
			rng := rand.New(rand.NewPCG(5, 5))
			x := make([]float64, n)
			for j := range x {
				x[j] = 0.2 * rng.NormFloat64()
			}
			jac := mat.NewDense(mo, n, nil)
			r := make([]float64, mo)
			if err := p.Residuals(x, r, jac); err != nil {
				t.Fatal(err)
			}
			// Finite differences, central, step 1e-5 in the log-multiplier.
			const h = 1e-5
			fd := mat.NewDense(mo, n, nil)
			rp, rm := make([]float64, mo), make([]float64, mo)
			xp := make([]float64, n)
			for j := range n {
				copy(xp, x)
				xp[j] = x[j] + h
				if err := p.Residuals(xp, rp, nil); err != nil {
					t.Fatal(err)
				}
				xp[j] = x[j] - h
				if err := p.Residuals(xp, rm, nil); err != nil {
					t.Fatal(err)
				}
				for i := range mo {
					fd.Set(i, j, (rp[i]-rm[i])/(2*h))
				}
			}
			// The network converges to a relative 1e-10, so the differences
			// carry about 1e-10·|r|/h of noise: compare against the row's
			// scale.
			for i := range mo {
				scale := mat.Norm(jac.RowView(i), math.Inf(1)) + 1e-3
				for j := range n {
					if d := math.Abs(jac.At(i, j) - fd.At(i, j)); d > 2e-5*scale {
						o := p.obs[i]
						t.Errorf("J[%d,%d] (%v at %q; %v of branch %d) = %.8g, finite difference %.8g", i, j, o.what,
							s.Readings[o.reading].Where, p.params[j].Kind, p.params[j].Branch, jac.At(i, j), fd.At(i, j))
					}
				}
			}
			// The forward and adjoint paths agree to rounding.
			if err := p.Residuals(x, r, jac); err != nil {
				t.Fatal(err)
			}
			alt := mat.NewDense(mo, n, nil)
			forceOtherPath(t, p, x, alt)
			if d := maxAbsDiff(jac, alt); d > 1e-9*mat.Norm(jac, math.Inf(1)) {
				t.Errorf("forward and adjoint Jacobians differ by %g", d)
			}
			// Matrix-free products equal J v and Jᵀ w.
			if err := p.Residuals(x, r, nil); err != nil {
				t.Fatal(err)
			}
			op := opProblem{p}
			v, w := make([]float64, n), make([]float64, mo)
			for j := range v {
				v[j] = rng.NormFloat64()
			}
			for i := range w {
				w[i] = rng.NormFloat64()
			}
			jv, jtw := make([]float64, mo), make([]float64, n)
			op.MulVec(jv, v)
			op.MulTransVec(jtw, w)
			var want mat.VecDense
			want.MulVec(jac, mat.NewVecDense(n, v))
			if d := maxVecDiff(jv, want.RawVector().Data); d > 1e-9*mat.Norm(&want, math.Inf(1)) {
				t.Errorf("MulVec differs from J v by %g", d)
			}
			var wantT mat.VecDense
			wantT.MulVec(jac.T(), mat.NewVecDense(mo, w))
			if d := maxVecDiff(jtw, wantT.RawVector().Data); d > 1e-9*mat.Norm(&wantT, math.Inf(1)) {
				t.Errorf("MulTransVec differs from Jᵀ w by %g", d)
			}
			// The batched products (MulVecs, MulTransVecs) are each
			// vector's own to the bit, for batches of 1 to 6 (the network
			// solves four at a time and the rest).
			for nb := 1; nb <= 6; nb++ {
				vs, ws := make([][]float64, nb), make([][]float64, nb)
				jvs, jtws := make([][]float64, nb), make([][]float64, nb)
				for k := range nb {
					vs[k], ws[k] = make([]float64, n), make([]float64, mo)
					for j := range vs[k] {
						vs[k][j] = rng.NormFloat64()
					}
					for i := range ws[k] {
						ws[k][i] = rng.NormFloat64()
					}
					jvs[k], jtws[k] = make([]float64, mo), make([]float64, n)
				}
				op.MulVecs(jvs, vs)
				op.MulTransVecs(jtws, ws)
				for k := range nb {
					op.MulVec(jv, vs[k])
					op.MulTransVec(jtw, ws[k])
					for i := range jv {
						if math.Float64bits(jv[i]) != math.Float64bits(jvs[k][i]) {
							t.Fatalf("batch of %d, vector %d: (J v)[%d] = %v batched, %v alone", nb, k, i, jvs[k][i], jv[i])
						}
					}
					for j := range jtw {
						if math.Float64bits(jtw[j]) != math.Float64bits(jtws[k][j]) {
							t.Fatalf("batch of %d, vector %d: (Jᵀ w)[%d] = %v batched, %v alone", nb, k, j, jtws[k][j], jtw[j])
						}
					}
				}
			}
		})
	}
}

// forceOtherPath fills jac by the adjoint path when the problem would take
// the forward one, and the other way round, by padding or trimming the
// comparison: it evaluates each state with the other method.
func forceOtherPath(t *testing.T, p *problem, x []float64, jac *mat.Dense) {
	t.Helper()
	r := make([]float64, len(p.obs))
	if err := p.Residuals(x, r, nil); err != nil {
		t.Fatal(err)
	}
	for _, sn := range p.states {
		if len(sn.obs) == 0 {
			continue
		}
		var err error
		if len(p.params) <= len(sn.obs) {
			err = p.jacobianAdjoint(sn, jac)
		} else {
			err = p.jacobianForward(sn, jac)
		}
		if err != nil {
			t.Fatal(err)
		}
		p.jacobianDirect(sn, jac)
	}
}

func maxAbsDiff(a, b *mat.Dense) float64 {
	var d mat.Dense
	d.Sub(a, b)
	return mat.Norm(&d, math.Inf(1))
}

func maxVecDiff(a, b []float64) float64 {
	var d float64
	for i := range a {
		d = max(d, math.Abs(a[i]-b[i]))
	}
	return d
}

// TestFitNoiseFree fits noise-free simulated surveys of plants whose
// multipliers are all away from design, without priors, and wants them
// back to 1e-6 (closed-form truth: the simulated plant itself).
func TestFitNoiseFree(t *testing.T) {
	noPrior := &FitOptions{PriorResistance: math.Inf(1), PriorKv: math.Inf(1), PriorHeader: math.Inf(1), PriorPump: math.Inf(1)}
	for _, c := range richCases() {
		t.Run(c.name, func(t *testing.T) {
			s := newPlantSite(t, c.spec)
			richSurvey(s)
			m := mustModel(t, s)
			tr := richTruth(t, m, c.spec.seed) // b00 has a valve differential and a flow
			cal := mustFit(t, m, noPrior)
			check := func(what string, got, want float64) { checkRel(t, what, got, want, 1e-6) }
			for i, b := range cal.Branches {
				if b.Fitted {
					check("resistance ratio of "+b.ID, b.Ratio, tr.p.Resistance[i])
				}
				if b.KvFitted {
					check("kv scale of "+b.ID, b.KvScale, tr.p.KvScale[i])
				}
			}
			if !cal.Branches[0].KvFitted {
				t.Errorf("b00's kv scale not fitted although it has a flow and a valve differential in one state")
			}
			if cal.Header.Fitted {
				check("header", cal.Header.Ratio, tr.p.Header)
			} else if c.spec.arrangement != site.NoHeaderLoss {
				t.Errorf("header multiplier not fitted")
			}
			if cal.Pump.Fitted {
				check("pump head", cal.Pump.Ratio, tr.p.PumpHead)
			} else if !c.spec.constDiff {
				t.Errorf("pump head multiplier not fitted")
			}
			if cal.ChiSquare > 1e-10 {
				t.Errorf("chi-square %g of a noise-free fit, want 0", cal.ChiSquare)
			}
			for _, rf := range cal.Readings {
				if math.Abs(rf.Residual) > 1e-6*math.Abs(rf.Value) {
					t.Errorf("%v: residual %g", rf, rf.Residual)
				}
			}
		})
	}
}

// TestFitErrors checks the sentinel causes of unusable input.
func TestFitErrors(t *testing.T) {
	ctx := context.Background()
	base := func() *site.Site {
		s := newPlantSite(t, plantSpec{branches: 3, arrangement: site.DirectReturn, seed: 1})
		flowSurvey(s, "as-found")
		return s
	}
	cases := []struct {
		name  string
		edit  func(s *site.Site)
		opt   *FitOptions
		cause error
	}{
		{"negative prior", nil, &FitOptions{PriorKv: -1}, lsq.ErrSettings},
		{"NaN meter density", nil, &FitOptions{MeterDensity: math.NaN()}, lsq.ErrSettings},
		{"NaN header model", nil, &FitOptions{HeaderModel: math.NaN()}, lsq.ErrSettings},
		{"negative valve tests", nil, &FitOptions{MaxValveTests: -1}, lsq.ErrSettings},
		{"no readings", func(s *site.Site) { s.Readings = nil }, nil, ErrSurvey},
		{"zero sigma", func(s *site.Site) { s.Readings[0].Sigma = 0 }, nil, ErrSurvey},
		{"NaN value", func(s *site.Site) { s.Readings[0].Value = math.NaN() }, nil, ErrSurvey},
		{"valve meter without valve", func(s *site.Site) {
			s.Branches[0].Valve, s.Branches[0].Setting = "", math.NaN()
			s.Readings[0].Instrument = "valve-meter"
		}, nil, ErrSurvey},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			s := base()
			m := mustModel(t, s)
			simulate(t, m, newTruth(m), nil, 1)
			if c.edit != nil {
				c.edit(s)
				m = mustModel(t, s)
			}
			_, err := Fit(ctx, m, c.opt)
			if !errors.Is(err, c.cause) {
				t.Errorf("Fit: error %v, want %v", err, c.cause)
			}
		})
	}
}

// TestFitCancelled checks that a cancelled context stops the fit with the
// context's error.
func TestFitCancelled(t *testing.T) {
	s := newPlantSite(t, plantSpec{branches: 4, arrangement: site.DirectReturn, seed: 1})
	flowSurvey(s, "as-found")
	m := mustModel(t, s)
	simulate(t, m, newTruth(m), nil, 1)
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := Fit(ctx, m, nil); !errors.Is(err, context.Canceled) {
		t.Errorf("Fit with a cancelled context: error %v, want %v", err, context.Canceled)
	}
}

// checkRel reports got unless it is within a relative tol of want.
func checkRel(tb testing.TB, what string, got, want, tol float64) {
	tb.Helper()
	if math.Abs(got/want-1) > tol {
		tb.Errorf("%s = %.9g, want %.9g", what, got, want)
	}
}

// richTruth draws a true plant far from design for the noise-free tests
// (resistances spread by a factor e^0.5 per sd, b00's valve 10 % below its
// table, header ×1.4, pump ×0.92) and simulates m's readings on it without
// noise.
func richTruth(tb testing.TB, m *plant.Model, seed uint64) *truth {
	tb.Helper()
	tr := newTruth(m)
	rng := rand.New(rand.NewPCG(seed, 77))
	for i := range tr.p.Resistance {
		tr.p.Resistance[i] = math.Exp(0.5 * rng.NormFloat64())
	}
	tr.p.KvScale[0] = 0.9
	tr.p.Header, tr.p.PumpHead = 1.4, 0.92
	simulate(tb, m, tr, nil, 1)
	return tr
}

// mustFit fits m with opt and reports a fit that did not converge.
func mustFit(tb testing.TB, m *plant.Model, opt *FitOptions) *Calibration {
	tb.Helper()
	cal, err := Fit(context.Background(), m, opt)
	if err != nil {
		tb.Fatal(err)
	}
	if !cal.Converged {
		tb.Errorf("Fit status %v, want convergence", cal.Status)
	}
	return cal
}

// TestFailedEvaluationKeepsProducts: an evaluation that fails part way (here
// its context cancelled) leaves the latest good one current, its residuals
// and its matrix-free products (which the engine reads after a rejected
// trial without evaluating again) as they were. Left half done, the
// products read a state solved at the point before but not linearised
// (seen as a crash on an independent 200-branch plant).
func TestFailedEvaluationKeepsProducts(t *testing.T) {
	_, su, hyp := richAtDesign(t, richCases()[0].spec)
	ctx, cancel := context.WithCancel(context.Background())
	p, err := su.newProblem(ctx, hyp, su.allObs())
	if err != nil {
		t.Fatal(err)
	}
	n, mo := p.Dims()
	x := make([]float64, n)
	for j := range x {
		x[j] = 0.05 * float64(j%3)
	}
	r := make([]float64, mo)
	if err := p.Residuals(x, r, nil); err != nil {
		t.Fatal(err)
	}
	w := make([]float64, mo)
	for i := range w {
		w[i] = 1 + float64(i%5)
	}
	op := opProblem{p}
	want := make([]float64, n)
	op.MulTransVec(want, w)
	cancel()
	x2 := slices.Clone(x)
	x2[0] += 0.3
	if err := p.Residuals(x2, make([]float64, mo), nil); err == nil {
		t.Fatal("construction: the evaluation with its context cancelled did not fail")
	}
	got := make([]float64, n)
	op.MulTransVec(got, w)
	if d := maxVecDiff(got, want); d != 0 {
		t.Errorf("after a failed evaluation Jᵀ w differs from the good one's by %g", d)
	}
	r2 := make([]float64, mo)
	if err := p.Residuals(x, r2, nil); err != nil {
		t.Fatalf("back at the good point: %v", err)
	}
	if d := maxVecDiff(r2, r); d != 0 {
		t.Errorf("back at the good point the residuals differ by %g", d)
	}
}
