package hydraulics

import (
	"math"
	"testing"

	"flowset/internal/fluid"
)

// water20 is liquid water at 20 °C, 1 atm: ρ from IAPWS-IF97 region 1 and μ
// from the IAPWS 2008 viscosity formulation (references §1.3, [C] from the
// IAPWS releases).
var water20 = fluid.State{Temperature: 293.15, Density: 998.2061, Viscosity: 1.0016e-3}

// relErr returns |got-want|/|want|, or |got| when want is zero.
func relErr(got, want float64) float64 {
	if want == 0 {
		return math.Abs(got)
	}
	return math.Abs(got-want) / math.Abs(want)
}

// checkSlope compares an element's analytic slope at q with a central finite
// difference of its drop, to relative tolerance tol. The step is 1e-6 of
// |q| or of qScale, whichever is larger, so rounding of a large drop (a
// pump's) does not swamp the difference near q = 0.
func checkSlope(t *testing.T, name string, e Element, q, qScale float64, f fluid.State, tol float64) {
	t.Helper()
	_, slope := e.Drop(q, f)
	h := 1e-6 * max(math.Abs(q), qScale)
	up, _ := e.Drop(q+h, f)
	dn, _ := e.Drop(q-h, f)
	fd := (up - dn) / (2 * h)
	if math.IsNaN(slope) || math.IsInf(slope, 0) {
		t.Fatalf("%s: slope at q=%g is %g", name, q, slope)
	}
	if relErr(slope, fd) > tol {
		t.Errorf("%s: slope at q=%g: analytic %.12g, finite difference %.12g (rel %.3g > %g)", name, q, slope, fd, relErr(slope, fd), tol)
	}
}

// checkOdd verifies Drop(-q) = -Drop(q) and the slope is even.
func checkOdd(t *testing.T, name string, e Element, q float64, f fluid.State) {
	t.Helper()
	dp, s := e.Drop(q, f)
	dm, sm := e.Drop(-q, f)
	if dm != -dp || sm != s {
		t.Errorf("%s: Drop(%g) = (%g, %g), Drop(%g) = (%g, %g): want odd drop and even slope", name, q, dp, s, -q, dm, sm)
	}
}
