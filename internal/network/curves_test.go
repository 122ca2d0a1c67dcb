package network

import (
	"errors"
	"math"
	"testing"

	"flowset/internal/fluid"
	"flowset/internal/hydraulics"
)

const gravity = hydraulics.StandardGravity

func TestElementCurveAndSeries(t *testing.T) {
	pipe := hydraulics.Pipe{Bore: 0.0525, Length: 25, Roughness: 4.5e-5}
	kv := hydraulics.FixedKv{Kv: 6.3}
	for _, q := range []float64{-2e-3, 0, 1e-4, 2.5e-3} {
		dp1, s1 := pipe.Drop(q, water20)
		dp2, s2 := kv.Drop(q, water20)
		// A curve of one element is that element.
		if d, s := ElementCurve(water20, pipe).Drop(q); d != dp1 || s != s1 {
			t.Errorf("ElementCurve(pipe).Drop(%g) = %g, %g; want %g, %g", q, d, s, dp1, s1)
		}
		// Series: drops and slopes add (textbook series rule).
		d, s := Series(ElementCurve(water20, pipe), ElementCurve(water20, kv)).Drop(q)
		if relErr(d, dp1+dp2) > 1e-15 || relErr(s, s1+s2) > 1e-15 {
			t.Errorf("Series.Drop(%g) = %g, %g; want %g, %g", q, d, s, dp1+dp2, s1+s2)
		}
		if d2, _ := ElementCurve(water20, pipe, kv).Drop(q); relErr(d2, dp1+dp2) > 1e-15 {
			t.Errorf("ElementCurve(pipe, kv).Drop(%g) = %g, want %g", q, d2, dp1+dp2)
		}
	}
}

func TestInvert(t *testing.T) {
	cases := []struct {
		name string
		c    Curve
		dp   float64
		want float64
	}{
		{"square law", ElementCurve(water20, quad{4e9}), 1e4, math.Sqrt(1e4 / 4e9)}, // q = sqrt(dp/r)
		{"square law reversed", ElementCurve(water20, quad{4e9}), -1e4, -math.Sqrt(1e4 / 4e9)},
		{"laminar", ElementCurve(water20, lin{2e7}), 3e3, 3e3 / 2e7}, // q = dp/r
		{"tiny flow", ElementCurve(water20, quad{1e14}), 1, 1e-7},
		{"large flow", ElementCurve(water20, quad{1e2}), 1e6, 100},
		{"zero", ElementCurve(water20, quad{1e9}), 0, 0},
		// references §3.1 [C]: Q = 2.5 m3/h at 25 kPa -> Kv = 5.00000.
		{"kv", ElementCurve(kvWater, hydraulics.FixedKv{Kv: 5}), 25e3, 2.5 / 3600},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			q, err := Invert(c.c, c.dp)
			if err != nil {
				t.Fatal(err)
			}
			if relErr(q, c.want) > 1e-12 {
				t.Errorf("Invert(%g) = %.15g, want %.15g", c.dp, q, c.want)
			}
		})
	}
	// A curve that never reaches the drop.
	capped := ElementCurve(water20, capped{})
	if _, err := Invert(capped, 2e4); !errors.Is(err, ErrNoRoot) {
		t.Errorf("Invert beyond a capped curve: error %v, want ErrNoRoot", err)
	}
}

// kvWater is the reference water of the Kv definition (references §3.1,
// water at 15 °C), at which Δp[bar] = (Q[m3/h]/Kv)² holds exactly.
var kvWater = fluid.State{Temperature: 288.15, Density: hydraulics.KvRefDensity, Viscosity: 1.138e-3}

// capped is a drop that saturates at 1e4 Pa (not a real element): its
// inverse does not exist above that.
type capped struct{}

func (capped) Drop(q float64, _ fluid.State) (float64, float64) {
	return 1e4 * math.Tanh(q*1e3), 1e7 / math.Pow(math.Cosh(q*1e3), 2)
}

// explicitColebrookFlow is the exact rearrangement of the Colebrook-White
// equation for the flow at a given friction loss (the "find the flow rate"
// problem of Darcy pipes, solved explicitly because Re√f is known from the
// loss; the same rearrangement underlies Swamee & Jain's 1976 discharge
// formula): with s = sqrt(2 D dp / (ρ L)),
//
//	V = -2 s log10( (ε/D)/3.7 + 2.51 μ / (ρ D s) ),  q = V π D²/4.
func explicitColebrookFlow(p hydraulics.Pipe, dp float64) float64 {
	rho, mu := water20.Density, water20.Viscosity
	s := math.Sqrt(2 * p.Bore * dp / (rho * p.Length))
	v := -2 * s * math.Log10(p.Roughness/p.Bore/3.7+2.51*mu/(rho*p.Bore*s))
	return v * math.Pi / 4 * p.Bore * p.Bore
}

// TestParallelPipes checks real Darcy-Weisbach pipes in parallel.
func TestParallelPipes(t *testing.T) {
	t.Run("two pipes, equal f and D", func(t *testing.T) {
		// Hydraulics exercise (public problem set, from memory of its form):
		// two parallel pipes of equal diameter and f, 100 m and 400 m, carry
		// 0.120 m3/s in total; equal loss h = f (L/D) V²/2g gives q ∝ 1/sqrt(L),
		// so 0.080 and 0.040 m3/s. Constant-f pipes are Fittings with K = f L/D.
		const f, d = 0.02, 0.3
		p := Parallel{Curves: []Curve{
			ElementCurve(water20, hydraulics.Fitting{K: f * 100 / d, Bore: d}),
			ElementCurve(water20, hydraulics.Fitting{K: f * 400 / d, Bore: d}),
		}}
		_, flows, err := p.Split(0.120)
		if err != nil {
			t.Fatal(err)
		}
		for i, want := range []float64{0.080, 0.040} {
			if relErr(flows[i], want) > 1e-12 {
				t.Errorf("q%d = %.15g, want %g", i+1, flows[i], want)
			}
		}
	})
	t.Run("three pipes at 8 m head loss", func(t *testing.T) {
		// Three parallel pipes, f = 0.020, (600 m, 250 mm), (400 m, 200 mm),
		// (300 m, 150 mm), 8.0 m loss between the junctions (hydraulics
		// exercise). Darcy-Weisbach: V_i = sqrt(2 g h D_i / (f L_i)).
		const f, h = 0.020, 8.0
		ls := []float64{600, 400, 300}
		ds := []float64{0.25, 0.20, 0.15}
		var p Parallel
		var want []float64
		var total float64
		for i := range ls {
			p.Curves = append(p.Curves, ElementCurve(water20, hydraulics.Fitting{K: f * ls[i] / ds[i], Bore: ds[i]}))
			q := math.Pi / 4 * ds[i] * ds[i] * math.Sqrt(2*gravity*h*ds[i]/(f*ls[i]))
			want = append(want, q)
			total += q
		}
		dp, flows, err := p.Split(total)
		if err != nil {
			t.Fatal(err)
		}
		if wantDp := water20.Density * gravity * h; relErr(dp, wantDp) > 1e-12 {
			t.Errorf("dp = %.12g Pa, want %.12g (8.0 m)", dp, wantDp)
		}
		for i := range want {
			if relErr(flows[i], want[i]) > 1e-12 {
				t.Errorf("q%d = %.12g, want %.12g", i+1, flows[i], want[i])
			}
		}
	})
	t.Run("colebrook pipes, curve and network", func(t *testing.T) {
		// Steel pipes (ε = 0.045 mm, references §2.4) of DN25, DN32 and DN40
		// Sch 40 bores (references §4.1) in parallel under 20 kPa, all turbulent.
		const dp = 2e4
		pipes := []hydraulics.Pipe{
			{Bore: 0.02664, Length: 12, Roughness: 4.5e-5},
			{Bore: 0.03508, Length: 30, Roughness: 4.5e-5},
			{Bore: 0.04094, Length: 55, Roughness: 4.5e-5},
		}
		n := New(water20)
		a, b := n.AddNode("a"), n.AddNode("b")
		n.FixPressure(a, 2e5+dp)
		n.FixPressure(b, 2e5)
		var p Parallel
		var total float64
		for i, pp := range pipes {
			n.AddLink(string(rune('1'+i)), a, b, pp)
			p.Curves = append(p.Curves, ElementCurve(water20, pp))
			total += explicitColebrookFlow(pp, dp)
		}
		sol := mustSolve(t, n, nil)
		gotDp, flows, err := p.Split(total)
		if err != nil {
			t.Fatal(err)
		}
		if relErr(gotDp, dp) > 1e-9 {
			t.Errorf("Split: dp = %.12g, want %g", gotDp, dp)
		}
		for i, pp := range pipes {
			want := explicitColebrookFlow(pp, dp)
			if relErr(sol.Flow[i], want) > 1e-9 {
				t.Errorf("network: pipe %d flow %.12g, explicit Colebrook %.12g", i, sol.Flow[i], want)
			}
			if relErr(flows[i], want) > 1e-9 {
				t.Errorf("Split: pipe %d flow %.12g, explicit Colebrook %.12g", i, flows[i], want)
			}
		}
	})
}

func TestParallelClosedFormCurves(t *testing.T) {
	// Same closed form as TestParallelClosedForm: dp = Q²/(Σ 1/sqrt(r_j))².
	cases := []struct {
		name string
		r    []float64
		Q    float64
	}{
		{"hardy cross check", []float64{1, 4}, 6}, // references §8.1: q = 4, 2; dp = 16
		{"three", []float64{1e10, 4e10, 9e10}, 3e-3},
		{"reversed", []float64{1e10, 4e10}, -2e-3},
		{"one", []float64{5e9}, 1e-3},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var p Parallel
			var sum float64
			for _, r := range c.r {
				p.Curves = append(p.Curves, ElementCurve(water20, quad{r}))
				sum += 1 / math.Sqrt(r)
			}
			dp, flows, err := p.Split(c.Q)
			if err != nil {
				t.Fatal(err)
			}
			wantDp := math.Copysign(c.Q*c.Q/(sum*sum), c.Q)
			if relErr(dp, wantDp) > 1e-12 {
				t.Errorf("dp = %.15g, want %.15g", dp, wantDp)
			}
			for i, r := range c.r {
				if want := c.Q / (math.Sqrt(r) * sum); relErr(flows[i], want) > 1e-12 {
					t.Errorf("q%d = %.15g, want %.15g", i+1, flows[i], want)
				}
			}
			d, s := p.Drop(c.Q)
			// d(dp)/dQ of dp = Q|Q|/(Σ)² is 2|Q|/(Σ)².
			if relErr(d, wantDp) > 1e-12 || relErr(s, 2*math.Abs(c.Q)/(sum*sum)) > 1e-9 {
				t.Errorf("Drop(%g) = %g, %g; want %g, %g", c.Q, d, s, wantDp, 2*math.Abs(c.Q)/(sum*sum))
			}
		})
	}
	if _, _, err := (Parallel{}).Split(1); !errors.Is(err, ErrInput) {
		t.Errorf("Split with no curves: error %v, want ErrInput", err)
	}
}

// TestOperatingPoint: a pump of gain h0 - a q² on a system r q² runs at
// q = sqrt(h0/(a + r)) (pump and system curves crossing, textbook).
func TestOperatingPoint(t *testing.T) {
	const h0, a, r = 6e4, 2e9, 1e10
	want := math.Sqrt(h0 / (a + r))
	system := ElementCurve(water20, quad{r})
	pumps := []struct {
		name string
		c    Curve
	}{
		{"element form", ElementCurve(water20, pumpQuad{h0, a})},
		{"head curve", headCurve{h0, a}},
	}
	for _, p := range pumps {
		t.Run(p.name, func(t *testing.T) {
			q, dp, err := OperatingPoint(p.c, system)
			if err != nil {
				t.Fatal(err)
			}
			if relErr(q, want) > 1e-12 || relErr(dp, r*want*want) > 1e-12 {
				t.Errorf("OperatingPoint = %.15g, %.15g; want %.15g, %.15g", q, dp, want, r*want*want)
			}
		})
	}
	t.Run("static head above shut-off", func(t *testing.T) {
		high := Series(system, ElementCurve(water20, offset{7e4}))
		if _, _, err := OperatingPoint(pumps[0].c, high); !errors.Is(err, ErrNoRoot) {
			t.Errorf("error %v, want ErrNoRoot", err)
		}
	})
}

// headCurve is a pump head in Pa, h0 - a q|q| (positive head form).
type headCurve struct{ h0, a float64 }

func (h headCurve) Drop(q float64) (float64, float64) {
	return h.h0 - h.a*q*math.Abs(q), -2 * h.a * math.Abs(q)
}

func TestSample(t *testing.T) {
	c := ElementCurve(water20, quad{1e10})
	pts := Sample(c, 2e-3, 5)
	if len(pts) != 5 || pts[0] != [2]float64{0, 0} || pts[4][0] != 2e-3 {
		t.Fatalf("Sample = %v, want 5 points from 0 to 2e-3", pts)
	}
	for _, p := range pts {
		if relErr(p[1], 1e10*p[0]*p[0]) > 1e-15 {
			t.Errorf("Sample point %v, want dp = 1e10 q²", p)
		}
	}
	if got := Sample(c, 1, 0); got != nil {
		t.Errorf("Sample with n = 0 = %v, want nil", got)
	}
}
