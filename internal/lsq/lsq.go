// Package lsq fits model parameters to observations by weighted
// nonlinear least squares with a weak Gaussian prior, and reports how well the
// readings determine each parameter.
//
// # Method
//
// Solve minimises
//
//	F(x) = Σ_i ρ(r_i(x)) + ½ Σ_j ((x_j - Mean_j)/Sigma_j)²
//
// where r_i = (pred_i - obs_i)/σ_i are the normalised residuals supplied by
// the [Problem] and ρ is the [Loss] (ρ(r) = r²/2 for plain least squares).
// It uses Levenberg-Marquardt (Marquardt 1963, SIAM J. Appl. Math. 11(2))
// on the augmented system [W^½ J; P^½] with
//
//   - Marquardt's diagonal scaling, kept as the running maximum of
//     diag(JᵀWJ + P) as in Moré (1978), "The Levenberg-Marquardt algorithm:
//     implementation and theory", in Numerical Analysis, Dundee 1977,
//     ed. G. A. Watson, Springer, pp. 105-116;
//   - the damping update of Nielsen (1999), "Damping parameter in
//     Marquardt's method", IMM-REP-1999-05, DTU: on a successful step
//     λ ← λ·max(1/3, 1-(2ϱ-1)³), ν ← 2; on a failed one λ ← λν, ν ← 2ν,
//     with ϱ the gain ratio (actual over predicted decrease of F);
//   - robust losses by iteratively reweighted least squares: the gradient
//     JᵀWr is exact for ρ, the Hessian is approximated by JᵀWJ with
//     W = diag(ψ(r_i)/r_i) (Holland & Welsch 1977, Commun. Statist. A6(9)).
//
// Convergence is judged by the engine itself: the gradient test is the
// scale-free cosine test of MINPACK (Moré, Garbow & Hillstrom 1980, ANL-80-74),
// max_j |g_j| / (‖column j of [W^½J; P^½]‖ · ‖[W^½r; P^½(x-Mean)]‖) ≤ GradTol,
// and the step test is Nielsen's ‖Dh‖ ≤ StepTol·(‖Dx‖ + StepTol) with D the
// square root of the damping scale.
//
// # Dense and matrix-free paths
//
// With up to 1500 parameters (and unless the problem implements [Operator])
// each step solves (A + λD) h = -g, A = JᵀWJ + P, by a Cholesky factorisation
// of the symmetrically equilibrated matrix. For larger problems, or when the
// problem implements [Operator] and Settings.Dense is false, the step is found
// by CGLS (Hestenes & Stiefel 1952; Björck 1996, "Numerical Methods for
// Least Squares Problems", §7.4) on the damped augmented system, matrix-free,
// with a Jacobi (column-scaling) preconditioner diag(A) + λD, or the block
// one of a [SparseApprox] problem, solved only as accurately as the distance
// from the optimum needs (Settings.CGTol).
//
// # Uncertainty
//
// The posterior covariance is (JᵀWJ/c + P)⁻¹ at the optimum. The factor c
// models model error: by default (ScaleAboveOne) c = max(1, χ²/DOF), which
// inflates every σ_i by √c when the fit is worse than the stated reading
// uncertainties allow; the prior is not inflated, so a parameter the data do
// not touch keeps exactly its prior sd. With no prior this is the classical
// covariance scaling. DOF = used observations − round(effective parameters),
// the effective number of parameters being tr((JᵀWJ+P)⁻¹JᵀWJ) = n − tr(A⁻¹P).
// 95 % intervals are x ± q·sd with q the Student-t 0.975 quantile on DOF when
// the variance was scaled by the fit (c taken from χ²), and the normal
// quantile when the stated σ_i were taken as known (c = 1 not from χ²).
// Parameters are meant to be log-multipliers: see [Multiplier].
//
// On the matrix-free path, when n exceeds Settings.DenseCovMax, the
// covariance is not formed and only its diagonal is estimated (see
// [Result.VarMethod]).
//
// # Outliers
//
// After each fit every used observation gets the externally studentised
// statistic t_i = r_i / √((1-h_ii)·c_(i)), with h_ii the leverage and c_(i) the
// model-error factor recomputed without observation i (Belsley, Kuh & Welsch
// 1980, "Regression Diagnostics", §2.1; Cook & Weisberg 1982). The worst
// observation with |t_i| above the threshold is removed and the problem refit;
// this repeats until none exceeds it. The default threshold is the two-sided
// Bonferroni normal quantile for a 5 % family-wise false-alarm rate over the m
// observations, Φ⁻¹(1 − 0.025/m) (3.19 for m = 14, 3.48 for m = 100).
// With Settings.OutlierGroups one round removes the worst observation of every
// group. On the probed path (no leverages: h_ii is taken as 0) the refits
// after a removal test with the effective number of parameters of the last
// probed uncertainty, and the variances are probed again once no outlier is
// left; should the new degrees of freedom reveal one, the loop goes on.
package lsq

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"

	"flowset/internal/parallel"
)

// Sentinel causes wrapped by the errors Solve returns.
var (
	// ErrDimension reports inconsistent sizes of x0, the prior or the problem.
	ErrDimension = errors.New("dimension mismatch")
	// ErrNonFinite reports a NaN or infinite residual or Jacobian entry at the start point.
	ErrNonFinite = errors.New("non-finite value")
	// ErrSettings reports an invalid setting.
	ErrSettings = errors.New("invalid settings")
	// ErrPrior reports an invalid prior (a sigma that is not positive).
	ErrPrior = errors.New("invalid prior")
	// ErrSingular reports that the data and prior do not determine every
	// parameter, so no covariance exists; the returned Result still holds X.
	ErrSingular = errors.New("information matrix singular")
	// ErrDomain may be wrapped by a Problem's Residuals error to say the model
	// cannot be evaluated at that x (a network solve that fails at an extreme
	// trial point, say). Solve then treats the trial like a failed step; at the
	// start point it is fatal.
	ErrDomain = errors.New("problem cannot be evaluated at this point")
)

// Problem is a weighted nonlinear least-squares problem.
type Problem interface {
	// Dims returns the number of parameters and of observations.
	Dims() (params, obs int)
	// Residuals evaluates normalised residuals r_i = (pred_i - obs_i)/sigma_i
	// at x and fills jac (obs × params, dense) when jac is not nil.
	Residuals(x []float64, r []float64, jac *mat.Dense) error
}

// Operator is an optional faster path for big problems: a Problem that also
// implements Operator is solved matrix-free. Its products use the Jacobian at
// the x of the latest Residuals call; Solve calls Residuals with a nil jac on
// this path and re-evaluates the current point after a rejected trial so that
// the products always refer to the point being linearised.
type Operator interface {
	// MulVec sets dst = J v.
	MulVec(dst, v []float64)
	// MulTransVec sets dst = Jᵀ w.
	MulTransVec(dst, w []float64)
}

// Forker is optional for an Operator problem: Fork returns an Operator
// whose products are the problem's own at its latest Residuals call, each
// operation for operation, with scratch of its own, so that it may run
// concurrently with the problem's products and with other forks. Solve then
// runs the variance probes on up to Settings.Workers goroutines, one fork
// each; a fork is used only until the next Residuals call. The results are
// the same to the bit as on one goroutine: each probe's solve is the same
// sequence of operations whichever goroutine runs it, and the probes are
// drawn and summed in their order.
type Forker interface {
	Fork() Operator
}

// MultiOperator is optional for an Operator problem (and its forks): the
// products of several vectors at once, each dst[k] exactly MulVec(dst[k],
// v[k])'s (or MulTransVec's), operation for operation, so that the work
// of the batch may overlap. The variance probes then run their conjugate
// gradients a few probes side by side, each by its own operations (see
// pcgN).
type MultiOperator interface {
	MulVecs(dst, v [][]float64)
	MulTransVecs(dst, w [][]float64)
}

// Preconditioner is optional for an Operator problem: it gives the squared
// column norms of J (the diagonal of JᵀJ, unweighted) at the latest Residuals
// call. Without it Solve estimates them from 8 random products per iteration:
// (1/s)·Σ_k (Jᵀu_k)_j² with Rademacher u_k, which is unbiased, never negative
// and exact for a column with one non-zero entry.
type Preconditioner interface {
	DiagJTJ(dst []float64)
}

// Prior is a weak Gaussian prior: it adds (x_j - Mean_j)/Sigma_j as extra
// residuals. Sigma_j = +Inf leaves parameter j without a prior.
type Prior struct {
	Mean, Sigma []float64
}

// Loss is the per-observation loss ρ. The zero value is plain least squares.
type Loss struct {
	kind lossKind
	k    float64
}

type lossKind int

const (
	squared lossKind = iota
	huber
	cauchy
)

// Default tuning constants for 95 % asymptotic efficiency under normal errors
// (Holland & Welsch 1977, Commun. Statist. A6(9), Table 1).
const (
	DefaultHuberK  = 1.345
	DefaultCauchyK = 2.3849
)

// Squared returns the plain least-squares loss ρ(r) = r²/2.
func Squared() Loss { return Loss{} }

// Huber returns Huber's loss (Huber 1964, Ann. Math. Statist. 35(1)):
// ρ(r) = r²/2 for |r| ≤ k, k|r| - k²/2 beyond. k ≤ 0 selects DefaultHuberK.
func Huber(k float64) Loss {
	if k <= 0 {
		k = DefaultHuberK
	}
	return Loss{kind: huber, k: k}
}

// Cauchy returns the Cauchy (Lorentzian) loss ρ(r) = (k²/2)·ln(1 + (r/k)²).
// It is not convex: start it from a least-squares or Huber fit. k ≤ 0
// selects DefaultCauchyK.
func Cauchy(k float64) Loss {
	if k <= 0 {
		k = DefaultCauchyK
	}
	return Loss{kind: cauchy, k: k}
}

// String names the loss and its tuning constant.
func (l Loss) String() string {
	switch l.kind {
	case huber:
		return fmt.Sprintf("huber(%g)", l.k)
	case cauchy:
		return fmt.Sprintf("cauchy(%g)", l.k)
	}
	return "squared"
}

func (l Loss) rho(r float64) float64 {
	switch l.kind {
	case huber:
		if a := math.Abs(r); a > l.k {
			return l.k*a - l.k*l.k/2
		}
	case cauchy:
		return l.k * l.k / 2 * math.Log1p((r/l.k)*(r/l.k))
	}
	return r * r / 2
}

// weight is ψ(r)/r, the IRLS weight.
func (l Loss) weight(r float64) float64 {
	switch l.kind {
	case huber:
		if a := math.Abs(r); a > l.k {
			return l.k / a
		}
	case cauchy:
		return 1 / (1 + (r/l.k)*(r/l.k))
	}
	return 1
}

// Scaling says how the covariance accounts for model error.
type Scaling int

const (
	// ScaleAboveOne divides the data part of the information, JᵀWJ, by the
	// reduced chi-square when it exceeds one (the default): every σ_i is
	// inflated by its square root, the prior is not.
	ScaleAboveOne Scaling = iota
	// ScaleAlways always divides by the reduced chi-square: the classical
	// regression convention when the σ_i are only relative weights (NIST StRD
	// certified standard deviations use it).
	ScaleAlways
	// ScaleNever takes the stated σ_i as exact.
	ScaleNever
)

// Settings control Solve. The zero value (or nil) selects the defaults given
// beside each field.
type Settings struct {
	MaxIter int     // accepted Levenberg-Marquardt steps per fit; 0: 200
	GradTol float64 // cosine gradient test; 0: 1e-10
	StepTol float64 // relative step test; 0: 1e-10
	Loss    Loss    // zero value: Squared
	// OutlierZ is the threshold on |t_i|: 0 selects the Bonferroni normal
	// quantile Φ⁻¹(1 − 0.025/m); a negative value disables the test.
	OutlierZ float64
	// MaxOutliers caps how many observations may be removed; 0: m/5.
	MaxOutliers int
	// OutlierGroups, when set, gives each observation a group, and each
	// round of the outlier test removes the worst observation of every group
	// over the threshold instead of only the worst of all: where an
	// observation barely moves the residuals of other groups (the readings
	// of one branch among hundreds), that saves a refit per outlier.
	OutlierGroups []int
	// Exclude lists observations left out from the start, as outliers
	// already found (by an earlier fit of the same readings); they head
	// Result.Outliers and count towards MaxOutliers.
	Exclude []int
	Dense   bool    // force the dense path even for an Operator problem
	Scale   Scaling // model-error scaling of the covariance
	// CGTol is the relative residual of the matrix-free steps' CG solves.
	// 0 makes it adaptive (an inexact Newton method, Dembo, Eisenstat &
	// Steihaug 1982, SIAM J. Numer. Anal. 19(2), 400-408): min(0.1, √cos)
	// with cos the gradient cosine of the current point (see Converged),
	// never below 1e-10. A forcing term of order ‖g‖^½ keeps the local
	// convergence superlinear, of order 1.5, while the first steps, far from
	// the optimum, cost a few CG iterations instead of a hundred.
	CGTol float64
	// CostTol stops the fit (SmallDecrease) when an accepted step lowered F
	// by at most CostTol and the local model predicted no more (the
	// criterion of MINPACK's ftol, Moré, Garbow & Hillstrom 1980, in
	// absolute terms), or when a step the model credits with at most
	// CostTol is rejected. F is in units of χ²/2, so 1e-6 leaves the estimate
	// about 1e-3 posterior sd from the optimum, far below anything a
	// reading can show, where the gradient test may not be reachable when
	// the residuals carry the rounding of an iterative model. 0: off.
	CostTol   float64
	CGMaxIter int // per CG solve; 0: 2n + 100
	// DenseCovMax is the largest n for which the matrix-free path forms J
	// column by column (n products J e_j) at the optimum to get the exact
	// covariance; above it the variances are estimated. 0: 1500; negative:
	// always estimate.
	DenseCovMax int
	// Probes is the number of random probes of the variance estimate. 0
	// makes it adaptive: probes are added in eights, up to 64, until the
	// standard errors the probes' own spread gives are below ProbeTol (see
	// VarProbed).
	Probes int
	// ProbeTol is the relative standard error of the probed variances at
	// which adaptive probing stops; 0: 0.1 (5 % on the sd).
	ProbeTol float64
	Seed     uint64 // seed of the probes
	// Workers is the number of goroutines for the work that splits into
	// independent parts with the same result on any number of them (the
	// variance probes of a Forker problem, the block preconditioner's
	// sums and, in the steps, its triangular solves); 0:
	// runtime.GOMAXPROCS(0).
	Workers int
	// EstimateOnly skips everything after the optimum: no covariance,
	// variances, intervals or outlier test. Result then holds X, the
	// residuals, weights and ChiSquare only: enough to compare models (the
	// valve hypothesis tests), at a fraction of the cost on large problems.
	EstimateOnly bool

	cgForcing      bool // CGTol was 0: adaptive
	adaptiveProbes bool // Probes was 0: adaptive
}

const (
	cgTolMin     = 1e-10 // floor of the adaptive CG tolerance
	minProbes    = 8     // adaptive probing adds probes in eights
	maxProbes    = 64    // and stops at this many
	varFloor     = 1e-3  // a probed variance is kept above this fraction of the local one
	eps          = 0x1p-52
	denseMax     = 1500
	lambdaMax    = 1e16
	diagProbes   = 8
	probeTol     = 1e-4 // CG tolerance of a variance probe: far below the estimator's own noise
	determinedAt = 0.5  // Determined: posterior sd below this fraction of the prior sigma
)

func (s *Settings) withDefaults(n, m int) (Settings, error) {
	var out Settings
	if s != nil {
		out = *s
	}
	bad := func(what string) (Settings, error) {
		return out, fmt.Errorf("lsq: %s: %w", what, ErrSettings)
	}
	switch {
	case out.MaxIter < 0:
		return bad("negative max iterations")
	case out.GradTol < 0 || math.IsNaN(out.GradTol) || math.IsInf(out.GradTol, 0):
		return bad("gradient tolerance not a finite non-negative number")
	case out.StepTol < 0 || math.IsNaN(out.StepTol) || math.IsInf(out.StepTol, 0):
		return bad("step tolerance not a finite non-negative number")
	case out.CGTol < 0 || math.IsNaN(out.CGTol) || out.CGTol >= 1:
		return bad("cg tolerance outside [0, 1)")
	case out.CostTol < 0 || math.IsNaN(out.CostTol) || math.IsInf(out.CostTol, 0):
		return bad("cost tolerance not a finite non-negative number")
	case math.IsNaN(out.OutlierZ) || math.IsInf(out.OutlierZ, 0):
		return bad("outlier threshold not finite")
	case math.IsNaN(out.Loss.k) || math.IsInf(out.Loss.k, 0) || (out.Loss.kind != squared && out.Loss.k <= 0):
		return bad("loss constant not finite and positive")
	case out.Scale < ScaleAboveOne || out.Scale > ScaleNever:
		return bad("unknown covariance scaling")
	case out.ProbeTol < 0 || math.IsNaN(out.ProbeTol) || out.ProbeTol >= 1:
		return bad("probe tolerance outside [0, 1)")
	case out.MaxOutliers < 0 || out.CGMaxIter < 0 || out.Probes < 0 || out.Workers < 0:
		return bad("negative count")
	}
	if out.MaxIter == 0 {
		out.MaxIter = 200
	}
	if out.GradTol == 0 {
		out.GradTol = 1e-10
	}
	if out.StepTol == 0 {
		out.StepTol = 1e-10
	}
	if out.CGTol == 0 {
		out.CGTol, out.cgForcing = cgTolMin, true
	}
	if out.CGMaxIter == 0 {
		out.CGMaxIter = 2*n + 100
	}
	if out.DenseCovMax == 0 {
		out.DenseCovMax = denseMax
	}
	if out.Probes == 0 {
		out.Probes, out.adaptiveProbes = maxProbes, true
	}
	if out.ProbeTol == 0 {
		out.ProbeTol = 0.1
	}
	if out.Workers == 0 {
		out.Workers = runtime.GOMAXPROCS(0)
	}
	if out.MaxOutliers == 0 {
		out.MaxOutliers = m / 5
	}
	if out.OutlierZ == 0 {
		out.OutlierZ = distuv.UnitNormal.Quantile(1 - 0.025/float64(max(m, 1)))
	}
	return out, nil
}

// Status says why a fit stopped.
type Status int

const (
	NotStarted    Status = iota // no fit was run
	Converged                   // gradient test met
	SmallStep                   // relative step test met
	MaxIterations               // Settings.MaxIter accepted steps taken
	Stalled                     // no step reduced F even with the largest damping
	Cancelled                   // the context was done
	SmallDecrease               // the decrease of F fell below Settings.CostTol
)

// String names the status.
func (s Status) String() string {
	switch s {
	case NotStarted:
		return "not started"
	case Converged:
		return "converged"
	case SmallStep:
		return "converged (small step)"
	case MaxIterations:
		return "maximum iterations"
	case Stalled:
		return "stalled"
	case Cancelled:
		return "cancelled"
	case SmallDecrease:
		return "converged (small decrease)"
	}
	return fmt.Sprintf("status(%d)", int(s))
}

// OK reports whether the status is a convergence.
func (s Status) OK() bool { return s == Converged || s == SmallStep || s == SmallDecrease }

// VarMethod says how Result.Var was obtained.
type VarMethod int

const (
	// VarExact: the diagonal of the Cholesky-inverted information matrix.
	VarExact VarMethod = iota
	// VarProbed: matrix-free diagonal estimate by the stochastic estimator
	// of Bekas, Kokiopoulou & Saad (2007), Appl. Numer. Math. 57(11-12),
	// diag(A⁻¹) ≈ (1/s) Σ_k z_k ⊙ A⁻¹z_k with s Rademacher vectors z_k, each
	// A⁻¹z_k by preconditioned conjugate gradients to a relative residual of
	// 1e-4. Without a SparseApprox the estimate is clipped below by 1/A_jj,
	// which bounds (A⁻¹)_jj from below for any positive definite A (A_jj is
	// exact with a Preconditioner and the squared loss, estimated
	// otherwise); its error shrinks like 1/√s times the off-diagonal mass of
	// the row of A⁻¹: measured on a 300-parameter sparse problem against the
	// exact values, median relative error 16 % with 16 probes and 7 % with
	// 64, worst 76 % and 48 %. With a SparseApprox, whose block
	// preconditioner M holds what couples the parameters most, two changes
	// cut that error (Hutchinson-type estimators with a control variate and
	// a scaled probe distribution): the probes estimate only
	// diag(A⁻¹ - M⁻¹), M⁻¹'s diagonal being exact, and entry j of each probe
	// is ±1/√v̂_j with v̂_j the variance M gives, so that the error of
	// parameter j depends on its correlations with the others rather than on
	// their variances (a variance of 1e-4 no longer drowns in the covariances
	// of parameters with 0.5). Measured on a generated 300-branch survey
	// (TestFitProbedVarianceSurvey): sd within 0.14 % median, 1.5 % at the
	// 90th percentile, 5 % at the 99th, 8 % worst, where 64 plain probes
	// gave 3.6 %, 31 %, 93 % and 154 %. The number of probes s is
	// Settings.Probes, or adaptive: eight at a time until the standard errors
	// from the probes' own spread are within Settings.ProbeTol (eight to
	// sixteen probes on the generated surveys). Cost: s solves, each a few
	// tens of J and Jᵀ products, twice when the covariance is scaled and a
	// prior is present, except with a SparseApprox, where the effective
	// number of parameters (a sum over all of them, for the degrees of
	// freedom) comes from the local approximation's variances, within 0.1 %
	// of the probed sum on generated 1,000- and 3,000-branch surveys, and
	// the probes run once, at the covariance scale it gives.
	VarProbed
)

// String names the method.
func (v VarMethod) String() string {
	if v == VarProbed {
		return "probed diagonal"
	}
	return "exact"
}

// Result is the outcome of Solve.
type Result struct {
	X []float64 // the estimate

	// Cov is the posterior covariance; nil on the matrix-free path above
	// Settings.DenseCovMax parameters, where only Var is available.
	Cov       *mat.SymDense
	Var       []float64 // posterior variances (always set)
	VarMethod VarMethod
	StdErr    []float64
	// Lo95 and Hi95 bound the 95 % interval of each parameter in x.
	Lo95, Hi95 []float64
	// Residual is the normalised residual of every observation at X,
	// outliers included.
	Residual []float64
	// Weight is the final weight of every observation: 0 for a removed
	// outlier, the IRLS weight ψ(r)/r for a robust loss, 1 otherwise.
	Weight []float64
	// ChiSquare is Σ Weight_i·Residual_i² over the used observations.
	ChiSquare, ReducedChiSquare float64
	// DOF is used observations − round(EffectiveParams); 0 or less means the
	// reduced chi-square is undefined and reported as 0.
	DOF             int
	EffectiveParams float64
	// CovScale is the factor c the data part of the information was divided
	// by (1 when none); TQuantile the factor applied to StdErr for the 95 %
	// interval.
	CovScale, TQuantile float64
	Iterations          int // accepted steps over all refits
	Evaluations         int // Residuals calls
	MatrixFree          bool
	Status              Status
	// Outliers lists removed observations, in the order they were removed.
	Outliers []int
	// Determined reports whether the data determine parameter j: its
	// posterior sd is below 0.5 × its prior sigma. A parameter without a prior
	// is determined whenever the covariance exists.
	Determined []bool
}

// Multiplier converts a log-multiplier and its interval to the multiplier
// exp(x) and its interval, which is not symmetric about it.
func Multiplier(x, lo, hi float64) (m, mlo, mhi float64) {
	return math.Exp(x), math.Exp(lo), math.Exp(hi)
}

// Solve fits p starting from x0. prior and s may be nil. On ErrSingular or a
// cancelled context the Result is returned with the fit reached so far.
func Solve(ctx context.Context, p Problem, x0 []float64, prior *Prior, s *Settings) (*Result, error) {
	n, m := p.Dims()
	if n <= 0 || m <= 0 {
		return nil, fmt.Errorf("lsq: problem has %d parameters and %d observations: %w", n, m, ErrDimension)
	}
	if len(x0) != n {
		return nil, fmt.Errorf("lsq: start has %d values, problem %d parameters: %w", len(x0), n, ErrDimension)
	}
	for _, v := range x0 {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("lsq: start point: %w", ErrNonFinite)
		}
	}
	set, err := s.withDefaults(n, m)
	if err != nil {
		return nil, err
	}
	if set.OutlierGroups != nil && len(set.OutlierGroups) != m {
		return nil, fmt.Errorf("lsq: %d outlier groups for %d observations: %w", len(set.OutlierGroups), m, ErrDimension)
	}
	sv := &solver{p: p, n: n, m: m, s: set, mu: make([]float64, n), prec: make([]float64, n)}
	if prior != nil {
		if len(prior.Mean) != n || len(prior.Sigma) != n {
			return nil, fmt.Errorf("lsq: prior sizes %d and %d, problem %d parameters: %w", len(prior.Mean), len(prior.Sigma), n, ErrDimension)
		}
		for j := range n {
			sg, mu := prior.Sigma[j], prior.Mean[j]
			if !(sg > 0) || math.IsNaN(mu) || math.IsInf(mu, 0) {
				return nil, fmt.Errorf("lsq: prior of parameter %d: %w", j, ErrPrior)
			}
			sv.mu[j] = mu
			if !math.IsInf(sg, 1) {
				sv.prec[j] = 1 / (sg * sg)
			}
		}
	}
	op, isOp := p.(Operator)
	switch {
	case set.Dense:
	case isOp:
		sv.op = op
		sv.pre, _ = p.(Preconditioner)
		sv.sa, _ = p.(SparseApprox)
		sv.matrixFree = true
	case n > denseMax:
		sv.matrixFree = true // J formed densely, but steps by CGLS
	}
	sv.keep = make([]float64, m)
	for i := range sv.keep {
		sv.keep[i] = 1
	}
	for _, i := range set.Exclude {
		if i < 0 || i >= m {
			return nil, fmt.Errorf("lsq: excluded observation %d of %d: %w", i, m, ErrDimension)
		}
		sv.keep[i] = 0
	}
	sv.rng = rand.New(rand.NewPCG(set.Seed, 0x9e3779b97f4a7c15))
	return sv.run(ctx, x0)
}

type solver struct {
	p          Problem
	op         Operator
	pre        Preconditioner
	sa         SparseApprox
	n, m       int
	s          Settings
	mu, prec   []float64
	keep       []float64 // 1 for a used observation, 0 for a removed outlier
	matrixFree bool
	evals      int
	linAt      *point // the point the Operator products currently refer to
	rng        *rand.Rand
	dscale     []float64 // Moré's running maximum of diag(A)
	blocks     *blocksAt // diagAndBlocks' last answer
}

type point struct {
	x, r []float64
	jac  *mat.Dense // nil for an Operator problem
	cost float64
}

// evalErr separates a rejected trial (domain or non-finite) from a fatal error.
type evalErr struct {
	err    error
	reject bool
}

func (s *solver) eval(x []float64) (*point, *evalErr) {
	pt := &point{x: append([]float64(nil), x...), r: make([]float64, s.m)}
	if s.op == nil {
		pt.jac = mat.NewDense(s.m, s.n, nil)
	}
	s.evals++
	if err := s.p.Residuals(pt.x, pt.r, pt.jac); err != nil {
		return nil, &evalErr{err: err, reject: errors.Is(err, ErrDomain)}
	}
	if s.op != nil {
		s.linAt = pt
	}
	for _, v := range pt.r {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, &evalErr{err: fmt.Errorf("lsq: residual: %w", ErrNonFinite), reject: true}
		}
	}
	if pt.jac != nil {
		for _, v := range pt.jac.RawMatrix().Data {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, &evalErr{err: fmt.Errorf("lsq: jacobian: %w", ErrNonFinite), reject: true}
			}
		}
	}
	pt.cost = s.cost(pt)
	return pt, nil
}

// relinearise makes the Operator products refer to pt again.
func (s *solver) relinearise(pt *point) error {
	if s.op == nil || s.linAt == pt {
		return nil
	}
	r := make([]float64, s.m)
	s.evals++
	if err := s.p.Residuals(pt.x, r, nil); err != nil {
		return fmt.Errorf("lsq: re-evaluating the current point: %w", err)
	}
	s.linAt = pt
	return nil
}

func (s *solver) cost(pt *point) float64 {
	var f float64
	for i, r := range pt.r {
		if s.keep[i] != 0 {
			f += s.s.Loss.rho(r)
		}
	}
	for j, x := range pt.x {
		d := x - s.mu[j]
		f += 0.5 * s.prec[j] * d * d
	}
	return f
}

func (s *solver) weights(pt *point) []float64 {
	w := make([]float64, s.m)
	for i, r := range pt.r {
		w[i] = s.keep[i] * s.s.Loss.weight(r)
	}
	return w
}

// mulJ and mulJT apply the Jacobian at pt (dense or operator).
func (s *solver) mulJ(pt *point, dst, v []float64) {
	if pt.jac != nil {
		mat.NewVecDense(len(dst), dst).MulVec(pt.jac, mat.NewVecDense(len(v), v))
		return
	}
	s.op.MulVec(dst, v)
}

func (s *solver) mulJT(pt *point, dst, w []float64) {
	if pt.jac != nil {
		mat.NewVecDense(len(dst), dst).MulVec(pt.jac.T(), mat.NewVecDense(len(w), w))
		return
	}
	s.op.MulTransVec(dst, w)
}

// linear is the local model at a point: gradient, diag(A) and, on the dense
// path, A itself.
type linear struct {
	w     []float64 // IRLS weights times keep
	g     []float64
	diagA []float64
	a     *mat.SymDense
	rnorm float64    // ‖[W^½ r; P^½(x-μ)]‖
	bp    *blockPrec // block preconditioner from a SparseApprox, or nil
	cos   float64    // the gradient cosine (gradientSmall)
}

func (s *solver) linearise(pt *point) (*linear, error) {
	if err := s.relinearise(pt); err != nil {
		return nil, err
	}
	n, m := s.n, s.m
	ln := &linear{w: s.weights(pt), g: make([]float64, n), diagA: make([]float64, n)}
	wr := make([]float64, m)
	var rr float64
	for i, r := range pt.r {
		wr[i] = ln.w[i] * r
		rr += ln.w[i] * r * r
	}
	s.mulJT(pt, ln.g, wr)
	for j := range n {
		d := pt.x[j] - s.mu[j]
		ln.g[j] += s.prec[j] * d
		rr += s.prec[j] * d * d
	}
	ln.rnorm = math.Sqrt(rr)
	switch {
	case pt.jac != nil && !s.matrixFree:
		ln.a = gram(weightedRows(pt.jac, ln.w))
		for j := range n {
			ln.a.SetSym(j, j, ln.a.At(j, j)+s.prec[j])
			ln.diagA[j] = ln.a.At(j, j)
		}
	case pt.jac != nil:
		for i := range m {
			row := pt.jac.RawRowView(i)
			for j, v := range row {
				ln.diagA[j] += ln.w[i] * v * v
			}
		}
		floats.Add(ln.diagA, s.prec)
	default:
		d, bp := s.diagAndBlocks(ln.w)
		copy(ln.diagA, d)
		ln.bp = bp
		floats.Add(ln.diagA, s.prec)
	}
	return ln, nil
}

// diagAndBlocks returns diag(JᵀWJ) on the Operator path and, for a
// SparseApprox problem, its block preconditioner at the point the products
// refer to. With a SparseApprox (and no Preconditioner) the diagonal is
// J̃'s, except that the columns J̃ leaves out of every block because they
// touch many readings (a calibration's header and pump) get their exact
// norms, one product each: cheaper than diagJTJ's eight random products,
// and no noisier where J̃ is good, which is what the block preconditioner
// already relies on.
//
// The variances' round asks for them at the point and weights it has just
// asked for: the last answer is kept and given again for the same point and
// weights (the same numbers; its factor is set anew by each user).
func (s *solver) diagAndBlocks(w []float64) ([]float64, *blockPrec) {
	if c := s.blocks; c != nil && c.at == s.linAt && slices.Equal(c.w, w) {
		return c.d, c.bp
	}
	d, bp := s.newDiagAndBlocks(w)
	if bp != nil {
		s.blocks = &blocksAt{at: s.linAt, w: append([]float64(nil), w...), d: d, bp: bp}
	}
	return d, bp
}

// blocksAt is diagAndBlocks' last answer, at point at and weights w.
type blocksAt struct {
	at   *point
	w, d []float64
	bp   *blockPrec
}

func (s *solver) newDiagAndBlocks(w []float64) ([]float64, *blockPrec) {
	d := make([]float64, s.n)
	if s.sa == nil || s.pre != nil {
		s.diagJTJ(d, w)
		if s.sa == nil {
			return d, nil
		}
		rows, cols, vals := s.sa.ApproxJacobian()
		return d, newBlockPrec(s.n, rows, cols, vals, w, append([]float64(nil), d...), s.s.Workers)
	}
	rows, cols, vals := s.sa.ApproxJacobian()
	bp := newBlockPrec(s.n, rows, cols, vals, w, nil, s.s.Workers)
	copy(d, bp.gdiag)
	exactColumns(s.op, d, w, bp.hubs)
	bp.diagA = d
	return d, bp
}

// exactColumns sets d_j = Σ_i w_i J_ij² for each j in cols, from one
// product J e_j each.
func exactColumns(op Operator, d, w []float64, cols []int) {
	if len(cols) == 0 {
		return
	}
	e := make([]float64, len(d))
	col := make([]float64, len(w))
	for _, j := range cols {
		e[j] = 1
		op.MulVec(col, e)
		e[j] = 0
		var v float64
		for i, c := range col {
			v += w[i] * c * c
		}
		d[j] = v
	}
}

// diagJTJ fills dst with diag(JᵀWJ) on the Operator path: exact from a
// Preconditioner (whose unweighted norms are scaled by the largest weight,
// an upper bound that is exact for plain least squares), else estimated.
func (s *solver) diagJTJ(dst, w []float64) {
	if s.pre != nil {
		s.pre.DiagJTJ(dst)
		if wmax := floats.Max(w); wmax != 1 {
			floats.Scale(wmax, dst)
		}
		return
	}
	u := make([]float64, s.m)
	t := make([]float64, s.n)
	for j := range dst {
		dst[j] = 0
	}
	for range diagProbes {
		for i := range u {
			u[i] = 0
			if s.rng.Uint64()&1 == 0 {
				u[i] = math.Sqrt(w[i])
			} else {
				u[i] = -math.Sqrt(w[i])
			}
		}
		s.op.MulTransVec(t, u)
		for j, v := range t {
			dst[j] += v * v / diagProbes
		}
	}
}

// gram returns JwᵀJw. A Jacobian whose rows touch few parameters (a
// calibration reading depends on a few branches) is accumulated row by row
// over the non-zero entries, O(Σ nnz_i²) instead of the O(mn²) of the dense
// product.
func gram(jw *mat.Dense) *mat.SymDense {
	m, n := jw.Dims()
	a := mat.NewSymDense(n, nil)
	if !sparseRows(jw) {
		a.SymOuterK(1, jw.T())
		return a
	}
	raw := a.RawSymmetric()
	idx := make([]int, 0, n)
	for i := range m {
		row := jw.RawRowView(i)
		idx = nonZeros(idx[:0], row)
		for p, k := range idx {
			vk := row[k]
			dst := raw.Data[k*raw.Stride:]
			for _, l := range idx[p:] {
				dst[l] += vk * row[l]
			}
		}
	}
	return a
}

// sparseRows reports whether jw has on average fewer than n/8 non-zeros per
// row, where row-by-row accumulation beats the blocked dense product.
func sparseRows(jw *mat.Dense) bool {
	m, n := jw.Dims()
	var nnz int
	for i := range m {
		for _, v := range jw.RawRowView(i) {
			if v != 0 {
				nnz++
			}
		}
	}
	return nnz*8 < m*n
}

func nonZeros(dst []int, row []float64) []int {
	for k, v := range row {
		if v != 0 {
			dst = append(dst, k)
		}
	}
	return dst
}

// leverages returns h_ii = (Jw C Jwᵀ)_ii.
func leverages(jw *mat.Dense, c *mat.SymDense) []float64 {
	m, n := jw.Dims()
	h := make([]float64, m)
	if !sparseRows(jw) {
		var g mat.Dense
		g.Mul(jw, c)
		for i := range m {
			h[i] = floats.Dot(g.RawRowView(i), jw.RawRowView(i))
		}
		return h
	}
	idx := make([]int, 0, n)
	for i := range m {
		row := jw.RawRowView(i)
		idx = nonZeros(idx[:0], row)
		var v float64
		for _, k := range idx {
			for _, l := range idx {
				v += row[k] * c.At(k, l) * row[l]
			}
		}
		h[i] = v
	}
	return h
}

func weightedRows(j *mat.Dense, w []float64) *mat.Dense {
	m, n := j.Dims()
	out := mat.NewDense(m, n, nil)
	for i := range m {
		sw := math.Sqrt(w[i])
		src, dst := j.RawRowView(i), out.RawRowView(i)
		for k, v := range src {
			dst[k] = sw * v
		}
	}
	return out
}

// gradientSmall is MINPACK's cosine test; it keeps the cosine in ln.cos.
func (s *solver) gradientSmall(ln *linear) bool {
	if ln.rnorm == 0 {
		return true
	}
	var worst float64
	for j, g := range ln.g {
		if ln.diagA[j] == 0 {
			continue
		}
		worst = max(worst, math.Abs(g)/(math.Sqrt(ln.diagA[j])*ln.rnorm))
	}
	ln.cos = worst
	return worst <= s.s.GradTol
}

// cgTol is the relative tolerance of a step's CG solve: see Settings.CGTol.
func (s *solver) cgTol(ln *linear) float64 {
	if !s.s.cgForcing {
		return s.s.CGTol
	}
	return max(s.s.CGTol, min(0.1, math.Sqrt(ln.cos)))
}

// step solves (A + λD) h = -g. ok is false when the damped matrix could not
// be factorised, which the caller treats like a failed step.
func (s *solver) step(pt *point, ln *linear, lambda float64) (h []float64, ok bool) {
	n := s.n
	if !s.matrixFree {
		// Equilibrate: (SAS + λI) y = -Sg, h = Sy with S = D^-½.
		sc := make([]float64, n)
		for j := range n {
			sc[j] = 1 / math.Sqrt(s.dscale[j])
		}
		b := mat.NewSymDense(n, nil)
		for i := range n {
			for j := i; j < n; j++ {
				b.SetSym(i, j, ln.a.At(i, j)*sc[i]*sc[j])
			}
			b.SetSym(i, i, b.At(i, i)+lambda)
		}
		var ch mat.Cholesky
		if !ch.Factorize(b) {
			return nil, false
		}
		rhs := make([]float64, n)
		for j := range n {
			rhs[j] = -ln.g[j] * sc[j]
		}
		y := mat.NewVecDense(n, nil)
		if err := ch.SolveVecTo(y, mat.NewVecDense(n, rhs)); err != nil {
			var c mat.Condition
			if !errors.As(err, &c) {
				return nil, false
			}
		}
		h = make([]float64, n)
		for j := range n {
			h[j] = y.AtVec(j) * sc[j]
			if math.IsNaN(h[j]) || math.IsInf(h[j], 0) {
				return nil, false
			}
		}
		return h, true
	}
	h = s.cgls(pt, ln, lambda)
	for _, v := range h {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, false
		}
	}
	return h, true
}

// cgls solves min ‖K h - b‖ for K = [W^½J; P^½; (λD)^½] and
// b = -[W^½r; P^½(x-μ); 0], whose normal equations are (A + λD) h = -g, by
// CGLS with column scaling C = (diag(A) + λD)^-½ (Björck 1996, Alg. 7.4.1
// applied to KC).
func (s *solver) cgls(pt *point, ln *linear, lambda float64) []float64 {
	n, m := s.n, s.m
	c := make([]float64, n)
	sw := make([]float64, m)
	for i, w := range ln.w {
		sw[i] = math.Sqrt(w)
	}
	sp := make([]float64, n)
	sl := make([]float64, n)
	for j := range n {
		c[j] = 1 / math.Sqrt(ln.diagA[j]+lambda*s.dscale[j])
		sp[j] = math.Sqrt(s.prec[j])
		sl[j] = math.Sqrt(lambda * s.dscale[j])
	}
	// right sets dst = C v and left dst = Cᵀ v: the diagonal scaling, or
	// with a block preconditioner M = L Lᵀ, C = L⁻ᵀ.
	right := func(dst, v []float64) {
		for j := range n {
			dst[j] = c[j] * v[j]
		}
	}
	left := right
	if bp := ln.bp; bp != nil && bp.set(1, s.prec, lambda, s.dscale) {
		// Unlike the probes, the steps run one solve at a time: the
		// blocks are split over the goroutines instead.
		right = func(dst, v []float64) {
			copy(dst, v)
			bp.upperSolveOn(dst, s.s.Workers)
		}
		left = func(dst, v []float64) {
			copy(dst, v)
			bp.lowerSolveOn(dst, s.s.Workers)
		}
	}
	// Residual s = b - K C y, stored in three parts.
	s1 := make([]float64, m)
	s2 := make([]float64, n)
	s3 := make([]float64, n)
	for i := range m {
		s1[i] = -sw[i] * pt.r[i]
	}
	for j := range n {
		s2[j] = -sp[j] * (pt.x[j] - s.mu[j])
	}
	tmpM := make([]float64, m)
	tmpN := make([]float64, n)
	// t = C Kᵀ s
	kts := func(t []float64) {
		for i := range m {
			tmpM[i] = sw[i] * s1[i]
		}
		s.mulJT(pt, tmpN, tmpM)
		for j := range n {
			tmpN[j] += sp[j]*s2[j] + sl[j]*s3[j]
		}
		left(t, tmpN)
	}
	y := make([]float64, n)
	t := make([]float64, n)
	kts(t)
	p := append([]float64(nil), t...)
	gamma := floats.Dot(t, t)
	gamma0 := gamma
	ss := floats.Dot(s1, s1) + floats.Dot(s2, s2)
	// KC has unit columns, so ‖KC‖_F = √n. Stop at the relative tolerance or
	// at Paige & Saunders' (1982) rule S2, ‖(KC)ᵀs‖ ≤ ε·‖KC‖·‖s‖, whichever
	// comes first: below the latter the recurrences only amplify rounding
	// errors (large-residual problems near the optimum reach it first).
	floor := 8 * eps * math.Sqrt(float64(n))
	tol := s.cgTol(ln)
	q1 := make([]float64, m)
	q2 := make([]float64, n)
	q3 := make([]float64, n)
	cp := make([]float64, n)
	for it := 0; it < s.s.CGMaxIter; it++ {
		if gamma <= tol*tol*gamma0 || gamma <= floor*floor*ss || gamma == 0 {
			break
		}
		right(cp, p)
		s.mulJ(pt, q1, cp)
		for i := range m {
			q1[i] *= sw[i]
		}
		for j := range n {
			q2[j] = sp[j] * cp[j]
			q3[j] = sl[j] * cp[j]
		}
		delta := floats.Dot(q1, q1) + floats.Dot(q2, q2) + floats.Dot(q3, q3)
		if delta == 0 {
			break
		}
		alpha := gamma / delta
		floats.AddScaled(y, alpha, p)
		floats.AddScaled(s1, -alpha, q1)
		floats.AddScaled(s2, -alpha, q2)
		floats.AddScaled(s3, -alpha, q3)
		ssNew := floats.Dot(s1, s1) + floats.Dot(s2, s2) + floats.Dot(s3, s3)
		if ssNew > ss*(1+1e-12) {
			// ‖s‖ decreases monotonically in exact arithmetic: a rise means
			// the iteration has lost accuracy, so undo the update and stop.
			floats.AddScaled(y, -alpha, p)
			break
		}
		ss = ssNew
		kts(t)
		gnew := floats.Dot(t, t)
		beta := gnew / gamma
		gamma = gnew
		for j := range n {
			p[j] = t[j] + beta*p[j]
		}
	}
	h := make([]float64, n)
	right(h, y)
	return h
}

// predicted is the decrease of the local model, -gᵀh - ½hᵀAh.
func (s *solver) predicted(pt *point, ln *linear, h []float64) float64 {
	jh := make([]float64, s.m)
	s.mulJ(pt, jh, h)
	var quad float64
	for i, v := range jh {
		quad += ln.w[i] * v * v
	}
	for j, v := range h {
		quad += s.prec[j] * v * v
	}
	return -floats.Dot(ln.g, h) - 0.5*quad
}

// fit runs Levenberg-Marquardt from start to convergence.
func (s *solver) fit(ctx context.Context, start *point) (*point, Status, int, error) {
	cur := start
	lambda, nu := 1e-3, 2.0
	s.dscale = make([]float64, s.n)
	iter := 0
	for {
		if err := ctx.Err(); err != nil {
			return cur, Cancelled, iter, fmt.Errorf("lsq: %w", err)
		}
		ln, err := s.linearise(cur)
		if err != nil {
			return cur, Stalled, iter, err
		}
		for j, d := range ln.diagA {
			s.dscale[j] = max(s.dscale[j], d)
			if s.dscale[j] == 0 {
				s.dscale[j] = 1 // no information at all: keep the damped matrix definite
			}
		}
		if s.gradientSmall(ln) {
			return cur, Converged, iter, nil
		}
		if iter >= s.s.MaxIter {
			return cur, MaxIterations, iter, nil
		}
		for {
			if err := ctx.Err(); err != nil {
				return cur, Cancelled, iter, fmt.Errorf("lsq: %w", err)
			}
			if lambda > lambdaMax {
				return cur, Stalled, iter, nil
			}
			if err := s.relinearise(cur); err != nil {
				return cur, Stalled, iter, err
			}
			h, ok := s.step(cur, ln, lambda)
			if !ok {
				lambda *= nu
				nu *= 2
				continue
			}
			var dh, dx float64
			for j := range h {
				d := math.Sqrt(s.dscale[j])
				dh += d * d * h[j] * h[j]
				dx += d * d * cur.x[j] * cur.x[j]
			}
			if math.Sqrt(dh) <= s.s.StepTol*(math.Sqrt(dx)+s.s.StepTol) {
				return cur, SmallStep, iter, nil
			}
			pred := s.predicted(cur, ln, h)
			xt := make([]float64, s.n)
			floats.AddTo(xt, cur.x, h)
			trial, ee := s.eval(xt)
			if ee != nil && !ee.reject {
				return cur, Stalled, iter, ee.err
			}
			if ee == nil && pred > 0 {
				if rho := (cur.cost - trial.cost) / pred; rho > 0 {
					actual := cur.cost - trial.cost
					cur = trial
					lambda *= max(1.0/3, 1-math.Pow(2*rho-1, 3))
					nu = 2
					iter++
					if tol := s.s.CostTol; actual <= tol && pred <= tol && rho <= 2 {
						return cur, SmallDecrease, iter, nil
					}
					break
				}
			}
			if ee == nil && s.s.CostTol > 0 && pred <= s.s.CostTol && iter > 0 {
				// The local model promises no more than the tolerance and
				// the evaluation does not even confirm that: what is left
				// is rounding in the residuals.
				return cur, SmallDecrease, iter, nil
			}
			lambda *= nu
			nu *= 2
		}
	}
}

func (s *solver) run(ctx context.Context, x0 []float64) (*Result, error) {
	start, ee := s.eval(x0)
	if ee != nil {
		return nil, fmt.Errorf("lsq: start point: %w", ee.err)
	}
	res := &Result{MatrixFree: s.matrixFree}
	for i, k := range s.keep {
		if k == 0 {
			res.Outliers = append(res.Outliers, i)
		}
	}
	cur := start
	var stale *uncert // the uncertainty before the latest removals (probed path)
	for {
		pt, st, it, err := s.fit(ctx, cur)
		res.Iterations += it
		res.Status = st
		cur = pt
		if err != nil {
			res.Evaluations = s.evals
			fillPoint(res, cur, s)
			return res, err
		}
		if s.s.EstimateOnly {
			fillPoint(res, cur, s)
			res.Evaluations = s.evals
			for i, w := range res.Weight {
				res.ChiSquare += w * res.Residual[i] * res.Residual[i]
			}
			return res, nil
		}
		// On the probed path the outlier test needs of the uncertainty only
		// the degrees of freedom, through the effective number of
		// parameters, which one removal changes by at most one reading's
		// leverage: refits after a removal keep the last one, and the
		// variances are probed again only once no outlier is left.
		var unc *uncert
		if stale != nil {
			unc = s.restat(cur, stale)
		} else if unc, err = s.uncertainty(ctx, cur); err != nil {
			res.Evaluations = s.evals
			fillPoint(res, cur, s)
			return res, err
		}
		worst := s.worstOutliers(cur, unc, s.s.MaxOutliers-len(res.Outliers))
		if len(worst) == 0 && stale != nil {
			stale = nil
			if unc, err = s.uncertainty(ctx, cur); err != nil {
				res.Evaluations = s.evals
				fillPoint(res, cur, s)
				return res, err
			}
			worst = s.worstOutliers(cur, unc, s.s.MaxOutliers-len(res.Outliers))
		}
		if len(worst) == 0 {
			s.fill(res, cur, unc)
			return res, nil
		}
		for _, i := range worst {
			res.Outliers = append(res.Outliers, i)
			s.keep[i] = 0
		}
		cur.cost = s.cost(cur)
		if unc.lev == nil {
			stale = unc
		}
	}
}

// restat is the outlier test's summary at pt with the effective number of
// parameters of an earlier uncertainty prev (see run).
func (s *solver) restat(pt *point, prev *uncert) *uncert {
	u := &uncert{w: s.weights(pt), c: 1, peff: prev.peff, method: prev.method}
	var used float64
	for i, r := range pt.r {
		u.chi2 += u.w[i] * r * r
		used += s.keep[i]
	}
	s.scaleFactor(u, used)
	return u
}

func fillPoint(res *Result, pt *point, s *solver) {
	res.X = append([]float64(nil), pt.x...)
	res.Residual = append([]float64(nil), pt.r...)
	res.Weight = s.weights(pt)
}

// uncert holds the covariance summary at the optimum.
type uncert struct {
	cov      *mat.SymDense // scaled; nil when probed
	vr       []float64     // scaled variances
	method   VarMethod
	lev      []float64 // leverages (nil when not available)
	w        []float64
	chi2     float64
	dof      int
	peff     float64
	c        float64 // CovScale
	fromData bool    // c was estimated from χ²
}

func (s *solver) uncertainty(ctx context.Context, pt *point) (*uncert, error) {
	u := &uncert{w: s.weights(pt), c: 1}
	var used float64
	for i, r := range pt.r {
		u.chi2 += u.w[i] * r * r
		used += s.keep[i]
	}
	n := s.n
	var jw *mat.Dense
	switch {
	case pt.jac != nil:
		jw = weightedRows(pt.jac, u.w)
	case n <= s.s.DenseCovMax:
		if err := s.relinearise(pt); err != nil {
			return nil, err
		}
		jac := mat.NewDense(s.m, n, nil)
		e := make([]float64, n)
		col := make([]float64, s.m)
		for j := range n {
			e[j] = 1
			s.op.MulVec(col, e)
			e[j] = 0
			jac.SetCol(j, col)
		}
		jw = weightedRows(jac, u.w)
	}
	if jw != nil {
		jtj := gram(jw)
		c0, err := invertInfo(jtj, 1, s.prec)
		if err != nil {
			return nil, err
		}
		for j := range n {
			u.peff += 1 - s.prec[j]*c0.At(j, j)
		}
		s.scaleFactor(u, used)
		u.cov = c0
		if u.c != 1 {
			if u.cov, err = invertInfo(jtj, u.c, s.prec); err != nil {
				return nil, err
			}
		}
		u.vr = make([]float64, n)
		for j := range n {
			u.vr[j] = u.cov.At(j, j)
		}
		u.lev = leverages(jw, c0)
		return u, nil
	}
	// Probed variances on the matrix-free path.
	if err := s.relinearise(pt); err != nil {
		return nil, err
	}
	u.method = VarProbed
	if s.sa != nil && s.pre == nil {
		// The effective number of parameters is a sum over all of them,
		// where the local approximation's variances are good enough (its
		// errors are of either sign and mostly below 1 %): take it from
		// them, and probe once, at the covariance scale it gives.
		if _, bp := s.diagAndBlocks(u.w); bp.set(1, s.prec, 0, nil) {
			for j, v := range bp.localVar(1, s.prec) {
				u.peff += 1 - s.prec[j]*v
			}
			s.scaleFactor(u, used)
			var err error
			if u.vr, _, err = s.probeVar(ctx, u.w, u.c, nil); err != nil {
				return nil, err
			}
			return u, nil
		}
	}
	v0, ys, err := s.probeVar(ctx, u.w, 1, nil)
	if err != nil {
		return nil, err
	}
	for j := range n {
		u.peff += 1 - s.prec[j]*v0[j]
	}
	s.scaleFactor(u, used)
	u.vr = v0
	if u.c != 1 {
		if u.vr, _, err = s.probeVar(ctx, u.w, u.c, ys); err != nil {
			return nil, err
		}
	}
	return u, nil
}

func (s *solver) scaleFactor(u *uncert, used float64) {
	u.dof = int(math.Round(used - u.peff))
	if u.dof <= 0 {
		return
	}
	red := u.chi2 / float64(u.dof)
	switch s.s.Scale {
	case ScaleAlways:
		u.c, u.fromData = red, red > 0
	case ScaleAboveOne:
		if red > 1 {
			u.c, u.fromData = red, true
		}
	}
	if u.c <= 0 {
		u.c, u.fromData = 1, false
	}
}

// invertInfo returns (JᵀWJ/c + P)⁻¹, factorised after symmetric
// equilibration so that badly scaled parameters do not lose digits.
func invertInfo(jtj *mat.SymDense, c float64, prec []float64) (*mat.SymDense, error) {
	n := jtj.SymmetricDim()
	sc := make([]float64, n)
	for j := range n {
		d := jtj.At(j, j)/c + prec[j]
		if !(d > 0) {
			return nil, fmt.Errorf("lsq: parameter %d has no information: %w", j, ErrSingular)
		}
		sc[j] = 1 / math.Sqrt(d)
	}
	b := mat.NewSymDense(n, nil)
	for i := range n {
		for j := i; j < n; j++ {
			v := jtj.At(i, j) / c
			if i == j {
				v += prec[j]
			}
			b.SetSym(i, j, v*sc[i]*sc[j])
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(b) {
		return nil, fmt.Errorf("lsq: not positive definite: %w", ErrSingular)
	}
	if cond := ch.Cond(); cond > 1e15 {
		return nil, fmt.Errorf("lsq: condition number %.3g: %w", cond, ErrSingular)
	}
	inv := mat.NewSymDense(n, nil)
	if err := ch.InverseTo(inv); err != nil {
		return nil, fmt.Errorf("lsq: %v: %w", err, ErrSingular)
	}
	for i := range n {
		for j := i; j < n; j++ {
			inv.SetSym(i, j, inv.At(i, j)*sc[i]*sc[j])
		}
	}
	return inv, nil
}

// probeVar estimates diag((JᵀWJ/c + P)⁻¹): see VarProbed. It returns the
// probe solutions y_k of the c = 1 round; a later round with c ≠ 1 passes
// them as warm, and each solve starts from c·y_k, whose residual
// -(c-1)·P·y_k is small under a weak prior.
func (s *solver) probeVar(ctx context.Context, w []float64, c float64, warm [][]float64) ([]float64, [][]float64, error) {
	n, m := s.n, s.m
	diagJ, b := s.diagAndBlocks(w)
	diagA := make([]float64, n)
	for j := range n {
		diagA[j] = diagJ[j]/c + s.prec[j]
		if !(diagA[j] > 0) {
			return nil, nil, fmt.Errorf("lsq: parameter %d has no information: %w", j, ErrSingular)
		}
	}
	precond := func(dst, r []float64) {
		for j := range dst {
			dst[j] = r[j] / diagA[j]
		}
	}
	// With a block preconditioner M the probes estimate only
	// diag(A⁻¹ - M⁻¹), M⁻¹'s own diagonal being exact (a control variate),
	// and entry j of each probe is ±1/√v̂_j with v̂ the variance M gives
	// (see VarProbed).
	var bp *blockPrec
	var mdiag, vhat []float64
	if b != nil && b.set(c, s.prec, 0, nil) {
		bp, precond = b, b.solve
		mdiag, vhat = b.invDiag(), b.localVar(c, s.prec)
	}
	// One product operator and scratch vector per goroutine: the problem
	// itself and, on the others, its forks (see Forker).
	workers := s.probeWorkers()
	applies := make([]func(dst, v []float64), workers)
	// appliesN[k] is applies[k] on a batch, when the products come in
	// batches (MultiOperator); nil otherwise.
	appliesN := make([]func(dst, v [][]float64), workers)
	for k := range workers {
		op := s.op
		if k > 0 {
			op = s.op.(Forker).Fork()
		}
		if mop, ok := op.(MultiOperator); ok {
			var tms [][]float64
			appliesN[k] = func(dst, v [][]float64) {
				for len(tms) < len(v) {
					tms = append(tms, make([]float64, m))
				}
				tm := tms[:len(v)]
				mop.MulVecs(tm, v)
				for q := range tm {
					for i := range tm[q] {
						tm[q][i] *= w[i] / c
					}
				}
				mop.MulTransVecs(dst, tm)
				for q := range dst {
					for j := range n {
						dst[q][j] += s.prec[j] * v[q][j]
					}
				}
			}
		}
		tm := make([]float64, m)
		applies[k] = func(dst, v []float64) {
			op.MulVec(tm, v)
			for i := range tm {
				tm[i] *= w[i] / c
			}
			op.MulTransVec(dst, tm)
			for j := range n {
				dst[j] += s.prec[j] * v[j]
			}
		}
	}
	maxProbes, adaptive := s.s.Probes, s.s.adaptiveProbes
	if warm != nil {
		maxProbes, adaptive = len(warm), false
	}
	rng := rand.New(rand.NewPCG(s.s.Seed, 0x2545f4914f6cdd1d))
	sum := make([]float64, n)   // Σ_k e_jk, the per-probe estimates
	sumSq := make([]float64, n) // Σ_k e_jk²
	var ys [][]float64
	// The probes run in batches of minProbes, the adaptive test's step:
	// each batch's vectors are drawn in probe order, solved on the
	// goroutines, and summed in probe order, so that the sums are those of
	// one probe after the other.
	zs := make([][]float64, minProbes)
	mzs := make([][]float64, minProbes)
	out := make([][]float64, minProbes)
	oks := make([]bool, minProbes)
	probes := 0
	for probes < maxProbes {
		if err := ctx.Err(); err != nil {
			return nil, nil, fmt.Errorf("lsq: variance probes: %w", err)
		}
		nb := min(minProbes, maxProbes-probes)
		for b := range nb {
			if zs[b] == nil {
				zs[b] = make([]float64, n)
			}
			z := zs[b]
			for j := range z {
				z[j] = 1
				if rng.Uint64()&1 == 1 {
					z[j] = -1
				}
				if vhat != nil {
					z[j] /= math.Sqrt(vhat[j])
				}
			}
		}
		// startOf is probe b's starting vector for pcg.
		startOf := func(b int) []float64 {
			z := zs[b]
			var start []float64
			if bp != nil {
				if mzs[b] == nil {
					mzs[b] = make([]float64, n)
				}
				bp.solve(mzs[b], z)
				start = append([]float64(nil), mzs[b]...)
			}
			if warm != nil {
				start = append(start[:0], warm[probes+b]...)
				floats.Scale(c, start)
			}
			return start
		}
		multi := true
		for _, a := range appliesN {
			multi = multi && a != nil
		}
		if multi {
			// A few probes side by side per goroutine, each by pcg's
			// own operations (pcgN): the same results as one by one.
			groups := (nb + probeGroup - 1) / probeGroup
			parallel.For(workers, groups, func(wk, g int) {
				lo, hi := g*probeGroup, min((g+1)*probeGroup, nb)
				for b := lo; b < hi; b++ {
					out[b], oks[b] = nil, false
				}
				if ctx.Err() != nil {
					return
				}
				starts := make([][]float64, hi-lo)
				for b := lo; b < hi; b++ {
					starts[b-lo] = startOf(b)
				}
				ys, ok := pcgN(appliesN[wk], precond, zs[lo:hi], starts, probeTol, s.s.CGMaxIter)
				copy(out[lo:hi], ys)
				copy(oks[lo:hi], ok)
			})
		} else {
			parallel.For(workers, nb, func(wk, b int) {
				out[b], oks[b] = nil, false
				if ctx.Err() != nil {
					return
				}
				out[b], oks[b] = pcg(applies[wk], precond, zs[b], startOf(b), probeTol, s.s.CGMaxIter)
			})
		}
		if err := ctx.Err(); err != nil {
			return nil, nil, fmt.Errorf("lsq: variance probes: %w", err)
		}
		done := false
		for b := range nb {
			z, y := zs[b], out[b]
			if !oks[b] {
				return nil, nil, fmt.Errorf("lsq: conjugate gradients did not converge on the information matrix: %w", ErrSingular)
			}
			for j := range n {
				e := z[j] * y[j]
				if bp != nil {
					e = vhat[j] * z[j] * (y[j] - mzs[b][j])
				}
				sum[j] += e
				sumSq[j] += e * e
			}
			if warm == nil {
				ys = append(ys, y)
			}
			probes++
			if adaptive && probes >= minProbes && probes%minProbes == 0 && s.probesEnough(sum, sumSq, mdiag, probes) {
				done = true
				break
			}
		}
		if done {
			break
		}
	}
	v := make([]float64, n)
	for j := range n {
		v[j] = sum[j] / float64(probes)
		if mdiag == nil {
			v[j] = max(v[j], 1/diagA[j])
			continue
		}
		// No clip at 1/A_jj here: A_jj is itself estimated, and an
		// estimate on the low side would lift a good variance to it. The
		// floor only keeps a variance positive.
		v[j] = max(v[j]+mdiag[j], vhat[j]*varFloor)
	}
	return v, ys, nil
}

// probeWorkers is the number of goroutines for the variance probes: one
// unless the problem forks its products (Forker).
func (s *solver) probeWorkers() int {
	if _, ok := s.op.(Forker); !ok {
		return 1
	}
	return max(s.s.Workers, 1)
}

// probesEnough reports whether the standard error of the probed variances,
// estimated from the spread of the per-probe estimates, is below
// Settings.ProbeTol relative to the variance for all but 1 % of the
// parameters (a few always mix with everything: the header and the pump
// of a calibration, which it recomputes exactly).
func (s *solver) probesEnough(sum, sumSq, base []float64, k int) bool {
	n := len(sum)
	bad := 0
	kf := float64(k)
	for j := range n {
		mean := sum[j] / kf
		varE := max(sumSq[j]/kf-mean*mean, 0) * kf / (kf - 1)
		v := mean
		if base != nil {
			v += base[j]
		}
		if !(v > 0) || math.Sqrt(varE/kf) > s.s.ProbeTol*v {
			bad++
		}
	}
	return bad <= n/100
}

// pcg solves A y = b by preconditioned conjugate gradients (Hestenes &
// Stiefel 1952; Saad 2003, "Iterative Methods for Sparse Linear Systems",
// Alg. 9.1), precond setting dst = M⁻¹ r.
// y0, when not nil, is the starting guess and is overwritten.
func pcg(apply, precond func(dst, v []float64), b, y0 []float64, tol float64, maxIter int) ([]float64, bool) {
	n := len(b)
	y := y0
	r := append([]float64(nil), b...)
	if y == nil {
		y = make([]float64, n)
	} else {
		ay := make([]float64, n)
		apply(ay, y)
		floats.Sub(r, ay)
	}
	z := make([]float64, n)
	precond(z, r)
	p := append([]float64(nil), z...)
	rz := floats.Dot(r, z)
	bnorm := floats.Norm(b, 2)
	if bnorm == 0 {
		return y, true
	}
	ap := make([]float64, n)
	for range maxIter {
		if floats.Norm(r, 2) <= tol*bnorm {
			return y, true
		}
		apply(ap, p)
		pap := floats.Dot(p, ap)
		if !(pap > 0) {
			return y, false
		}
		alpha := rz / pap
		floats.AddScaled(y, alpha, p)
		floats.AddScaled(r, -alpha, ap)
		precond(z, r)
		rzNew := floats.Dot(r, z)
		beta := rzNew / rz
		rz = rzNew
		for j := range n {
			p[j] = z[j] + beta*p[j]
		}
	}
	return y, floats.Norm(r, 2) <= tol*bnorm
}

// probeGroup is the number of probes a goroutine runs side by side when
// the products come in batches: the network's solves go four at a time.
const probeGroup = 4

// pcgN runs pcg on each right-hand side bs[k] from ys0[k] (nil: zero), side
// by side: every iteration takes the products of the systems still
// iterating together (applyN), and each system's every other operation is
// pcg's own in pcg's order, so each result and flag is pcg's to the bit.
func pcgN(applyN func(dst, v [][]float64), precond func(dst, v []float64), bs, ys0 [][]float64, tol float64, maxIter int) ([][]float64, []bool) {
	type sys struct {
		y, r, z, p, ap []float64
		rz, bnorm      float64
		done, ok       bool
	}
	ss := make([]sys, len(bs))
	var idx []int
	for k, b := range bs {
		sy := &ss[k]
		sy.y = ys0[k]
		sy.r = append([]float64(nil), b...)
		if sy.y == nil {
			sy.y = make([]float64, len(b))
		} else {
			idx = append(idx, k)
		}
	}
	if len(idx) > 0 {
		ays, ys := make([][]float64, len(idx)), make([][]float64, len(idx))
		for q, k := range idx {
			ays[q], ys[q] = make([]float64, len(bs[k])), ss[k].y
		}
		applyN(ays, ys)
		for q, k := range idx {
			floats.Sub(ss[k].r, ays[q])
		}
	}
	for k, b := range bs {
		sy := &ss[k]
		n := len(b)
		sy.z = make([]float64, n)
		precond(sy.z, sy.r)
		sy.p = append([]float64(nil), sy.z...)
		sy.rz = floats.Dot(sy.r, sy.z)
		sy.bnorm = floats.Norm(b, 2)
		if sy.bnorm == 0 {
			sy.done, sy.ok = true, true
			continue
		}
		sy.ap = make([]float64, n)
	}
	act := make([]int, 0, len(bs))
	var aps, ps [][]float64
	for range maxIter {
		act, aps, ps = act[:0], aps[:0], ps[:0]
		for k := range ss {
			sy := &ss[k]
			if sy.done {
				continue
			}
			if floats.Norm(sy.r, 2) <= tol*sy.bnorm {
				sy.done, sy.ok = true, true
				continue
			}
			act, aps, ps = append(act, k), append(aps, sy.ap), append(ps, sy.p)
		}
		if len(act) == 0 {
			break
		}
		applyN(aps, ps)
		for _, k := range act {
			sy := &ss[k]
			pap := floats.Dot(sy.p, sy.ap)
			if !(pap > 0) {
				sy.done, sy.ok = true, false
				continue
			}
			alpha := sy.rz / pap
			floats.AddScaled(sy.y, alpha, sy.p)
			floats.AddScaled(sy.r, -alpha, sy.ap)
			precond(sy.z, sy.r)
			rzNew := floats.Dot(sy.r, sy.z)
			beta := rzNew / sy.rz
			sy.rz = rzNew
			for j := range sy.p {
				sy.p[j] = sy.z[j] + beta*sy.p[j]
			}
		}
	}
	ys, oks := make([][]float64, len(bs)), make([]bool, len(bs))
	for k := range ss {
		sy := &ss[k]
		if !sy.done {
			sy.ok = floats.Norm(sy.r, 2) <= tol*sy.bnorm
		}
		ys[k], oks[k] = sy.y, sy.ok
	}
	return ys, oks
}

// worstOutliers returns the used observation with the largest |t_i| above
// the threshold, or with Settings.OutlierGroups the largest of each group,
// worst first and at most limit of them; none when none exceeds it.
func (s *solver) worstOutliers(pt *point, u *uncert, limit int) []int {
	if s.s.OutlierZ < 0 || limit <= 0 {
		return nil
	}
	type cand struct {
		i int
		t float64
	}
	best := map[int]cand{} // group -> worst
	for i, r := range pt.r {
		if s.keep[i] == 0 {
			continue
		}
		h := 0.0
		if u.lev != nil {
			h = u.lev[i]
		}
		if 1-h < 1e-8 {
			continue // the observation alone fixes the fit there: untestable
		}
		c := 1.0
		if u.dof > 1 && s.s.Scale != ScaleNever {
			ci := (u.chi2 - u.w[i]*r*r/(1-h)) / float64(u.dof-1)
			switch s.s.Scale {
			case ScaleAlways:
				c = ci
			case ScaleAboveOne:
				c = max(1, ci)
			}
		}
		if !(c > 0) {
			continue
		}
		t := math.Abs(r) / math.Sqrt((1-h)*c)
		if t <= s.s.OutlierZ {
			continue
		}
		g := 0
		if s.s.OutlierGroups != nil {
			g = s.s.OutlierGroups[i]
		}
		if b, ok := best[g]; !ok || t > b.t {
			best[g] = cand{i, t}
		}
	}
	out := make([]cand, 0, len(best))
	for _, c := range best {
		out = append(out, c)
	}
	slices.SortFunc(out, func(a, b cand) int {
		if a.t != b.t {
			return cmp.Compare(b.t, a.t)
		}
		return cmp.Compare(a.i, b.i)
	})
	idx := make([]int, 0, min(len(out), limit))
	for _, c := range out[:min(len(out), limit)] {
		idx = append(idx, c.i)
	}
	return idx
}

func (s *solver) fill(res *Result, pt *point, u *uncert) {
	n := s.n
	fillPoint(res, pt, s)
	res.Evaluations = s.evals
	res.Weight = u.w
	res.Cov = u.cov
	res.Var = u.vr
	res.VarMethod = u.method
	res.ChiSquare = u.chi2
	res.DOF = u.dof
	res.EffectiveParams = u.peff
	if u.dof > 0 {
		res.ReducedChiSquare = u.chi2 / float64(u.dof)
	}
	res.CovScale = u.c
	res.TQuantile = distuv.UnitNormal.Quantile(0.975)
	if u.fromData && u.dof > 0 {
		res.TQuantile = distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(u.dof)}.Quantile(0.975)
	}
	res.StdErr = make([]float64, n)
	res.Lo95 = make([]float64, n)
	res.Hi95 = make([]float64, n)
	res.Determined = make([]bool, n)
	for j := range n {
		sd := math.Sqrt(u.vr[j])
		res.StdErr[j] = sd
		res.Lo95[j] = pt.x[j] - res.TQuantile*sd
		res.Hi95[j] = pt.x[j] + res.TQuantile*sd
		res.Determined[j] = s.prec[j] == 0 || sd < determinedAt/math.Sqrt(s.prec[j])
	}
}
