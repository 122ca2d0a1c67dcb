package hydraulics

import (
	"fmt"
	"math"
)

// Reynolds-number limits of the friction law. Below LaminarLimit the flow is
// taken as laminar (f = 64/Re, Hagen-Poiseuille); above TurbulentLimit the
// Colebrook-White equation applies; in between a smooth transition is used.
const (
	LaminarLimit   = 2000.0
	TurbulentLimit = 4000.0
)

// MaxRelRoughness is the largest relative roughness ε/D accepted: the upper
// edge of the Moody chart (0.05) with some margin. Beyond it the
// Colebrook-White equation is an extrapolation with no experimental support.
const MaxRelRoughness = 0.1

// FrictionFactor returns the Darcy friction factor f for a Reynolds number re
// > 0 and a relative roughness relRough = ε/D in [0, MaxRelRoughness].
//
// Laminar (re <= 2000): f = 64/Re (Hagen-Poiseuille, exact).
// Turbulent (re >= 4000): the Colebrook-White equation (Colebrook, J. Inst.
// Civil Eng. 11 (1939) 133-156),
//
//	1/√f = -2 log10( (ε/D)/3.7 + 2.51/(Re √f) ),
//
// solved by Newton's method on x = 1/√f from Haaland's explicit estimate
// (J. Fluids Eng. 105 (1983) 89-90) to machine precision (2-4 iterations;
// the last step is skipped once quadratic convergence guarantees it would be
// below an ulp).
// Transition (2000 < re < 4000): a cubic Hermite interpolation in Re between
// the laminar law at 2000 and Colebrook-White at 4000, matching values and
// slopes at both ends. This is an engineering convention chosen so the
// pressure drop and its derivative are continuous for Newton's method; no
// standard defines the friction factor in this range, where real flow is
// intermittent and the factor is not reproducible.
//
// At re = 0 the friction factor is infinite; use Pipe.Drop, which works with
// the finite product f·Re in laminar flow.
func FrictionFactor(re, relRough float64) (f float64, err error) {
	f, _, err = FrictionFactorSlope(re, relRough)
	return f, err
}

// FrictionFactorSlope returns the Darcy friction factor as FrictionFactor
// does, and its exact derivative df/dRe (the implicit derivative of the
// Colebrook-White equation in turbulent flow).
func FrictionFactorSlope(re, relRough float64) (f, dfdRe float64, err error) {
	if !(re > 0) || math.IsInf(re, 1) {
		return 0, 0, fmt.Errorf("friction factor: reynolds number %g must be positive and finite: %w", re, ErrOutOfRange)
	}
	if !(relRough >= 0) || relRough > MaxRelRoughness {
		return 0, 0, fmt.Errorf("friction factor: relative roughness %g outside [0, %g]: %w", relRough, MaxRelRoughness, ErrOutOfRange)
	}
	f, dfdRe = friction(re, relRough)
	return f, dfdRe, nil
}

// friction is FrictionFactorSlope without argument checks, for the inner
// loop of Pipe.Drop.
func friction(re, rr float64) (f, df float64) {
	switch {
	case re <= LaminarLimit:
		return 64 / re, -64 / (re * re)
	case re >= TurbulentLimit:
		return colebrook(re, rr)
	}
	// Cubic Hermite basis on t in [0, 1] over Re in [2000, 4000].
	const h = TurbulentLimit - LaminarLimit
	f0, m0 := 64/LaminarLimit, -64/(LaminarLimit*LaminarLimit)
	f1, m1 := colebrook(TurbulentLimit, rr)
	t := (re - LaminarLimit) / h
	t2, t3 := t*t, t*t*t
	h00, h10, h01, h11 := 2*t3-3*t2+1, t3-2*t2+t, -2*t3+3*t2, t3-t2
	d00, d10, d01, d11 := 6*t2-6*t, 3*t2-4*t+1, -6*t2+6*t, 3*t2-2*t
	f = h00*f0 + h10*h*m0 + h01*f1 + h11*h*m1
	df = (d00*f0+d01*f1)/h + d10*m0 + d11*m1
	return f, df
}

// colebrook solves the Colebrook-White equation F(x) = x + 2 log10(a + b x)
// = 0 with x = 1/√f, a = (ε/D)/3.7, b = 2.51/Re, and returns f and the
// implicit derivative df/dRe = -(∂F/∂Re)/(∂F/∂x) · df/dx.
func colebrook(re, rr float64) (f, df float64) {
	a := rr / 3.7
	b := 2.51 / re
	// Haaland's explicit form as the starting point: within 1.5 % of
	// Colebrook over the Moody chart, so Newton needs few steps.
	t := 6.9 / re
	if a > 0 {
		t += math.Exp(1.11 * math.Log(a))
	}
	x := -1.8 * math.Log10(t)
	var s, dF float64
	for range 50 {
		s = a + b*x
		dF = 1 + 2*b/(s*math.Ln10)
		dx := (x + 2*math.Log10(s)) / dF
		x -= dx
		// Newton converges quadratically with a constant below 1 here
		// (|F''/2F'| < 1 for x > 1), so after a step under 1e-8 the error
		// is below 1e-16, under an ulp of x (x is 3-20 on the Moody chart);
		// stopping then saves the last, ulp-sized step.
		if math.Abs(dx) <= 1e-8 || math.Abs(dx) <= 4*ulp(x) {
			break
		}
	}
	s = a + b*x
	dF = 1 + 2*b/(s*math.Ln10)
	// ∂F/∂Re = 2/(s ln10) · x · db/dRe with db/dRe = -b/Re.
	dxdRe := 2 * x * b / (re * s * math.Ln10 * dF)
	f = 1 / (x * x)
	df = -2 / (x * x * x) * dxdRe
	return f, df
}

// ulp returns the spacing of float64 values at x.
func ulp(x float64) float64 {
	x = math.Abs(x)
	return math.Nextafter(x, math.Inf(1)) - x
}
