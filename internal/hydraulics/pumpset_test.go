package hydraulics

import (
	"math"
	"testing"
)

// The rules checked here, for pumps in parallel (flows add at equal head,
// each pump only while the common head is below its shut-off head: its
// non-return valve shuts above it) and in series (heads add at equal flow),
// are the ones every pump handbook states (e.g. Karassik et al., Pump
// Handbook, on combined operation; from memory). The closed forms for n
// identical pumps H0 - aQ² are computed from them: in parallel
// H0 - a(Q/n)², in series n(H0 - aQ²).

// plainCurve is H = h0 - a q² with a flow range wide enough that the
// slope floor only acts near q = 0.
func plainCurve(h0, a float64) PumpCurve {
	return PumpCurve{A0: h0, A2: -a, QMax: math.Sqrt(h0 / a)}
}

func members(cs ...PumpCurve) []SetMember {
	out := make([]SetMember, len(cs))
	for i, c := range cs {
		out[i] = SetMember{Curve: c}
	}
	return out
}

func TestPumpSetIdentical(t *testing.T) {
	const h0, a = 30.0, 2.4e4 // m, m per (m3/s)²: 30 m shut-off, run-out 35 l/s
	c := plainCurve(h0, a)
	for _, tc := range []struct {
		name   string
		n      int
		series bool
	}{
		{"two in parallel", 2, false},
		{"three in parallel", 3, false},
		{"two in series", 2, true},
		{"three in series", 3, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			ms := make([]SetMember, tc.n)
			for i := range ms {
				ms[i] = SetMember{Curve: c}
			}
			set := PumpSet{Members: ms, Series: tc.series}
			if err := set.Validate(); err != nil {
				t.Fatal(err)
			}
			n := float64(tc.n)
			// Away from q = 0, where the slope floor replaces the flat top.
			for _, q := range []float64{0.005, 0.01, 0.02, 0.03, 0.05} {
				var want, wantSlope float64
				if tc.series {
					want, wantSlope = n*(h0-a*q*q), -2*n*a*q
				} else {
					want, wantSlope = h0-a*(q/n)*(q/n), -2*a*q/(n*n)
				}
				h, dh := set.Head(q)
				if relErr(h, want) > 1e-12 && math.Abs(h-want) > 1e-12 {
					t.Errorf("Head(%g) = %.15g m, want %.15g", q, h, want)
				}
				if relErr(dh, wantSlope) > 1e-9 {
					t.Errorf("slope at %g = %.12g, want %.12g", q, dh, wantSlope)
				}
				// The same rules read the other way round: each pump's
				// share against one pump alone.
				flows, heads := set.Flows(q), set.Heads(q)
				for i := range flows {
					if tc.series {
						if flows[i] != q || relErr(heads[i], h/n) > 1e-12 {
							t.Errorf("pump %d in series at %g: flow %g, head %g; want %g, %g", i, q, flows[i], heads[i], q, h/n)
						}
					} else if relErr(flows[i], q/n) > 1e-12 || heads[i] != h {
						t.Errorf("pump %d in parallel at %g: flow %g, head %g; want %g, %g", i, q, flows[i], heads[i], q/n, h)
					}
				}
			}
		})
	}
}

// TestPumpSetOperatingPoint: n identical pumps H0 - aQ² in parallel against
// a system curve bQ² run at H0 - a(Q/n)² = bQ², Q = sqrt(H0/(a/n² + b));
// in series n(H0 - aQ²) = bQ², Q = sqrt(nH0/(na + b)) (computed from the
// parallel and series rules above). The operating point is found from the
// set's Head alone, by bisection on the difference of the two curves.
func TestPumpSetOperatingPoint(t *testing.T) {
	const h0, a, b = 30.0, 2.4e4, 1.2e4
	c := plainCurve(h0, a)
	for _, tc := range []struct {
		name   string
		n      int
		series bool
		want   float64
	}{
		{"one", 1, false, math.Sqrt(h0 / (a + b))},
		{"two in parallel", 2, false, math.Sqrt(h0 / (a/4 + b))},
		{"three in parallel", 3, false, math.Sqrt(h0 / (a/9 + b))},
		{"two in series", 2, true, math.Sqrt(2 * h0 / (2*a + b))},
	} {
		t.Run(tc.name, func(t *testing.T) {
			ms := make([]SetMember, tc.n)
			for i := range ms {
				ms[i] = SetMember{Curve: c}
			}
			set := PumpSet{Members: ms, Series: tc.series}
			lo, hi := 0.0, 1.0
			for range 200 {
				mid := 0.5 * (lo + hi)
				if h, _ := set.Head(mid); h > b*mid*mid {
					lo = mid
				} else {
					hi = mid
				}
			}
			if q := 0.5 * (lo + hi); relErr(q, tc.want) > 1e-10 {
				t.Errorf("operating flow = %.12g m3/s, want %.12g", q, tc.want)
			}
		})
	}
}

// TestPumpSetUnequal: a large and a small pump in parallel. Above the small
// pump's shut-off head its non-return valve is shut and the set is the
// large pump alone; below it the flows at the common head add.
func TestPumpSetUnequal(t *testing.T) {
	big, small := plainCurve(30, 2.4e4), plainCurve(20, 8e4)
	set := PumpSet{Members: members(big, small)}
	// Flows at which the big pump alone is above 20 m: q < sqrt(10/2.4e4).
	for _, q := range []float64{0.005, 0.015, 0.02} {
		h, dh := set.Head(q)
		wh, wd := big.headLimited(q)
		if relErr(h, wh) > 1e-12 || relErr(dh, wd) > 1e-12 {
			t.Errorf("Head(%g) = %g, %g; want the big pump's %g, %g (small one shut)", q, h, dh, wh, wd)
		}
		if fl := set.Flows(q); fl[1] != 0 || relErr(fl[0], q) > 1e-12 {
			t.Errorf("Flows(%g) = %v, want [%g 0]", q, fl, q)
		}
	}
	// Below 20 m both run: each pump's head at its own flow is the
	// common head and the flows add to q.
	for _, q := range []float64{0.03, 0.04, 0.045} {
		h, _ := set.Head(q)
		fl := set.Flows(q)
		if !(fl[1] > 0) {
			t.Fatalf("Flows(%g) = %v: the small pump should run below its shut-off head", q, fl)
		}
		if relErr(fl[0]+fl[1], q) > 1e-12 {
			t.Errorf("flows at %g add to %g", q, fl[0]+fl[1])
		}
		for i, c := range []PumpCurve{big, small} {
			if relErr(c.Head(fl[i]), h) > 1e-12 {
				t.Errorf("pump %d at %g: its head at its flow %g is %g, common head %g", i, q, fl[i], c.Head(fl[i]), h)
			}
		}
	}
}

// TestPumpSetElement: the set's drop is continuous, falls strictly with
// flow (the slope is positive) and its slope matches a finite difference,
// across reverse flow, the cut-in of the small pump and run-out.
func TestPumpSetElement(t *testing.T) {
	big, small := plainCurve(30, 2.4e4), plainCurve(20, 8e4)
	droop := PumpCurve{A0: 18, A1: 300, A2: -6e4, QMax: 0.02} // rises from shut-off
	for _, tc := range []struct {
		name string
		set  PumpSet
	}{
		{"unequal parallel", PumpSet{Members: members(big, small)}},
		{"drooping in parallel", PumpSet{Members: members(droop, droop, small)}},
		{"unequal series", PumpSet{Members: members(big, small), Series: true}},
		{"own speeds", PumpSet{Members: []SetMember{{Curve: big, Speed: 0.9}, {Curve: big}}, Speed: 0.8}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if err := tc.set.Validate(); err != nil {
				t.Fatal(err)
			}
			prev := math.Inf(-1)
			for q := -0.01; q <= 0.08; q += 0.0007 {
				dp, slope := tc.set.Drop(q, water20)
				if !(dp > prev) || !(slope > 0) {
					t.Fatalf("drop at %g = %g (slope %g) after %g: not rising", q, dp, slope, prev)
				}
				prev = dp
				checkSlope(t, tc.name, tc.set, q, 0.03, water20, 1e-5)
			}
		})
	}
}

// TestPumpSetOfOne: a set of one pump is that Pump, bit for bit, so a
// single-pump site solves as before.
func TestPumpSetOfOne(t *testing.T) {
	c := testCurve()
	set := PumpSet{Members: members(c), Speed: 0.85}
	p := Pump{Curve: c, Speed: 0.85}
	for q := -0.01; q < 0.06; q += 0.001 {
		a1, b1 := set.Drop(q, water20)
		a2, b2 := p.Drop(q, water20)
		if a1 != a2 || b1 != b2 {
			t.Fatalf("at %g: set %g, %g; pump %g, %g", q, a1, b1, a2, b2)
		}
	}
	if got, want := set.SpeedFor(0.02, 2e5, water20), SpeedFor(c, 0.02, 2e5, water20); got != want {
		t.Errorf("SpeedFor = %g, want %g", got, want)
	}
}

// TestPumpSetAffinity: a set whose pumps follow its speed obeys the
// affinity laws as one pump does (references §5.1: Q ∝ N, H ∝ N²), and
// SpeedFor finds the speed back.
func TestPumpSetAffinity(t *testing.T) {
	big, small := plainCurve(30, 2.4e4), plainCurve(20, 8e4)
	for _, series := range []bool{false, true} {
		set := PumpSet{Members: members(big, small), Series: series}
		for _, r := range []float64{0.7, 1.1} {
			for _, q := range []float64{0.01, 0.03} {
				h1, _ := set.Head(q)
				h2, _ := set.AtSpeed(r).Head(r * q)
				if relErr(h2, r*r*h1) > 1e-11 {
					t.Errorf("series %v, speed %g, q %g: head %g, want %g", series, r, q, h2, r*r*h1)
				}
				dp := water20.Density * StandardGravity * h2
				if s := set.SpeedFor(r*q, dp, water20); relErr(s, r) > 1e-10 {
					t.Errorf("series %v: SpeedFor = %.12g, want %g", series, s, r)
				}
			}
		}
	}
}

// TestControlledPumpSet: a controlled set holds its set point while the set
// can and runs flat out on the combined curve when it cannot.
func TestControlledPumpSet(t *testing.T) {
	c := plainCurve(30, 2.4e4)
	set := PumpSet{Members: members(c, c)}
	rg := water20.Density * StandardGravity
	cp := ControlledPump{SetPoint: 20 * rg, Set: set}
	if err := cp.Validate(); err != nil {
		t.Fatal(err)
	}
	// Two pumps give 20 m up to 2 sqrt(10/2.4e4) = 40.8 l/s.
	for _, tc := range []struct {
		q         float64
		saturated bool
	}{{0.02, false}, {0.04, false}, {0.042, true}, {0.05, true}} {
		dp, _ := cp.Drop(tc.q, water20)
		if got := cp.Saturated(tc.q, water20); got != tc.saturated {
			t.Errorf("Saturated(%g) = %v, want %v", tc.q, got, tc.saturated)
		}
		want := -cp.SetPoint
		if tc.saturated {
			h, _ := set.Head(tc.q)
			want = -rg * h
		}
		if math.Abs(dp-want) > 1e-3*cp.SetPoint {
			t.Errorf("drop at %g = %g Pa, want %g", tc.q, dp, want)
		}
	}
}

// TestControlledPumpMost: the most a controlled pump can hold at a flow is
// its curve at its maximum speed (affinity laws: head A0 s^2 + A1 q s +
// A2 q^2), for two pumps in parallel each taking half the flow; worked by
// hand.
func TestControlledPumpMost(t *testing.T) {
	c := plainCurve(30, 2.4e4)
	rg := water20.Density * StandardGravity
	for _, tc := range []struct {
		name string
		cp   ControlledPump
		q    float64
		want float64 // m
	}{
		{"one pump at speed 1", ControlledPump{SetPoint: 20 * rg, Curve: c}, 0.02, 30 - 2.4e4*0.02*0.02},
		{"one pump at speed 1.1", ControlledPump{SetPoint: 20 * rg, Curve: c, MaxSpeed: 1.1}, 0.02, 30*1.21 - 2.4e4*0.02*0.02},
		{"two in parallel", ControlledPump{SetPoint: 20 * rg, Set: PumpSet{Members: members(c, c)}}, 0.05, 30 - 2.4e4*0.025*0.025},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if got := tc.cp.Most(tc.q, water20); relErr(got, rg*tc.want) > 1e-9 {
				t.Errorf("Most(%g) = %.6g Pa, want %.6g", tc.q, got, rg*tc.want)
			}
		})
	}
}

func TestEfficiencyCurve(t *testing.T) {
	// Points of an invented data sheet: 0 at no flow, 70 % at 10 l/s,
	// 60 % at 14 l/s. Interpolation by hand.
	c := EfficiencyCurve{Flow: []float64{0, 0.010, 0.014}, Eff: []float64{0, 0.70, 0.60}}
	for _, tc := range []struct {
		name    string
		q, s    float64
		want    float64
		inRange bool
	}{
		{"a point", 0.010, 1, 0.70, true},
		{"between points", 0.012, 1, 0.65, true},
		{"half way up at speed 0.8", 0.004, 0.8, 0.35, true},
		{"affinity: the rated point's efficiency at 0.8 of the speed", 0.008, 0.8, 0.70, true},
		{"beyond the last point", 0.020, 1, 0.60, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			got, in := c.At(tc.q, tc.s)
			if math.Abs(got-tc.want) > 1e-12 || in != tc.inRange {
				t.Errorf("At(%g, %g) = %g, %v; want %g, %v", tc.q, tc.s, got, in, tc.want, tc.inRange)
			}
		})
	}
}

// BenchmarkPumpSetDrop: the combined head of two unequal pumps in parallel
// (an iteration per call) and in series, against one Pump.
func BenchmarkPumpSetDrop(b *testing.B) {
	big, small := plainCurve(30, 2.4e4), plainCurve(20, 8e4)
	for _, bc := range []struct {
		name string
		e    Element
	}{
		{"one pump", Pump{Curve: big}},
		{"parallel", PumpSet{Members: members(big, small)}},
		{"series", PumpSet{Members: members(big, small), Series: true}},
	} {
		b.Run(bc.name, func(b *testing.B) {
			var s float64
			for b.Loop() {
				dp, _ := bc.e.Drop(0.03, water20)
				s += dp
			}
			_ = s
		})
	}
}

// TestPumpSetRelative: pumps each on its own speed, made to follow the set
// from there, give at set speed 1 the set as it was, and at speed r each
// pump turned by r (affinity laws, references §5.1).
func TestPumpSetRelative(t *testing.T) {
	big, small := plainCurve(30, 2.4e4), plainCurve(20, 8e4)
	own := PumpSet{Members: []SetMember{{Curve: big, Speed: 0.9}, {Curve: small, Speed: 1.1}}}
	rel, ok := own.Relative()
	if !ok {
		t.Fatal("Relative: not ok for pumps each on its own speed")
	}
	want := PumpSet{Members: []SetMember{{Curve: big, Speed: 0.9 * 0.8}, {Curve: small, Speed: 1.1 * 0.8}}}
	for _, q := range []float64{0.01, 0.03, 0.05} {
		h0, _ := own.Head(q)
		h1, _ := rel.Head(q)
		h2, _ := rel.AtSpeed(0.8).Head(q)
		w2, _ := want.Head(q)
		if relErr(h1, h0) > 1e-12 || relErr(h2, w2) > 1e-12 {
			t.Errorf("at %g: %g, %g at speed 1 and 0.8; want %g, %g", q, h1, h2, h0, w2)
		}
	}
	if _, ok := (PumpSet{Members: []SetMember{{Curve: big}, {Curve: small, Speed: 0.9}}}).Relative(); ok {
		t.Error("Relative: ok for a set with a pump following its speed")
	}
}
