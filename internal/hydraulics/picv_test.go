package hydraulics

import (
	"math"
	"testing"

	"flowset/internal/fluid"
)

// waterRef is water at the Kv definition's reference density (IEC 60534-2-1:
// ρ0 = 999.1 kg/m3 at 15 °C), so ρ/ρ0 = 1 and the Kv law reads Q = Kv √Δp.
var waterRef = fluid.State{Temperature: 288.15, Density: KvRefDensity, Viscosity: 1.138e-3}

// picvCase is a valve set to 0.1 l/s whose Kv, 1.2 m3/h, makes it hold its
// flow from (0.36/1.2)² bar = 9 kPa at the reference density.
var picvCase = PressureIndependent{Flow: 0.1e-3, Kv: 1.2}

// TestPressureIndependentBelowHold checks the fixed-Kv side against the
// definition of Kv (IEC 60534-1: the flow in m3/h of water at 15 °C through
// the valve at a 1 bar drop; IEC 60534-2-1: Q = Kv √(Δp/(ρ/ρ0)) for
// non-choked turbulent liquid flow): below its hold differential the valve
// passes Kv √Δp, and the flow falls as the square root of the differential.
func TestPressureIndependentBelowHold(t *testing.T) {
	v := picvCase
	if got, want := v.HoldDiff(waterRef.Density), 9e3; relErr(got, want) > 1e-12 {
		t.Fatalf("HoldDiff = %.9g Pa, want %.9g (Q = Kv √Δp: 0.36 m3/h at Kv 1.2 needs 0.09 bar)", got, want)
	}
	for _, tc := range []struct {
		name string
		dp   float64 // Pa
		want float64 // m3/s
	}{
		// Kv 1.2 at 0.01 bar: 1.2 × 0.1 = 0.12 m3/h.
		{"1 kPa", 1e3, 0.12 / 3600},
		// at 0.04 bar: 1.2 × 0.2 = 0.24 m3/h, twice the flow at a quarter of 0.16 bar.
		{"4 kPa", 4e3, 0.24 / 3600},
		// at 0.0729 bar (0.9² of the hold differential): 1.2 × 0.27 = 0.324 m3/h.
		{"0.81 of hold", 7.29e3, 0.324 / 3600},
	} {
		t.Run(tc.name, func(t *testing.T) {
			q, err := v.FlowAt(tc.dp, waterRef)
			if err != nil {
				t.Fatal(err)
			}
			if relErr(q, tc.want) > 1e-9 {
				t.Errorf("FlowAt(%g Pa) = %.9g m3/s, want %.9g (Kv law)", tc.dp, q, tc.want)
			}
			// Square-root law: a quarter of the differential, half the flow.
			q4, err := v.FlowAt(tc.dp/4, waterRef)
			if err != nil {
				t.Fatal(err)
			}
			if relErr(q4, q/2) > 1e-9 {
				t.Errorf("FlowAt(%g Pa) = %.9g, want half of FlowAt(%g Pa) = %.9g", tc.dp/4, q4, tc.dp, q/2)
			}
			// Reverse flow meets the body as the same fixed Kv.
			if qr, _ := v.FlowAt(-tc.dp, waterRef); relErr(qr, -q) > 1e-12 {
				t.Errorf("FlowAt(%g Pa) = %g, want %g", -tc.dp, qr, -q)
			}
		})
	}
}

// TestPressureIndependentHolds checks the regulating side: from just above
// its hold differential to 600 kPa (beyond the 400 kPa or so to which such
// valves are commonly rated: common practice, no source) the flow stays at
// the set flow within the stated droop, and never falls as the differential
// rises.
func TestPressureIndependentHolds(t *testing.T) {
	v := picvCase
	hold := v.HoldDiff(waterRef.Density)
	prev := 0.0
	for _, dp := range []float64{1.01 * hold, 1.05 * hold, 2 * hold, 50e3, 100e3, 200e3, 400e3, 600e3} {
		q, err := v.FlowAt(dp, waterRef)
		if err != nil {
			t.Fatal(err)
		}
		r := q / v.Flow
		hi := 1 + RegulatorDroop*(dp-hold) + 1e-3
		if r < 0.995 || r > hi {
			t.Errorf("at %.1f kPa the flow is %.5f of the set flow, want 0.995 to %.5f", dp/1e3, r, hi)
		}
		if q < prev {
			t.Errorf("at %.1f kPa the flow %g fell below %g at a lower differential", dp/1e3, q, prev)
		}
		prev = q
	}
	// The droop itself: 0.5 % of the set flow per 100 kPa, to 1 % of it.
	q1, _ := v.FlowAt(100e3, waterRef)
	q2, _ := v.FlowAt(300e3, waterRef)
	if got, want := (q2-q1)/v.Flow, RegulatorDroop*200e3; relErr(got, want) > 0.01 {
		t.Errorf("flow rise from 100 to 300 kPa = %.6f of the set flow, want %.6f", got, want)
	}
}

// TestPressureIndependentDerivatives checks the slope and the flow-scale
// derivative against central differences, on both sides of the corner and
// in it (a self-consistency check: the solver and the calibration need the
// derivatives the drop implies).
func TestPressureIndependentDerivatives(t *testing.T) {
	v := picvCase
	p, w := v.regulator(waterRef.Density)
	if !(p > 0 && w > 0) {
		t.Fatalf("regulator scales %g Pa, %g m3/s", p, w)
	}
	for _, q := range []float64{0.5 * v.Flow, v.Flow - 3*w, v.Flow - w, v.Flow, v.Flow + w, v.Flow + 5*w, v.Flow + 100*w, -v.Flow - w} {
		dp, slope := v.Drop(q, waterRef)
		h := w * 1e-3
		up, _ := v.Drop(q+h, waterRef)
		dn, _ := v.Drop(q-h, waterRef)
		if fd := (up - dn) / (2 * h); relErr(slope, fd) > 1e-5 {
			t.Errorf("slope at q = Q%+.1fw: %.9g, finite difference %.9g", (q-v.Flow)/w, slope, fd)
		}
		if slope <= 0 || math.IsInf(slope, 0) {
			t.Errorf("slope at q = %g is %g, want finite and positive", q, slope)
		}
		if d2, _ := v.Drop(-q, waterRef); relErr(d2, -dp) > 1e-12 {
			t.Errorf("Drop(%g) = %g, want -Drop(%g) = %g", -q, d2, q, -dp)
		}
		const e = 1e-9
		vu := PressureIndependent{Flow: v.Flow * math.Exp(e), Kv: v.Kv * math.Exp(e)}
		vd := PressureIndependent{Flow: v.Flow * math.Exp(-e), Kv: v.Kv * math.Exp(-e)}
		du, _ := vu.Drop(q, waterRef)
		dd, _ := vd.Drop(q, waterRef)
		if fd, got := (du-dd)/(2*e), v.ScaleDrop(q, waterRef); relErr(got, fd) > 1e-4 {
			t.Errorf("ScaleDrop at q = Q%+.1fw: %.9g, finite difference %.9g", (q-v.Flow)/w, got, fd)
		}
	}
}

func TestPressureIndependentInvalid(t *testing.T) {
	for _, v := range []PressureIndependent{{}, {Flow: 1e-4}, {Kv: 1}, {Flow: math.NaN(), Kv: 1}, {Flow: 1e-4, Kv: math.Inf(1)}} {
		if v.Validate() == nil {
			t.Errorf("%+v: Validate passed", v)
		}
		if dp, _ := v.Drop(1e-4, waterRef); !math.IsNaN(dp) {
			t.Errorf("%+v: Drop = %g, want NaN", v, dp)
		}
		if _, err := v.FlowAt(1e4, waterRef); err == nil {
			t.Errorf("%+v: FlowAt gave no error", v)
		}
	}
}

// TestPressureIndependentTable checks a model of three settings: the valve
// at a table setting holds the table's flow; a blank Kv makes it hold from
// exactly the hold differential at the reference density (Q = Kv √Δp,
// IEC 60534-2-1); a given Kv is kept; SettingFor inverts the flow table;
// a scale multiplies flow and Kv together, keeping the hold differential.
func TestPressureIndependentTable(t *testing.T) {
	settings := []float64{1, 3, 5}
	flows := []float64{0.03e-3, 0.08e-3, 0.15e-3}
	tb, err := NewPressureIndependentTable(settings, flows, []float64{math.NaN(), 0.8, math.NaN()}, 20e3, 0.5)
	if err != nil {
		t.Fatal(err)
	}
	for i, s := range settings {
		v, err := tb.At(s, 1)
		if err != nil {
			t.Fatal(err)
		}
		if relErr(v.Flow, flows[i]) > 1e-12 {
			t.Errorf("At(%g).Flow = %g, want %g", s, v.Flow, flows[i])
		}
		hold := v.HoldDiff(KvRefDensity)
		if i == 1 {
			// Kv 0.8 given: 0.288 m3/h at Kv 0.8 holds from 0.36² bar.
			if relErr(v.Kv, 0.8) > 1e-12 || relErr(hold, 0.36*0.36*1e5) > 1e-9 {
				t.Errorf("At(%g): kv %g, hold %g Pa; want 0.8 and %g", s, v.Kv, hold, 0.36*0.36*1e5)
			}
		} else if relErr(hold, 20e3) > 1e-9 {
			t.Errorf("At(%g): hold %g Pa, want 20000", s, hold)
		}
		got, err := tb.SettingFor(flows[i])
		if err != nil || math.Abs(got-s) > 1e-9 {
			t.Errorf("SettingFor(%g) = %g, %v; want %g", flows[i], got, err, s)
		}
		w, _ := tb.At(s, 1.1)
		if relErr(w.Flow, 1.1*v.Flow) > 1e-12 || relErr(w.HoldDiff(KvRefDensity), hold) > 1e-9 {
			t.Errorf("At(%g, 1.1) = %+v, want flow %g and the same hold differential", s, w, 1.1*v.Flow)
		}
	}
	// Between rows the flow rises with the setting.
	q2, _ := tb.At(2, 1)
	q4, _ := tb.At(4, 1)
	if !(q2.Flow > flows[0] && q2.Flow < flows[1] && q4.Flow > flows[1] && q4.Flow < flows[2]) {
		t.Errorf("interpolated flows %g at 2 and %g at 4 do not lie between the table's", q2.Flow, q4.Flow)
	}
	if _, err := NewPressureIndependentTable(settings, flows, []float64{math.NaN(), math.NaN(), math.NaN()}, 0, 0.5); err == nil {
		t.Error("a hold differential of 0 was accepted")
	}
}
