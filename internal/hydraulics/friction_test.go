package hydraulics

import (
	"errors"
	"fmt"
	"math"
	"testing"
)

func TestFrictionFactorColebrook(t *testing.T) {
	// [C] computed from the Colebrook-White equation: the "table" column is
	// references §2.2 (6 decimals, Newton solution); the "exact" column was
	// computed independently with 40-digit decimal arithmetic (Python
	// decimal, Newton to convergence) and matches the table to all printed
	// digits.
	tests := []struct {
		re, rr       float64
		table, exact float64
	}{
		{4000, 0, 0.039907, 0.039907014055634897},
		{1e4, 0, 0.030883, 0.03088295035348769},
		{1e5, 0, 0.017990, 0.017989773084273838},
		{1e6, 0, 0.011645, 0.011645040997991624},
		{1e7, 0, 0.008103, 0.0081026694308749137},
		{1e4, 1e-3, 0.032382, 0.032381806363092722},
		{5e4, 2e-3, 0.026506, 0.026505591909046385},
		{1e5, 1e-4, 0.018514, 0.018513866077471644},
		{1e5, 1e-3, 0.022175, 0.022174535944515076},
		{1e5, 1e-2, 0.038504, 0.038503543527335093},
		{2e5, 5e-5, 0.016036, 0.016036129774129992},
		{1e6, 1e-4, 0.013441, 0.013441437692508492},
		{1e6, 1e-3, 0.019943, 0.019943465840476866},
		{1e7, 1e-5, 0.008996, 0.0089957117448344406},
		{1e8, 1e-6, 0.006433, 0.0064325565196922795},
	}
	for _, tc := range tests {
		t.Run(fmt.Sprintf("Re=%g,eps/D=%g", tc.re, tc.rr), func(t *testing.T) {
			f, err := FrictionFactor(tc.re, tc.rr)
			if err != nil {
				t.Fatalf("FrictionFactor(%g, %g): %v", tc.re, tc.rr, err)
			}
			if e := relErr(f, tc.exact); e > 1e-12 {
				t.Errorf("FrictionFactor(%g, %g) = %.17g, want %.17g (rel %.2g > 1e-12)", tc.re, tc.rr, f, tc.exact, e)
			}
			if math.Abs(f-tc.table) > 5e-7 {
				t.Errorf("FrictionFactor(%g, %g) = %.7f, references table %.6f", tc.re, tc.rr, f, tc.table)
			}
			// The solution must satisfy the Colebrook-White equation itself
			// to rounding.
			x := 1 / math.Sqrt(f)
			res := x + 2*math.Log10(tc.rr/3.7+2.51*x/tc.re)
			if math.Abs(res) > 1e-13*x {
				t.Errorf("Colebrook residual at Re=%g: %g", tc.re, res)
			}
		})
	}
}

// newtonColebrook solves the Colebrook-White equation for x = 1/√f by plain
// Newton iteration from x = 8 until the iterate repeats, independently of
// the production start and step.
func newtonColebrook(re, rr float64) float64 {
	a, b := rr/3.7, 2.51/re
	x := 8.0
	for range 200 {
		s := a + b*x
		next := x - (x+2*math.Log10(s))/(1+2*b/(s*math.Ln10))
		if next == x {
			break
		}
		x = next
	}
	return 1 / (x * x)
}

// TestColebrookMachinePrecision checks the two-step solution over a dense
// grid of the Moody chart and beyond (Re 4000 to 1e9, ε/D 0 and 1e-8 to
// 0.1) against Newton's method run to its fixed point: they must agree to a
// few ulp (4e-15 relative, the spread of two correctly converged float64
// solutions), and the equation's residual must vanish to rounding.
func TestColebrookMachinePrecision(t *testing.T) {
	rrs := []float64{0}
	for e := -8.0; e <= -1; e += 0.125 {
		rrs = append(rrs, math.Pow(10, e))
	}
	var worst float64
	for _, rr := range rrs {
		for e := math.Log10(TurbulentLimit); e <= 9; e += 1.0 / 64 {
			re := math.Pow(10, e)
			f, err := FrictionFactor(re, rr)
			if err != nil {
				t.Fatalf("FrictionFactor(%g, %g): %v", re, rr, err)
			}
			want := newtonColebrook(re, rr)
			worst = max(worst, relErr(f, want))
			if relErr(f, want) > 4e-15 {
				t.Errorf("FrictionFactor(%g, %g) = %.17g, Newton to convergence %.17g (rel %.2g)", re, rr, f, want, relErr(f, want))
			}
			x := 1 / math.Sqrt(f)
			if res := x + 2*math.Log10(rr/3.7+2.51*x/re); math.Abs(res) > 1e-13*x {
				t.Errorf("Colebrook residual at Re=%g, eps/D=%g: %g", re, rr, res)
			}
		}
	}
	t.Logf("largest relative difference from Newton: %.2g", worst)
}

// TestClamondStepOrder checks the convergence order colebrook relies on:
// from u* + d, one step (with the exact G) leaves an error that shrinks as
// d⁴ (a tenth of d, a ten-thousandth of the error, within a factor 3),
// where u* = x ln10/2 is Newton's converged solution.
func TestClamondStepOrder(t *testing.T) {
	for _, c := range []struct{ re, rr float64 }{{1e4, 0}, {1e5, 1e-3}, {4000, 0.05}} {
		a, beta := c.rr/3.7, 5.02/(c.re*math.Ln10)
		x1 := a / beta
		star := math.Ln10 / 2 / math.Sqrt(newtonColebrook(c.re, c.rr))
		after := func(d float64) float64 {
			u := star + d
			return math.Abs(u - clamondStep(u, x1, u+math.Log(a+beta*u)) - star)
		}
		e1, e2 := after(0.3), after(0.03)
		if r := e1 / e2; !(r > 1e4/3 && r < 3e4) {
			t.Errorf("Re=%g, eps/D=%g: errors %.3g from 0.3 and %.3g from 0.03 (ratio %.3g, want about 1e4)", c.re, c.rr, e1, e2, r)
		}
	}
}

// TestLnApprox checks the approximate logarithm against math.Log within
// its stated 1.1e-5, from the arguments of colebrook's first step (1e-10 and
// up) through the Reynolds numbers it sees and beyond.
func TestLnApprox(t *testing.T) {
	for e := -300.0; e <= 300; e += 0.001 {
		x := math.Pow(10, e)
		if d := math.Abs(lnApprox(x) - math.Log(x)); d > 1.1e-5 {
			t.Fatalf("lnApprox(%g) = %g, math.Log %g (error %.2g > 1.1e-5)", x, lnApprox(x), math.Log(x), d)
		}
	}
}

func TestFrictionFactorLaminar(t *testing.T) {
	// Hagen-Poiseuille, closed form: f = 64/Re.
	for _, re := range []float64{1e-3, 1, 100, 1000, 2000} {
		f, err := FrictionFactor(re, 1e-3)
		if err != nil {
			t.Fatalf("FrictionFactor(%g): %v", re, err)
		}
		if relErr(f, 64/re) > 1e-15 {
			t.Errorf("FrictionFactor(%g) = %g, want 64/Re = %g", re, f, 64/re)
		}
	}
}

// TestFrictionFactorWhiteExample67 checks the pipe-friction worked example of
// F. M. White, Fluid Mechanics (Example 6.7 in the 4th-7th editions, after
// Moody 1944): oil, ν = 1e-5 m2/s, 0.2 m3/s through 500 m of 200 mm
// cast-iron pipe, ε = 0.26 mm, Re ≈ 128 000, ε/D = 0.0013; the Moody-chart
// reading printed is f ≈ 0.0225 (found in a stored copy of the text); the
// answer head loss ≈ 117 m is from memory. Chart readings carry ~2 digits,
// so the tolerance is 2 %.
func TestFrictionFactorWhiteExample67(t *testing.T) {
	p := Pipe{Bore: 0.2, Length: 500, Roughness: 0.26e-3}
	oil := water20
	oil.Density = 900
	oil.Viscosity = 900 * 1e-5
	q := 0.2
	re := p.Reynolds(q, oil)
	if relErr(re, 128000) > 0.01 {
		t.Errorf("Reynolds = %g, want about 128000", re)
	}
	f, err := FrictionFactor(re, p.Roughness/p.Bore)
	if err != nil {
		t.Fatal(err)
	}
	if relErr(f, 0.0225) > 0.02 {
		t.Errorf("f = %.4f, White's Moody-chart reading 0.0225", f)
	}
	dp, _ := p.Drop(q, oil)
	hf := dp / (oil.Density * 9.80665)
	if relErr(hf, 117) > 0.02 {
		t.Errorf("head loss = %.1f m, want about 117 m", hf)
	}
}

func TestFrictionFactorSlope(t *testing.T) {
	// The analytic df/dRe (implicit Colebrook derivative, Hermite
	// derivative) against a central difference.
	for _, rr := range []float64{0, 1e-5, 1e-3, 0.05} {
		for _, re := range []float64{500, 1999, 2001, 2500, 3000, 3999, 4001, 1e4, 1e5, 1e7} {
			_, d, err := FrictionFactorSlope(re, rr)
			if err != nil {
				t.Fatal(err)
			}
			h := 1e-5 * re
			fu, _ := FrictionFactor(re+h, rr)
			fd, _ := FrictionFactor(re-h, rr)
			want := (fu - fd) / (2 * h)
			if relErr(d, want) > 1e-6 {
				t.Errorf("df/dRe(Re=%g, eps/D=%g) = %.10g, finite difference %.10g", re, rr, d, want)
			}
		}
	}
}

// TestFrictionTransition checks the Hermite bridge is continuous with both
// laws and keeps the pressure drop (∝ f Re²) strictly increasing in flow:
// d(f Re²)/dRe = Re (2f + Re f') > 0, which the network solver relies on.
func TestFrictionTransition(t *testing.T) {
	for _, rr := range []float64{0, 1e-4, 1e-3, 1e-2, 0.05, MaxRelRoughness} {
		lo, _ := FrictionFactor(LaminarLimit, rr)
		lo2, _ := FrictionFactor(math.Nextafter(LaminarLimit, 3000), rr)
		hi, _ := FrictionFactor(TurbulentLimit, rr)
		hi2, _ := FrictionFactor(math.Nextafter(TurbulentLimit, 3000), rr)
		if relErr(lo2, lo) > 1e-12 || relErr(hi2, hi) > 1e-12 {
			t.Errorf("eps/D=%g: discontinuity: %g|%g at 2000, %g|%g at 4000", rr, lo, lo2, hi2, hi)
		}
		for re := LaminarLimit; re <= TurbulentLimit; re += 10 {
			f, d, _ := FrictionFactorSlope(re, rr)
			if !(f > 0) || !(2*f+re*d > 0) {
				t.Errorf("eps/D=%g Re=%g: f=%g, 2f+Re f'=%g: want both positive", rr, re, f, 2*f+re*d)
			}
		}
	}
}

func TestFrictionFactorErrors(t *testing.T) {
	tests := []struct {
		name   string
		re, rr float64
	}{
		{"zero Re", 0, 1e-3},
		{"negative Re", -10, 1e-3},
		{"NaN Re", math.NaN(), 1e-3},
		{"infinite Re", math.Inf(1), 1e-3},
		{"negative roughness", 1e5, -1e-3},
		{"NaN roughness", 1e5, math.NaN()},
		{"too rough", 1e5, 0.2},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			f, err := FrictionFactor(tc.re, tc.rr)
			if !errors.Is(err, ErrOutOfRange) {
				t.Errorf("FrictionFactor(%g, %g) = %g, %v; want ErrOutOfRange", tc.re, tc.rr, f, err)
			}
		})
	}
}

func BenchmarkFrictionFactor(b *testing.B) {
	for _, re := range []float64{1000, 3000, 1e4, 1e6} {
		b.Run(fmt.Sprintf("Re=%g", re), func(b *testing.B) {
			for b.Loop() {
				_, _ = FrictionFactor(re, 1e-3)
			}
		})
	}
}
