package hydraulics

import (
	"errors"
	"fmt"
	"math"
	"testing"
)

const m3h = 1.0 / 3600 // m3/s per m3/h

// testCurve passes through (100 m3/h, 40 m) with shut-off 50 m: H = 50 -
// 10 (q/100 m3/h)².
func testCurve() PumpCurve {
	qr := 100 * m3h
	return PumpCurve{A0: 50, A2: -10 / (qr * qr), QMin: 0, QMax: 150 * m3h}
}

func TestAffinityLawsSI(t *testing.T) {
	// Worked example, processconvert (references §5.1): 1000 -> 1200 rpm,
	// Q 100 m3/h, H 40 m, P 10 kW -> Q 120 m3/h, H 57.6 m, P 17.28 kW.
	c := testCurve()
	r := 1200.0 / 1000
	fast := c.AtSpeed(r)
	q1, h1 := 100*m3h, c.Head(100*m3h)
	if relErr(h1, 40) > 1e-14 {
		t.Fatalf("test curve head at 100 m3/h = %g, want 40", h1)
	}
	q2 := q1 * r
	h2 := fast.Head(q2)
	if relErr(q2/m3h, 120) > 1e-14 || relErr(h2, 57.6) > 1e-14 {
		t.Errorf("at 1200 rpm: Q = %g m3/h, H = %g m; want 120, 57.6", q2/m3h, h2)
	}
	// Power at a constant efficiency (the affinity assumption): P ∝ Q H.
	const eta = 0.7
	rg := water20.Density * StandardGravity
	p1, _ := ShaftPower(q1, rg*h1, eta)
	p2, _ := ShaftPower(q2, rg*h2, eta)
	if relErr(10*p2/p1, 17.28) > 1e-14 {
		t.Errorf("power at 1200 rpm = %g kW, want 17.28", 10*p2/p1)
	}
}

func TestAffinityLawsUS(t *testing.T) {
	// Worked example (references §5.1, [S] with [C] digits): 1750 -> 1450
	// rpm, 100 gpm, 50 ft, 10 hp -> 82.857 gpm, 34.327 ft, 5.688 hp.
	const gpm = 3.785411784e-3 / 60 // m3/s (NIST SP 811 US gallon)
	const ft = 0.3048
	q1, h1 := 100*gpm, 50*ft
	// Any curve through the point: H = 1.25 h1 - 0.25 h1 (q/q1)².
	c := PumpCurve{A0: 1.25 * h1, A2: -0.25 * h1 / (q1 * q1), QMax: 1.5 * q1}
	r := 1450.0 / 1750
	slow := c.AtSpeed(r)
	q2 := q1 * r
	h2 := slow.Head(q2)
	if math.Abs(q2/gpm-82.857) > 5e-4 || math.Abs(h2/ft-34.327) > 5e-4 {
		t.Errorf("at 1450 rpm: %.4f gpm, %.4f ft; want 82.857, 34.327", q2/gpm, h2/ft)
	}
	p1, _ := ShaftPower(q1, 1000*StandardGravity*h1, 0.6)
	p2, _ := ShaftPower(q2, 1000*StandardGravity*h2, 0.6)
	if math.Abs(10*p2/p1-5.688) > 5e-4 {
		t.Errorf("power at 1450 rpm = %.4f hp, want 5.688", 10*p2/p1)
	}
}

func TestFitPumpExact(t *testing.T) {
	// Closed form: points on a quadratic are fitted exactly.
	c := PumpCurve{A0: 32, A1: 150, A2: -4.2e5}
	var pts []PumpPoint
	for q := 0.0; q <= 0.008; q += 0.002 {
		pts = append(pts, PumpPoint{Flow: q, Head: c.Head(q)})
	}
	got, rep, err := FitPump(pts)
	if err != nil {
		t.Fatal(err)
	}
	if relErr(got.A0, c.A0) > 1e-10 || relErr(got.A1, c.A1) > 1e-8 || relErr(got.A2, c.A2) > 1e-10 {
		t.Errorf("FitPump = %+v, want %+v", got, c)
	}
	if rep.RMS > 1e-10 || rep.Poor || !rep.RisingAtLowFlow {
		t.Errorf("report = %+v; want zero residual, not poor, rising at low flow (A1 > 0)", rep)
	}
	if got.QMin != 0 || got.QMax != pts[len(pts)-1].Flow {
		t.Errorf("fitted range [%g, %g], want [0, %g]", got.QMin, got.QMax, pts[len(pts)-1].Flow)
	}
}

func TestFitPumpLeastSquares(t *testing.T) {
	// The defining property of a least-squares fit: residuals orthogonal to
	// each basis function 1, q, q². Points read off an invented curve.
	pts := []PumpPoint{{0, 12.1}, {0.5e-3, 12.0}, {1e-3, 11.5}, {1.5e-3, 10.9}, {2e-3, 9.6}, {2.5e-3, 8.2}, {3e-3, 6.3}}
	c, rep, err := FitPump(pts)
	if err != nil {
		t.Fatal(err)
	}
	var s0, s1, s2, ss, mx float64
	for _, p := range pts {
		r := p.Head - c.Head(p.Flow)
		x := p.Flow / 3e-3
		s0 += r
		s1 += r * x
		s2 += r * x * x
		ss += r * r
		mx = max(mx, math.Abs(r))
	}
	for i, s := range []float64{s0, s1, s2} {
		if math.Abs(s) > 1e-12 {
			t.Errorf("residuals not orthogonal to basis %d: %g", i, s)
		}
	}
	if relErr(rep.RMS, math.Sqrt(ss/7)) > 1e-12 || relErr(rep.MaxRelResidual, mx/c.A0) > 1e-12 {
		t.Errorf("report = %+v, want RMS %g, max rel %g", rep, math.Sqrt(ss/7), mx/c.A0)
	}
	if rep.Poor {
		t.Errorf("smooth curve flagged poor: %+v", rep)
	}
	// A misread point makes the fit poor.
	pts[3].Head = 12.5
	if _, rep, err := FitPump(pts); err != nil || !rep.Poor {
		t.Errorf("misread point: report %+v, err %v; want Poor", rep, err)
	}
}

func TestFitPumpErrors(t *testing.T) {
	tests := []struct {
		name string
		pts  []PumpPoint
	}{
		{"two points", []PumpPoint{{0, 10}, {1e-3, 8}}},
		{"NaN head", []PumpPoint{{0, 10}, {1e-3, math.NaN()}, {2e-3, 5}}},
		{"infinite flow", []PumpPoint{{0, 10}, {math.Inf(1), 8}, {2e-3, 5}}},
		{"negative head", []PumpPoint{{0, 10}, {1e-3, 8}, {2e-3, -1}}},
		{"negative flow", []PumpPoint{{-1e-3, 10}, {1e-3, 8}, {2e-3, 5}}},
		{"duplicate flow", []PumpPoint{{0, 10}, {1e-3, 8}, {1e-3, 7}}},
		{"decreasing flow", []PumpPoint{{0, 10}, {2e-3, 5}, {1e-3, 8}}},
		{"rising curve", []PumpPoint{{0, 10}, {1e-3, 11}, {2e-3, 13}}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			c, _, err := FitPump(tc.pts)
			if !errors.Is(err, ErrInvalid) {
				t.Errorf("FitPump = %+v, %v; want ErrInvalid", c, err)
			}
		})
	}
}

func TestPumpCurveMaxFlow(t *testing.T) {
	// Closed form: H = 50 - 10 (q/q100)² is zero at q100 √5.
	q, err := testCurve().MaxFlow()
	if err != nil || relErr(q, 100*m3h*math.Sqrt(5)) > 1e-14 {
		t.Errorf("MaxFlow = %g, %v; want %g", q, err, 100*m3h*math.Sqrt(5))
	}
	lin := PumpCurve{A0: 10, A1: -2000}
	if q, err := lin.MaxFlow(); err != nil || relErr(q, 5e-3) > 1e-15 {
		t.Errorf("linear MaxFlow = %g, %v; want 0.005", q, err)
	}
	if _, err := (PumpCurve{A0: 10, A1: 100, A2: 1e3}).MaxFlow(); !errors.Is(err, ErrOutOfRange) {
		t.Errorf("rising MaxFlow error = %v, want ErrOutOfRange", err)
	}
	if got := testCurve().ShutOff(); got != 50 {
		t.Errorf("ShutOff = %g, want 50", got)
	}
}

func pumpCases() []struct {
	name string
	p    Pump
} {
	return []struct {
		name string
		p    Pump
	}{
		{"falling curve", Pump{Curve: testCurve()}},
		{"at 80 % speed", Pump{Curve: testCurve(), Speed: 0.8}},
		{"drooping curve", Pump{Curve: PumpCurve{A0: 32, A1: 150, A2: -4.2e5, QMax: 8e-3}}},
		{"convex curve", Pump{Curve: PumpCurve{A0: 20, A1: -4000, A2: 2e5, QMax: 6e-3}}},
		{"linear curve", Pump{Curve: PumpCurve{A0: 10, A1: -2000}}},
	}
}

func TestPumpDrop(t *testing.T) {
	for _, pc := range pumpCases() {
		t.Run(pc.name, func(t *testing.T) {
			if err := pc.p.Validate(); err != nil {
				t.Fatal(err)
			}
			c := pc.p.Curve.AtSpeed(pc.p.speed())
			floor, _ := c.slopeFloor()
			// Reverse flow, shut-off, duty, run-out and beyond.
			for _, q := range []float64{-5e-3, -1e-4, 0, 1e-4, 1e-3, 3e-3, 5e-3, 8e-3, 0.02} {
				dp, slope := pc.p.Drop(q, water20)
				if math.IsNaN(dp) || !(slope >= water20.Density*StandardGravity*floor*(1-1e-12)) {
					t.Errorf("Drop(%g) = %g, %g: slope below the floor %g", q, dp, slope, water20.Density*StandardGravity*floor)
				}
				checkSlope(t, pc.name, pc.p, q, 1e-2, water20, 1e-6)
			}
		})
	}
	// Where the quadratic is steep enough the element follows it exactly.
	p := Pump{Curve: testCurve()}
	dp, _ := p.Drop(100*m3h, water20)
	if relErr(dp, -water20.Density*StandardGravity*40) > 1e-14 {
		t.Errorf("Drop at duty = %g, want %g", dp, -water20.Density*StandardGravity*40)
	}
}

func TestPumpValidate(t *testing.T) {
	tests := []struct {
		name string
		p    Pump
	}{
		{"negative speed", Pump{Curve: testCurve(), Speed: -1}},
		{"zero shut-off", Pump{Curve: PumpCurve{A1: -1, QMax: 1}}},
		{"rising", Pump{Curve: PumpCurve{A0: 10, A1: 100, A2: 1e3, QMax: 1e-3}}},
		{"no range no run-out", Pump{Curve: PumpCurve{A0: 10, A1: 100, A2: 1e3}}},
		{"NaN", Pump{Curve: PumpCurve{A0: 10, A1: math.NaN(), QMax: 1}}},
		{"bad range", Pump{Curve: PumpCurve{A0: 10, A2: -1, QMin: 2, QMax: 1}}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if err := tc.p.Validate(); !errors.Is(err, ErrInvalid) {
				t.Errorf("Validate() = %v, want ErrInvalid", err)
			}
		})
	}
}

func TestTrimDiameterRatio(t *testing.T) {
	// Closed form: a point on the curve trimmed to 0.92 (diameter affinity,
	// same form as speed) gives back 0.92.
	c := testCurve()
	trimmed := c.AtSpeed(0.92)
	for _, q := range []float64{0, 50 * m3h, 100 * m3h} {
		d, err := TrimDiameterRatio(c, q, trimmed.Head(q))
		if err != nil || math.Abs(d-0.92) > 1e-12 {
			t.Errorf("TrimDiameterRatio at %g m3/h = %g, %v; want 0.92", q/m3h, d, err)
		}
	}
	if _, err := TrimDiameterRatio(c, 100*m3h, 45); !errors.Is(err, ErrOutOfRange) {
		t.Errorf("point above curve: error %v, want ErrOutOfRange", err)
	}
	if _, err := TrimDiameterRatio(c, 100*m3h, -1); !errors.Is(err, ErrInvalid) {
		t.Errorf("negative head: error %v, want ErrInvalid", err)
	}
}

func TestPower(t *testing.T) {
	// P = q dp by definition; shaft power divides by efficiency.
	if got := HydraulicPower(0.01, 2e5); got != 2000 {
		t.Errorf("HydraulicPower = %g, want 2000", got)
	}
	if got, err := ShaftPower(0.01, 2e5, 0.8); err != nil || relErr(got, 2500) > 1e-15 {
		t.Errorf("ShaftPower = %g, %v; want 2500", got, err)
	}
	for _, eta := range []float64{0, -0.5, 1.2, math.NaN()} {
		if _, err := ShaftPower(0.01, 2e5, eta); !errors.Is(err, ErrOutOfRange) {
			t.Errorf("ShaftPower(eta %g) error = %v, want ErrOutOfRange", eta, err)
		}
	}
}

func ExampleFitPump() {
	// Four points read off a circulator's catalogue curve (invented).
	pts := []PumpPoint{
		{Flow: 0, Head: 8.0},
		{Flow: 1.0 / 3600, Head: 7.6},
		{Flow: 2.0 / 3600, Head: 6.5},
		{Flow: 3.0 / 3600, Head: 4.6},
	}
	c, rep, err := FitPump(pts)
	if err != nil {
		fmt.Println(err)
		return
	}
	qmax, _ := c.MaxFlow()
	fmt.Printf("shut-off %.2f m, run-out %.2f m3/h, RMS %.3f m, poor %v\n", c.ShutOff(), qmax*3600, rep.RMS, rep.Poor)
	// Output:
	// shut-off 8.00 m, run-out 4.61 m3/h, RMS 0.011 m, poor false
}

func ExampleTrimDiameterRatio() {
	// A pump giving 40 m at 100 m3/h (shut-off 50 m) must deliver 100 m3/h
	// against a system needing 34 m: how far to trim the impeller?
	qr := 100.0 / 3600
	c := PumpCurve{A0: 50, A2: -10 / (qr * qr), QMax: 1.5 * qr}
	d, err := TrimDiameterRatio(c, qr, 34)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("D2/D1 = %.3f\n", d)
	// Output:
	// D2/D1 = 0.938
}
