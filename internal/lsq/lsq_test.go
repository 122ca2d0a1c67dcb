package lsq_test

import (
	"context"
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"
	"testing"

	"github.com/google/go-cmp/cmp"
	"gonum.org/v1/gonum/mat"

	"flowset/internal/lsq"
	"flowset/internal/lsq/lsqtest"
)

func relErr(got, want float64) float64 { return math.Abs(got-want) / math.Abs(want) }

// TestNIST checks estimates, standard deviations and the residual sum of
// squares against the certified values of NIST StRD nonlinear regression
// datasets (https://www.itl.nist.gov/div898/strd/nls/nls_main.shtml), from
// both of NIST's starting points. NIST's certified standard deviations are
// sqrt(diag((JᵀJ)⁻¹)·RSS/DOF), hence ScaleAlways and no prior.
func TestNIST(t *testing.T) {
	const (
		paramTol = 1e-6 // ~6 significant digits
		sdTol    = 1e-4 // ~4 significant digits
		rssTol   = 1e-8
	)
	for _, c := range []*lsqtest.Curve{lsqtest.Misra1a(), lsqtest.Thurber(), lsqtest.MGH09()} {
		for k, start := range c.Starts {
			t.Run(fmt.Sprintf("%s/%s/start%d", c.Level, c.Name, k+1), func(t *testing.T) {
				res, err := lsq.Solve(context.Background(), c, start, nil,
					&lsq.Settings{Scale: lsq.ScaleAlways, OutlierZ: -1, MaxIter: 1000})
				if err != nil {
					t.Fatalf("Solve(%s from %v): %v", c.Name, start, err)
				}
				if !res.Status.OK() {
					t.Errorf("Solve(%s from %v) status %v, want a convergence", c.Name, start, res.Status)
				}
				for j := range c.Params {
					if e := relErr(res.X[j], c.Params[j]); e > paramTol {
						t.Errorf("%s b%d = %.10e, certified %.10e (rel err %.1e)", c.Name, j+1, res.X[j], c.Params[j], e)
					}
					if e := relErr(res.StdErr[j], c.StdDev[j]); e > sdTol {
						t.Errorf("%s sd(b%d) = %.10e, certified %.10e (rel err %.1e)", c.Name, j+1, res.StdErr[j], c.StdDev[j], e)
					}
				}
				if e := relErr(res.ChiSquare, c.RSS); e > rssTol {
					t.Errorf("%s RSS = %.10e, certified %.10e", c.Name, res.ChiSquare, c.RSS)
				}
				if e := relErr(math.Sqrt(res.ReducedChiSquare), c.ResidualSD); e > rssTol {
					t.Errorf("%s residual sd = %.10e, certified %.10e", c.Name, math.Sqrt(res.ReducedChiSquare), c.ResidualSD)
				}
				if res.DOF != c.DOF {
					t.Errorf("%s DOF = %d, certified %d", c.Name, res.DOF, c.DOF)
				}
				t.Logf("%s start %d: %v after %d steps, %d evaluations", c.Name, k+1, res.Status, res.Iterations, res.Evaluations)
			})
		}
	}
}

// fdGaussNewton is the oracle: an undamped Gauss-Newton iteration with a
// central-difference Jacobian and its own 2×2 normal-equation solve, written
// independently of the engine. It returns the estimate and the unscaled
// standard errors sqrt(diag((JᵀJ)⁻¹)).
func fdGaussNewton(p *lsqtest.PowerLaw, x []float64) (xhat, se []float64) {
	_, m := p.Dims()
	x = slices.Clone(x)
	res := func(x []float64) []float64 {
		r := make([]float64, m)
		for i, q := range p.Q {
			r[i] = (math.Exp(x[0])*math.Pow(q, x[1]) - p.Y[i]) / p.Sigma[i]
		}
		return r
	}
	var a [2][2]float64
	for range 50 {
		r := res(x)
		var jac [2][]float64
		for k := range 2 {
			const h = 1e-6
			xp, xm := slices.Clone(x), slices.Clone(x)
			xp[k] += h
			xm[k] -= h
			rp, rm := res(xp), res(xm)
			jac[k] = make([]float64, m)
			for i := range m {
				jac[k][i] = (rp[i] - rm[i]) / (2 * h)
			}
		}
		var g [2]float64
		a = [2][2]float64{}
		for i := range m {
			for k := range 2 {
				g[k] += jac[k][i] * r[i]
				for l := range 2 {
					a[k][l] += jac[k][i] * jac[l][i]
				}
			}
		}
		det := a[0][0]*a[1][1] - a[0][1]*a[1][0]
		h0 := -(a[1][1]*g[0] - a[0][1]*g[1]) / det
		h1 := -(-a[1][0]*g[0] + a[0][0]*g[1]) / det
		x[0] += h0
		x[1] += h1
		if math.Abs(h0)+math.Abs(h1) < 1e-13 {
			break
		}
	}
	det := a[0][0]*a[1][1] - a[0][1]*a[1][0]
	return x, []float64{math.Sqrt(a[1][1] / det), math.Sqrt(a[0][0] / det)}
}

// TestFiniteDifferenceOracle compares Solve with fdGaussNewton on small
// power-law fits (the oracle is independent code, not an external source).
func TestFiniteDifferenceOracle(t *testing.T) {
	for _, tc := range []struct {
		name   string
		k, e   float64
		m      int
		rel    float64
		seed   uint64
		start  []float64
		scaled bool
	}{
		{name: "valve-like e=2", k: 3.5, e: 2, m: 12, rel: 0.02, seed: 11, start: []float64{0, 1}},
		{name: "pipe-like e=1.85", k: 0.8, e: 1.85, m: 30, rel: 0.05, seed: 12, start: []float64{1, 1.5}},
		{name: "laminar e=1", k: 10, e: 1, m: 6, rel: 0.01, seed: 13, start: []float64{0, 0}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			p := lsqtest.NewPowerLaw(tc.k, tc.e, tc.m, tc.rel, tc.seed)
			res, err := lsq.Solve(context.Background(), p, tc.start, nil,
				&lsq.Settings{Scale: lsq.ScaleNever, OutlierZ: -1})
			if err != nil {
				t.Fatalf("Solve: %v", err)
			}
			// The oracle starts near the answer: undamped Gauss-Newton has no
			// globalisation, and only the optimum is being compared.
			xo, seo := fdGaussNewton(p, []float64{math.Log(tc.k), tc.e})
			for j := range 2 {
				if e := relErr(res.X[j], xo[j]); e > 1e-8 {
					t.Errorf("x[%d] = %.12g, oracle %.12g", j, res.X[j], xo[j])
				}
				// Central differences with h = 1e-6 carry ~1e-9 relative error.
				if e := relErr(res.StdErr[j], seo[j]); e > 1e-6 {
					t.Errorf("sd[%d] = %.12g, oracle %.12g", j, res.StdErr[j], seo[j])
				}
			}
		})
	}
}

// withIdle adds parameters that no observation depends on.
type withIdle struct {
	p    lsq.Problem
	idle int
}

func (w withIdle) Dims() (int, int) {
	n, m := w.p.Dims()
	return n + w.idle, m
}

func (w withIdle) Residuals(x, r []float64, jac *mat.Dense) error {
	n, m := w.p.Dims()
	var sub *mat.Dense
	if jac != nil {
		jac.Zero()
		sub = jac.Slice(0, m, 0, n).(*mat.Dense)
	}
	return w.p.Residuals(x[:n], r, sub)
}

// TestPrior checks the closed-form behaviour of a Gaussian prior on a
// parameter the data do not touch: the posterior is the prior (mean and sd),
// also when the fit's covariance is inflated for model error.
func TestPrior(t *testing.T) {
	for _, tc := range []struct {
		name     string
		rel      float64 // stated relative uncertainty
		noise    float64 // actual relative noise
		wantScal bool
	}{
		{name: "overstated uncertainty", rel: 0.04, noise: 0.02},
		{name: "understated uncertainty", rel: 0.005, noise: 0.02, wantScal: true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			p := lsqtest.NewPowerLaw(2, 1.9, 25, tc.noise, 5)
			for i := range p.Sigma {
				p.Sigma[i] *= tc.rel / tc.noise
			}
			prob := withIdle{p: p, idle: 1}
			prior := &lsq.Prior{Mean: []float64{0, 2, 0.3}, Sigma: []float64{5, 5, 0.25}}
			res, err := lsq.Solve(context.Background(), prob, []float64{0, 1, 0}, prior, nil)
			if err != nil {
				t.Fatalf("Solve: %v", err)
			}
			if got, want := res.X[2], 0.3; math.Abs(got-want) > 1e-12 {
				t.Errorf("idle parameter estimate %v, want prior mean %v", got, want)
			}
			if got, want := res.StdErr[2], 0.25; relErr(got, want) > 1e-9 {
				t.Errorf("idle parameter sd %v, want prior sigma %v", got, want)
			}
			if diff := cmp.Diff([]bool{true, true, false}, res.Determined); diff != "" {
				t.Errorf("Determined mismatch (-want +got):\n%s", diff)
			}
			if (res.CovScale > 1) != tc.wantScal {
				t.Errorf("CovScale = %v (reduced chi-square %v), want scaling %v", res.CovScale, res.ReducedChiSquare, tc.wantScal)
			}
			// Two data-determined parameters and a weak prior: about two
			// effective parameters, and DOF = 25 - 2.
			if res.DOF != 23 || math.Abs(res.EffectiveParams-2) > 0.01 {
				t.Errorf("DOF %d, effective parameters %v; want 23 and about 2", res.DOF, res.EffectiveParams)
			}
		})
	}
}

// TestCoverage checks that the 95 % intervals cover the true parameters of a
// synthetic power law with seeded normal noise 95 % of the time. Over 1000
// seeds the binomial sd of the coverage is sqrt(0.95·0.05/1000) = 0.69 %, so
// the 93–97 % window is ±2.9 sd. ScaleAboveOne is conservative by
// construction (it never shrinks the covariance): under a correct model its
// coverage exceeds 95 % by roughly 1/√DOF of the excess, about 96 % at the
// DOF = 38 used here.
func TestCoverage(t *testing.T) {
	const seeds = 1000
	truth := []float64{math.Log(2.5), 1.85}
	for _, tc := range []struct {
		name  string
		scale lsq.Scaling
	}{
		{name: "scale above one (default)", scale: lsq.ScaleAboveOne},
		{name: "scale always, Student t", scale: lsq.ScaleAlways},
		{name: "known sigma, normal", scale: lsq.ScaleNever},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var cover [2]int
			for seed := uint64(1); seed <= seeds; seed++ {
				p := lsqtest.NewPowerLaw(2.5, 1.85, 40, 0.05, seed)
				res, err := lsq.Solve(context.Background(), p, []float64{0, 1}, nil,
					&lsq.Settings{Scale: tc.scale, OutlierZ: -1})
				if err != nil {
					t.Fatalf("seed %d: %v", seed, err)
				}
				for j := range 2 {
					if res.Lo95[j] <= truth[j] && truth[j] <= res.Hi95[j] {
						cover[j]++
					}
				}
			}
			for j := range 2 {
				f := float64(cover[j]) / seeds
				if f < 0.93 || f > 0.97 {
					t.Errorf("parameter %d: coverage %.3f outside [0.93, 0.97]", j, f)
				}
				t.Logf("parameter %d: coverage %.3f", j, f)
			}
		})
	}
}

// TestOutlier plants one gross outlier (a reading 25 sd high at the largest
// flow) and checks that the outlier test names it and that the fit without it
// recovers the truth, while the plain least-squares fit does not. "Recovers"
// means within 3 sd of the fit to the clean readings on every parameter: the
// plain fit's own intervals are widened by its chi-square and would hide the
// damage. Truth is synthetic and known.
func TestOutlier(t *testing.T) {
	truth := []float64{math.Log(4), 2}
	const bad = 19
	p := lsqtest.NewPowerLaw(4, 2, 20, 0.02, 7)
	clean, err := lsq.Solve(context.Background(), p, []float64{0, 1}, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	p.Y[bad] += 25 * p.Sigma[bad]

	recovered := func(res *lsq.Result) bool {
		for j := range truth {
			if math.Abs(res.X[j]-truth[j]) > 3*clean.StdErr[j] {
				return false
			}
		}
		return true
	}
	for _, tc := range []struct {
		name      string
		set       lsq.Settings
		outliers  []int
		recovered bool
	}{
		{name: "outlier test (default)", outliers: []int{bad}, recovered: true},
		{name: "plain least squares", set: lsq.Settings{OutlierZ: -1}, recovered: false},
		{name: "Huber IRLS without the test", set: lsq.Settings{OutlierZ: -1, Loss: lsq.Huber(0)}, recovered: true},
		{name: "Cauchy IRLS with the test", set: lsq.Settings{Loss: lsq.Cauchy(0)}, outliers: []int{bad}, recovered: true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			res, err := lsq.Solve(context.Background(), p, []float64{0, 1}, nil, &tc.set)
			if err != nil {
				t.Fatalf("Solve: %v", err)
			}
			if diff := cmp.Diff(tc.outliers, res.Outliers); diff != "" {
				t.Errorf("outliers mismatch (-want +got):\n%s", diff)
			}
			if got := recovered(res); got != tc.recovered {
				t.Errorf("recovered = %v, want %v (x %v, truth %v, clean-fit sd %v)", got, tc.recovered, res.X, truth, clean.StdErr)
			}
			if tc.outliers != nil && res.Weight[bad] != 0 {
				t.Errorf("weight of the outlier %v, want 0", res.Weight[bad])
			}
			t.Logf("x %.4f, truth %.4f, off by %.1f and %.1f clean-fit sd", res.X, truth,
				(res.X[0]-truth[0])/clean.StdErr[0], (res.X[1]-truth[1])/clean.StdErr[1])
		})
	}
}

// TestOutlierSparse plants one gross outlier in a 60-parameter sparse
// calibration-like problem, on both paths.
func TestOutlierSparse(t *testing.T) {
	for _, dense := range []bool{true, false} {
		t.Run(fmt.Sprintf("dense=%v", dense), func(t *testing.T) {
			p := lsqtest.NewSparse(60, 180, 3, 0.02, 3)
			const bad = 77
			p.Y[bad] += 30 * p.Sigma[bad]
			prior := flatPrior(60, 1)
			res, err := lsq.Solve(context.Background(), p, make([]float64, 60), prior, &lsq.Settings{Dense: dense})
			if err != nil {
				t.Fatalf("Solve: %v", err)
			}
			if diff := cmp.Diff([]int{bad}, res.Outliers); diff != "" {
				t.Errorf("outliers mismatch (-want +got):\n%s", diff)
			}
			if res.MatrixFree == dense {
				t.Errorf("MatrixFree = %v with Dense = %v", res.MatrixFree, dense)
			}
		})
	}
}

func flatPrior(n int, sigma float64) *lsq.Prior {
	pr := &lsq.Prior{Mean: make([]float64, n), Sigma: make([]float64, n)}
	for j := range pr.Sigma {
		pr.Sigma[j] = sigma
	}
	return pr
}

// maxRelDiff is max|a-b| / max|b|.
func maxRelDiff(a, b []float64) float64 {
	var worst, scale float64
	for i := range a {
		worst = max(worst, math.Abs(a[i]-b[i]))
		scale = max(scale, math.Abs(b[i]))
	}
	return worst / scale
}

// TestMatrixFreeAgreesWithDense checks that the CGLS step, the converged fit
// and the covariance of the matrix-free path agree with the Cholesky path on a
// mid-size random problem (fixed seed).
func TestMatrixFreeAgreesWithDense(t *testing.T) {
	const n = 300
	p := lsqtest.NewSparse(n, 2*n, 3, 0.03, 42)
	prior := flatPrior(n, 1)
	x0 := make([]float64, n)
	solve := func(dense bool, maxIter int) *lsq.Result {
		t.Helper()
		res, err := lsq.Solve(context.Background(), p, x0, prior,
			&lsq.Settings{Dense: dense, MaxIter: maxIter, CGTol: 1e-13, OutlierZ: -1})
		if err != nil {
			t.Fatalf("Solve(dense=%v, maxIter=%d): %v", dense, maxIter, err)
		}
		return res
	}
	// One step from x0 = 0: X is the step itself.
	d1, c1 := solve(true, 1), solve(false, 1)
	if e := maxRelDiff(c1.X, d1.X); e > 1e-8 {
		t.Errorf("first step: CGLS and Cholesky differ by %.2e relative to the step", e)
	}
	d, c := solve(true, 0), solve(false, 0)
	if !d.Status.OK() || !c.Status.OK() {
		t.Fatalf("status dense %v, matrix-free %v", d.Status, c.Status)
	}
	if e := maxRelDiff(c.X, d.X); e > 1e-8 {
		t.Errorf("optimum: matrix-free and dense differ by %.2e (relative)", e)
	}
	if e := maxRelDiff(c.StdErr, d.StdErr); e > 1e-8 {
		t.Errorf("sd: matrix-free (assembled J) and dense differ by %.2e (relative)", e)
	}
	t.Logf("dense: %d steps %d evaluations; matrix-free: %d steps %d evaluations", d.Iterations, d.Evaluations, c.Iterations, c.Evaluations)
}

// TestProbedVariance measures the matrix-free variance estimate (VarProbed)
// against the exact dense variances on a mid-size problem and bounds its
// error, also when the covariance is scaled for model error (understated σ,
// which exercises the second, warm-started round of probes). The figures are
// logged; the bounds are what was measured with some margin (no external
// source).
func TestProbedVariance(t *testing.T) {
	const n = 300
	x0 := make([]float64, n)
	prior := flatPrior(n, 1)
	for _, tc := range []struct {
		name              string
		sigmaFactor       float64
		probes            int
		medianTol, maxTol float64
	}{
		{name: "consistent", sigmaFactor: 1, probes: 16, medianTol: 0.2, maxTol: 1.3},
		{name: "consistent", sigmaFactor: 1, probes: 64, medianTol: 0.1, maxTol: 0.55},
		{name: "understated sigma", sigmaFactor: 0.5, probes: 64, medianTol: 0.1, maxTol: 0.55},
	} {
		t.Run(fmt.Sprintf("%s/probes=%d", tc.name, tc.probes), func(t *testing.T) {
			p := lsqtest.NewSparse(n, 2*n, 3, 0.03, 8)
			for i := range p.Sigma {
				p.Sigma[i] *= tc.sigmaFactor
			}
			exact, err := lsq.Solve(context.Background(), p, x0, prior, &lsq.Settings{Dense: true, OutlierZ: -1})
			if err != nil {
				t.Fatal(err)
			}
			res, err := lsq.Solve(context.Background(), p, x0, prior,
				&lsq.Settings{DenseCovMax: -1, Probes: tc.probes, OutlierZ: -1, Seed: 1})
			if err != nil {
				t.Fatal(err)
			}
			if res.VarMethod != lsq.VarProbed || res.Cov != nil {
				t.Fatalf("VarMethod %v, Cov nil %v; want probed and nil", res.VarMethod, res.Cov == nil)
			}
			if tc.sigmaFactor < 1 && !(res.CovScale > 2) {
				t.Errorf("CovScale %v, want the model-error scaling (about 4)", res.CovScale)
			}
			if relErr(res.CovScale, exact.CovScale) > 1e-3 {
				t.Errorf("CovScale %v, exact path %v", res.CovScale, exact.CovScale)
			}
			errs := make([]float64, n)
			var lower int
			for j := range n {
				errs[j] = relErr(res.Var[j], exact.Var[j])
				if res.Var[j] < exact.Var[j] {
					lower++
				}
			}
			sort.Float64s(errs)
			med, p90, worst := errs[n/2], errs[9*n/10], errs[n-1]
			t.Logf("%s, probes %d: variance relative error median %.3f, 90th pct %.3f, max %.3f; %d of %d below exact; effective params %.2f vs %.2f; scale %.3f",
				tc.name, tc.probes, med, p90, worst, lower, n, res.EffectiveParams, exact.EffectiveParams, res.CovScale)
			if med > tc.medianTol || worst > tc.maxTol {
				t.Errorf("probes %d: median %.3f (limit %v), max %.3f (limit %v)", tc.probes, med, tc.medianTol, worst, tc.maxTol)
			}
		})
	}
}

// failing evaluates to NaN or an error where told to.
type failing struct {
	p       lsq.Problem
	nanAt   func(x []float64) bool
	errAt   func(x []float64) bool
	errWith error
}

func (f failing) Dims() (int, int) { return f.p.Dims() }

func (f failing) Residuals(x, r []float64, jac *mat.Dense) error {
	if f.errAt != nil && f.errAt(x) {
		return fmt.Errorf("model: %w", f.errWith)
	}
	if err := f.p.Residuals(x, r, jac); err != nil {
		return err
	}
	if f.nanAt != nil && f.nanAt(x) {
		r[0] = math.NaN()
	}
	return nil
}

func TestErrors(t *testing.T) {
	pl := lsqtest.NewPowerLaw(2, 2, 8, 0.02, 1)
	errModel := errors.New("model broke")
	cancelled, cancel := context.WithCancel(context.Background())
	cancel()
	for _, tc := range []struct {
		name   string
		ctx    context.Context
		p      lsq.Problem
		x0     []float64
		prior  *lsq.Prior
		set    *lsq.Settings
		want   error
		result bool // a Result comes back with the error
	}{
		{name: "short start", p: pl, x0: []float64{0}, want: lsq.ErrDimension},
		{name: "NaN start", p: pl, x0: []float64{math.NaN(), 1}, want: lsq.ErrNonFinite},
		{name: "prior size", p: pl, x0: []float64{0, 1}, prior: &lsq.Prior{Mean: []float64{0}, Sigma: []float64{1}}, want: lsq.ErrDimension},
		{name: "zero prior sigma", p: pl, x0: []float64{0, 1}, prior: &lsq.Prior{Mean: []float64{0, 0}, Sigma: []float64{1, 0}}, want: lsq.ErrPrior},
		{name: "negative tolerance", p: pl, x0: []float64{0, 1}, set: &lsq.Settings{GradTol: -1}, want: lsq.ErrSettings},
		{name: "NaN loss constant", p: pl, x0: []float64{0, 1}, set: &lsq.Settings{Loss: lsq.Huber(math.NaN())}, want: lsq.ErrSettings},
		{name: "NaN residual at start", p: failing{p: pl, nanAt: func([]float64) bool { return true }}, x0: []float64{0, 1}, want: lsq.ErrNonFinite},
		{name: "domain error at start", p: failing{p: pl, errAt: func([]float64) bool { return true }, errWith: lsq.ErrDomain}, x0: []float64{0, 1}, want: lsq.ErrDomain},
		{name: "model error during the fit", p: failing{p: pl, errAt: func(x []float64) bool { return x[1] > 1.2 }, errWith: errModel}, x0: []float64{0, 1}, want: errModel, result: true},
		{name: "idle parameter without prior", p: withIdle{p: pl, idle: 1}, x0: []float64{0, 1, 0}, want: lsq.ErrSingular, result: true},
		{name: "cancelled", ctx: cancelled, p: pl, x0: []float64{0, 1}, want: context.Canceled, result: true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			ctx := tc.ctx
			if ctx == nil {
				ctx = context.Background()
			}
			res, err := lsq.Solve(ctx, tc.p, tc.x0, tc.prior, tc.set)
			if !errors.Is(err, tc.want) {
				t.Fatalf("Solve error %v, want %v", err, tc.want)
			}
			if (res != nil) != tc.result {
				t.Errorf("Result returned %v, want %v", res != nil, tc.result)
			}
			if res != nil && len(res.X) != len(tc.x0) {
				t.Errorf("partial result has %d parameters, want %d", len(res.X), len(tc.x0))
			}
		})
	}
}

// TestRejectedTrials checks that trial points where the model cannot be
// evaluated (ErrDomain, or NaN residuals) are treated as failed steps and the
// fit still reaches the optimum of the unconstrained problem.
func TestRejectedTrials(t *testing.T) {
	pl := lsqtest.NewPowerLaw(2, 2, 10, 0.02, 3)
	ref, err := lsq.Solve(context.Background(), pl, []float64{0, 1}, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	// A wall the first full Gauss-Newton step from the start would cross.
	wall := func(x []float64) bool { return x[1] > 2.3 || x[0] < -0.5 }
	for _, tc := range []struct {
		name string
		p    lsq.Problem
	}{
		{name: "domain error", p: failing{p: pl, errAt: wall, errWith: lsq.ErrDomain}},
		{name: "NaN residual", p: failing{p: pl, nanAt: wall}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			res, err := lsq.Solve(context.Background(), tc.p, []float64{0, 1}, nil, nil)
			if err != nil {
				t.Fatalf("Solve: %v", err)
			}
			if e := maxRelDiff(res.X, ref.X); e > 1e-8 || !res.Status.OK() {
				t.Errorf("x %v (%v), want %v", res.X, res.Status, ref.X)
			}
		})
	}
}

func TestMultiplier(t *testing.T) {
	// exp(±ln 2) = 2 and 1/2: the interval of a log-multiplier maps to an
	// asymmetric one around the multiplier (closed form).
	m, lo, hi := lsq.Multiplier(0, -math.Ln2, math.Ln2)
	if m != 1 || math.Abs(lo-0.5) > 1e-15 || math.Abs(hi-2) > 1e-15 {
		t.Errorf("Multiplier(0, -ln2, ln2) = %v %v %v, want 1 0.5 2", m, lo, hi)
	}
}

func TestStrings(t *testing.T) {
	for _, tc := range []struct {
		got, want string
	}{
		{lsq.Converged.String(), "converged"},
		{lsq.SmallStep.String(), "converged (small step)"},
		{lsq.MaxIterations.String(), "maximum iterations"},
		{lsq.Stalled.String(), "stalled"},
		{lsq.Cancelled.String(), "cancelled"},
		{lsq.Status(42).String(), "status(42)"},
		{lsq.Huber(0).String(), "huber(1.345)"},
		{lsq.Cauchy(1.5).String(), "cauchy(1.5)"},
		{lsq.Squared().String(), "squared"},
		{lsq.VarProbed.String(), "probed diagonal"},
	} {
		if tc.got != tc.want {
			t.Errorf("String() = %q, want %q", tc.got, tc.want)
		}
	}
}

// ExampleSolve fits a resistance law Δp = k·Q^e (parameters ln k and e) to
// twelve readings with 2 % uncertainty.
func ExampleSolve() {
	p := lsqtest.NewPowerLaw(3.2, 1.9, 12, 0.02, 1)
	res, err := lsq.Solve(context.Background(), p, []float64{0, 1}, nil, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	k, klo, khi := lsq.Multiplier(res.X[0], res.Lo95[0], res.Hi95[0])
	fmt.Printf("%v, outliers %v\n", res.Status.OK(), res.Outliers)
	fmt.Printf("k = %.2f (95 %%: %.2f to %.2f)\n", k, klo, khi)
	fmt.Printf("e = %.2f ± %.2f\n", res.X[1], res.Hi95[1]-res.X[1])
	// Output:
	// true, outliers []
	// k = 3.20 (95 %: 3.16 to 3.23)
	// e = 1.89 ± 0.02
}

// ExampleMultiplier turns a log-multiplier and its interval into a multiplier
// on design resistance.
func ExampleMultiplier() {
	m, lo, hi := lsq.Multiplier(0.2, 0.1, 0.3)
	fmt.Printf("%.3f (%.3f to %.3f)\n", m, lo, hi)
	// Output: 1.221 (1.105 to 1.350)
}

// BenchmarkSolve fits sparse calibration-like problems (2n readings, each
// touching 3 parameters, weak prior) through the matrix-free Operator path.
func BenchmarkSolve(b *testing.B) {
	for _, n := range []int{100, 1000, 10000} {
		p := lsqtest.NewSparse(n, 2*n, 3, 0.02, 1)
		prior := flatPrior(n, 1)
		x0 := make([]float64, n)
		b.Run(fmt.Sprintf("n=%d", n), func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				if _, err := lsq.Solve(context.Background(), p, x0, prior, nil); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// BenchmarkSolveDense is the same fit on the dense Cholesky path.
func BenchmarkSolveDense(b *testing.B) {
	for _, n := range []int{100, 1000} {
		p := lsqtest.NewSparse(n, 2*n, 3, 0.02, 1)
		prior := flatPrior(n, 1)
		x0 := make([]float64, n)
		b.Run(fmt.Sprintf("n=%d", n), func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				if _, err := lsq.Solve(context.Background(), p, x0, prior, &lsq.Settings{Dense: true}); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// TestOutlierRounds plants two gross outliers in a sparse problem and
// checks that the ways of removing them agree: one at a time, one per group
// in a round (Settings.OutlierGroups), and with the first given as already
// found (Settings.Exclude), on the exact and on the probed path (which
// tests after a removal with the last effective parameter count). All must
// remove the same two readings and reach the same estimate.
func TestOutlierRounds(t *testing.T) {
	const n, m, bad1, bad2 = 60, 180, 77, 140
	p := lsqtest.NewSparse(n, m, 3, 0.02, 3)
	p.Y[bad1] += 30 * p.Sigma[bad1]
	p.Y[bad2] -= 25 * p.Sigma[bad2]
	groups := make([]int, m)
	for i := range groups {
		groups[i] = i
	}
	for _, probed := range []bool{false, true} {
		covMax := 0
		if probed {
			covMax = -1
		}
		solve := func(s lsq.Settings) *lsq.Result {
			t.Helper()
			s.DenseCovMax, s.CGTol = covMax, 1e-12
			res, err := lsq.Solve(context.Background(), p, make([]float64, n), flatPrior(n, 1), &s)
			if err != nil {
				t.Fatalf("Solve: %v", err)
			}
			return res
		}
		one := solve(lsq.Settings{})
		grouped := solve(lsq.Settings{OutlierGroups: groups})
		excluded := solve(lsq.Settings{Exclude: []int{bad1}})
		for _, c := range []struct {
			name string
			res  *lsq.Result
			want []int
		}{
			{"one at a time", one, []int{bad1, bad2}},
			{"grouped", grouped, []int{bad1, bad2}},
			{"first excluded", excluded, []int{bad1, bad2}},
		} {
			if diff := cmp.Diff(c.want, c.res.Outliers); diff != "" {
				t.Errorf("probed=%v, %s: outliers mismatch (-want +got):\n%s", probed, c.name, diff)
			}
			if e := maxRelDiff(c.res.X, one.X); e > 1e-8 {
				t.Errorf("probed=%v, %s: estimate differs from one at a time by %.2e", probed, c.name, e)
			}
			if c.res.VarMethod == lsq.VarProbed != probed {
				t.Errorf("probed=%v, %s: variances %v", probed, c.name, c.res.VarMethod)
			}
		}
		if grouped.Evaluations >= one.Evaluations {
			t.Errorf("probed=%v: %d evaluations grouped, %d one at a time; want fewer", probed, grouped.Evaluations, one.Evaluations)
		}
	}
	_, err := lsq.Solve(context.Background(), p, make([]float64, n), flatPrior(n, 1), &lsq.Settings{OutlierGroups: groups[:10]})
	if !errors.Is(err, lsq.ErrDimension) {
		t.Errorf("10 groups for %d observations: error %v, want ErrDimension", m, err)
	}
	_, err = lsq.Solve(context.Background(), p, make([]float64, n), flatPrior(n, 1), &lsq.Settings{Exclude: []int{m}})
	if !errors.Is(err, lsq.ErrDimension) {
		t.Errorf("excluding observation %d of %d: error %v, want ErrDimension", m, m, err)
	}
}

// TestCostTol stops a fit on a negligible decrease (Settings.CostTol) and
// wants it within a small fraction of a posterior sd of the fit run to the
// gradient test; a negative tolerance is refused.
func TestCostTol(t *testing.T) {
	const n = 60
	p := lsqtest.NewSparse(n, 180, 3, 0.02, 5)
	full, err := lsq.Solve(context.Background(), p, make([]float64, n), flatPrior(n, 1), &lsq.Settings{OutlierZ: -1})
	if err != nil {
		t.Fatal(err)
	}
	loose, err := lsq.Solve(context.Background(), p, make([]float64, n), flatPrior(n, 1), &lsq.Settings{OutlierZ: -1, CostTol: 1e-6})
	if err != nil {
		t.Fatal(err)
	}
	if !loose.Status.OK() {
		t.Fatalf("status %v", loose.Status)
	}
	// A decrease of at most 1e-6 in F leaves the estimate about √(2e-6)
	// posterior sd from the optimum; 0.01 sd gives room.
	for j := range n {
		if d := math.Abs(loose.X[j]-full.X[j]) / full.StdErr[j]; d > 0.01 {
			t.Errorf("parameter %d: %.3g sd from the full fit", j, d)
		}
	}
	t.Logf("status %v after %d steps; full fit %v after %d", loose.Status, loose.Iterations, full.Status, full.Iterations)
	if _, err := lsq.Solve(context.Background(), p, make([]float64, n), nil, &lsq.Settings{CostTol: -1}); !errors.Is(err, lsq.ErrSettings) {
		t.Errorf("negative CostTol: error %v, want ErrSettings", err)
	}
}
