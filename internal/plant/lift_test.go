package plant

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"

	"flowset/internal/hydraulics"
	"flowset/internal/site"
)

// liftSite is an invented open circuit: one process branch with nothing but
// a square-law terminal (b Q², b = drop / (rho g Qr²) in m per (m3/s)²)
// between a basin and an open spray header, driven by a pump whose curve
// is H0 - a Q² exactly (three points on it).
func liftSite(h0, a, lift, outlet, drop, qr float64) *site.Site {
	nan := math.NaN()
	h := func(q float64) float64 { return h0 - a*q*q }
	return &site.Site{
		Name: "open", Fluid: "water", Temperature: 273.15 + 20, Header: site.NoHeaderLoss,
		Density: nan, Viscosity: nan, KinematicViscosity: nan,
		StaticLift: lift, OutletPressure: outlet,
		Boundary: site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 1.2, SetPoint: nan, Sensor: site.AtPump},
		Branches: []site.Branch{{ID: "cond", DesignFlow: qr, PipeBore: nan, Roughness: nan, TerminalDrop: drop, TerminalFlow: qr,
			Setting: nan, ControlKvs: nan, HeaderBore: nan, ReturnBore: nan, HeaderRoughness: nan, ReturnRoughness: nan}},
		Pump:     []site.PumpPoint{{Flow: 0, Head: h(0)}, {Flow: 0.01, Head: h(0.01)}, {Flow: 0.02, Head: h(0.02)}},
		Readings: []site.Reading{{State: "as-found", Where: site.AtPump, What: site.PumpDiff, Value: 1, Setting: nan, Sigma: 1}},
	}
}

// TestOperatingPointWithLift checks the operating point of a pump against a
// system with static head: pump H0 - a Q² against static + b Q² meet at
// Q = sqrt((H0 - static)/(a + b)) (pump and system curve intersection,
// common practice). The pump differential is the whole of static + b Q²;
// the branch sees only its friction.
func TestOperatingPointWithLift(t *testing.T) {
	const h0, a = 30.0, 40000.0 // m, m/(m3/s)²: 30 m shut-off, 26 m at 10 l/s
	for _, c := range []struct {
		name         string
		lift, outlet float64 // m, Pa
	}{
		{"closed loop", 0, 0},
		{"lift only", 12, 0},
		{"lift and nozzle pressure", 9.5, 40e3},
	} {
		t.Run(c.name, func(t *testing.T) {
			const drop, qr = 80e3, 0.012 // the condenser: 80 kPa at 12 l/s
			m, err := New(liftSite(h0, a, c.lift, c.outlet, drop, qr))
			if err != nil {
				t.Fatal(err)
			}
			rg := m.Fluid.Density * hydraulics.StandardGravity
			static := c.lift + c.outlet/rg // m of the pumped water
			b := drop / (rg * qr * qr)
			want := math.Sqrt((h0 - static) / (a + b))
			sol, err := m.Solve(context.Background(), m.Design(), m.States[0])
			if err != nil {
				t.Fatal(err)
			}
			if got := sol.TotalFlow(); math.Abs(got/want-1) > 1e-9 {
				t.Errorf("flow %.9g m3/s, want sqrt((H0 - static)/(a + b)) = %.9g", got, want)
			}
			if got, want := sol.PumpDiff(), rg*(static+b*want*want); math.Abs(got/want-1) > 1e-9 {
				t.Errorf("pump differential %.6g Pa, want static + friction %.6g", got, want)
			}
			if got, want := sol.BranchDiff(0), rg*b*want*want; math.Abs(got/want-1) > 1e-9 {
				t.Errorf("branch differential %.6g Pa, want its friction alone %.6g", got, want)
			}
			r := site.Reading{What: site.PumpDiff, Where: site.AtPump}
			if got, err := sol.Predict(&r); err != nil || math.Abs(got/sol.PumpDiff()-1) > 1e-15 {
				t.Errorf("predicted pump differential %g, %v; want %g", got, err, sol.PumpDiff())
			}
			// The system curve starts at the static head at no flow and
			// passes through the operating point.
			pts, err := m.SystemCurve(context.Background(), m.Design(), m.States[0].Settings, []float64{0.5 * rg * static, rg * static, sol.PumpDiff()})
			if err != nil {
				t.Fatal(err)
			}
			if c.lift > 0 && (pts[0].Flow != 0 || pts[1].Flow != 0) {
				t.Errorf("system curve below the static head carries %g, %g m3/s, want none", pts[0].Flow, pts[1].Flow)
			}
			if got := pts[2].Flow; math.Abs(got/want-1) > 1e-9 {
				t.Errorf("system curve at the operating differential: %.9g m3/s, want %.9g", got, want)
			}
		})
	}
}

// TestLiftRefused checks that a differential boundary that cannot lift the
// water to the outlet is refused with a reason, not solved to nonsense.
func TestLiftRefused(t *testing.T) {
	s := liftSite(30, 40000, 12, 0, 80e3, 0.012)
	s.Boundary = site.Boundary{Kind: site.MeasuredDiff, Speed: 1, MaxSpeed: 1, SetPoint: math.NaN(), Sensor: site.AtPump}
	s.Pump = nil
	s.Readings[0].Value = 100e3 // below 12 m of water, 117.5 kPa
	m, err := New(s)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := m.Solve(context.Background(), m.Design(), m.States[0]); err == nil {
		t.Fatal("a pump differential below the static lift solved")
	}
}

// TestLiftAbovePump checks that a pump whose shut-off head at maximum
// speed does not reach the static lift is refused when the model is built.
func TestLiftAbovePump(t *testing.T) {
	s := liftSite(30, 40000, 40, 0, 80e3, 0.012) // 30 m shut-off, 1.2 max speed: 43.2 m
	if _, err := New(s); err != nil {
		t.Fatalf("a lift of 40 m under a 43.2 m shut-off refused: %v", err)
	}
	s.StaticLift = 44
	if _, err := New(s); !errors.Is(err, ErrModel) || !strings.Contains(err.Error(), "does not reach the static lift") {
		t.Fatalf("New: %v, want the lift refused", err)
	}
}

// TestMeasuredDifferentialWithLift checks the measured-differential
// boundary of an open circuit: a pump differential read holds the lift, a
// header differential read does not, so a pump reading of header + lift
// drives the same flow, Q = sqrt(friction / b) (square law).
func TestMeasuredDifferentialWithLift(t *testing.T) {
	const lift, drop, qr = 12.0, 80e3, 0.012
	s := liftSite(30, 40000, lift, 0, drop, qr)
	s.Boundary = site.Boundary{Kind: site.MeasuredDiff, Speed: 1, MaxSpeed: 1, SetPoint: math.NaN(), Sensor: site.AtPump}
	s.Pump = nil
	nan := math.NaN()
	m0, err := New(s)
	if err != nil {
		t.Fatal(err)
	}
	rg := m0.Fluid.Density * hydraulics.StandardGravity
	const friction = 60e3 // Pa
	s.Readings = []site.Reading{
		{State: "pump read", Where: site.AtPump, What: site.PumpDiff, Value: friction + rg*lift, Setting: nan, Sigma: 1},
		{State: "header read", Where: site.AtHeader, What: site.HeaderDiff, Value: friction, Setting: nan, Sigma: 1},
	}
	m, err := New(s)
	if err != nil {
		t.Fatal(err)
	}
	want := qr * math.Sqrt(friction/drop)
	for _, st := range m.States {
		sol, err := m.Solve(context.Background(), m.Design(), st)
		if err != nil {
			t.Fatal(err)
		}
		if got := sol.TotalFlow(); math.Abs(got/want-1) > 1e-9 {
			t.Errorf("state %q: flow %.9g, want %.9g", st.Label, got, want)
		}
		if got := sol.HeaderDiff(); math.Abs(got/friction-1) > 1e-9 {
			t.Errorf("state %q: header differential %.6g, want %.6g", st.Label, got, friction)
		}
		if got := sol.PumpDiff(); math.Abs(got/(friction+rg*lift)-1) > 1e-9 {
			t.Errorf("state %q: pump differential %.6g, want %.6g", st.Label, got, friction+rg*lift)
		}
	}
}
