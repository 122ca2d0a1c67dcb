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
// solved to machine precision by two fourth-order steps from a fixed
// starting point, after D. Clamond ("Efficient resolution of the Colebrook
// equation", Ind. Eng. Chem. Res. 48 (2009) 3665-3671); see colebrook.
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

// Constants of colebrook.
const (
	// clamondStart is ln(5.02/ln 10) + 0.2: Clamond's starting point is
	// u0 = ln(Re ln10/5.02) - 0.2.
	clamondStart = 0.979397488455682028
	// twoOverLn10 turns u into x = 1/√f.
	twoOverLn10 = 2 / math.Ln10
)

// colebrook solves the Colebrook-White equation and returns f and the
// implicit derivative df/dRe.
//
// With x = 1/√f = (2/ln 10) u, a = (ε/D)/3.7 and β = 5.02/(Re ln 10) the
// equation is G(u) = u + ln(a + βu) = 0. Clamond (2009, see FrictionFactor;
// the step as recalled from the paper, from memory: the tests check the
// result, not the recollection) starts from u0 = ln(Re ln10/5.02) - 0.2 and
// takes steps
//
//	e = G(u)/(1+w),  u ← u - (1 + w + e/2) e w / (1 + w + e (1 + e/3)),  w = u + a/β,
//
// which converge with fourth order (measured here: the error after a step
// is a constant times the fourth power of the error before it), so two
// steps reach machine precision over the whole Moody chart and beyond.
//
// Three changes make it cheaper. The step's factor is expanded to second
// order in e, u ← u - e w (1 - e r (1/2 + e (1/3 - r/2))) with r = 1/(1+w),
// which keeps the fourth order and needs no division after r (from this
// start e stays below 0.22 and r e below 0.03 in the first step, below 1e-3
// and 1e-4 in the second, for 4000 <= Re <= 1e300 and 0 <= ε/D <= 0.1). G
// is evaluated as u + ln(a + βu), not as Clamond's ln(w) - ln(Re ln10/5.02),
// which avoids the cancellation of two large logarithms, so the start needs
// only an approximate ln Re. And the first step needs only an approximate G:
// an error below 1e-3 in it still leaves the second step's result at machine
// precision, so it uses lnApprox (within 1.1e-5) and only the second step a
// full logarithm. The result is within a few ulp of Newton's method run to
// convergence for 4000 <= Re <= 1e9 and 0 <= ε/D <= 0.1
// (TestColebrookMachinePrecision).
//
// The derivative is that of the implicit function F(x, Re) = x + 2
// log10(a + b x) = 0 with b = 2.51/Re: dx/dRe = -(∂F/∂Re)/(∂F/∂x) =
// 2xb/(Re (s ln10 + 2b)) with s = a + bx, and df/dRe = -2/x³ dx/dRe.
func colebrook(re, rr float64) (f, df float64) {
	inv := 1 / re
	a := rr / 3.7
	b := 2.51 * inv
	beta := twoOverLn10 * b
	x1 := rr * re * (math.Ln10 / (3.7 * 5.02)) // a/β
	u := lnApprox(re) - clamondStart
	u -= clamondStep(u, x1, u+lnApprox(a+beta*u))
	u -= clamondStep(u, x1, u+math.Log(a+beta*u))
	x := twoOverLn10 * u
	s := a + b*x
	x2 := x * x
	f = 1 / x2
	df = -4 * b * inv / (x2 * (s*math.Ln10 + 2*b)) // = -4b f/(Re (s ln10 + 2b)), not waiting for f
	return f, df
}

// clamondStep returns the correction of Clamond's step at u for G(u) = g,
// with the step's factor expanded as colebrook describes.
func clamondStep(u, x1, g float64) float64 {
	w := x1 + u
	r := 1 / (1 + w)
	e := g * r
	return e * w * (1 - e*r*(0.5+e*(1.0/3-0.5*r)))
}

// lnApprox returns ln x for a positive normal x within 1.1e-5: the binary
// exponent times ln 2 plus a quintic in the mantissa's fraction t in [0, 1),
// fitted to ln(1 + t) for the least largest error (by iteratively reweighted
// least squares; no published source, checked against math.Log in the
// test). It stands in for a logarithm where colebrook needs only a few
// correct digits.
func lnApprox(x float64) float64 {
	bits := math.Float64bits(x)
	exp := int(bits>>52&0x7ff) - 1023
	t := math.Float64frombits(bits&(1<<52-1)|1023<<52) - 1
	return float64(exp)*math.Ln2 + t*(0.9994944564+t*(-0.4919024352+t*(0.2894633176+t*(-0.1360564940+t*0.0321583541))))
}
