package balance

import (
	"context"
	"math"
	"testing"

	"flowset/internal/hydraulics"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// TestPlanOpenCircuit plans an invented open circuit (one process branch,
// a square-law terminal b Q², lifted to an open spray header) on a pump
// whose curve is exactly H0 - a Q². The least differential at the pump is
// static + b Qt², and by the affinity laws (H0 s² - a Q² at speed ratio s,
// the curve having no linear term) the speed that gives it at the target
// flow is s = sqrt((static + (a + b) Qt²)/H0): the pump and system curve
// intersection Q = sqrt((H0 s² - static)/(a + b)) solved for s (common
// practice).
func TestPlanOpenCircuit(t *testing.T) {
	const h0, a = 30.0, 40000.0  // m, m/(m3/s)²
	const drop, qt = 80e3, 0.012 // Pa at the target flow, m3/s
	for _, c := range []struct {
		name         string
		lift, outlet float64 // m, Pa
		controlled   bool    // a drive holding a differential across the pump
	}{
		{"closed loop", 0, 0, false},
		{"lift", 12, 0, false},
		{"lift and nozzle pressure", 8, 30e3, false},
		{"controlled pump, lift and nozzle pressure", 8, 30e3, true},
	} {
		t.Run(c.name, func(t *testing.T) {
			nan := math.NaN()
			h := func(q float64) float64 { return h0 - a*q*q }
			s := &site.Site{
				Name: "open", Fluid: "water", Temperature: 273.15 + 20, Header: site.NoHeaderLoss,
				StaticLift: c.lift, OutletPressure: c.outlet,
				Boundary: site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 1.2, SetPoint: nan, Sensor: site.AtPump},
				Branches: []site.Branch{{ID: "cond", DesignFlow: qt, PipeBore: nan, Roughness: nan, TerminalDrop: drop, TerminalFlow: qt,
					Setting: nan, ControlKvs: nan, HeaderBore: nan, ReturnBore: nan, HeaderRoughness: nan, ReturnRoughness: nan}},
				Pump:            []site.PumpPoint{{Flow: 0, Head: h(0)}, {Flow: 0.01, Head: h(0.01)}, {Flow: 0.02, Head: h(0.02)}},
				Readings:        []site.Reading{{State: "as-found", Where: site.AtPump, What: site.PumpDiff, Value: 1, Setting: nan, Sigma: 1}},
				Hours:           8760,
				PumpEfficiency:  0.7,
				MotorEfficiency: 0.9,
				EnergyPrice:     nan,
			}
			if c.controlled {
				s.Boundary = site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1.2, SetPoint: 250e3, Sensor: site.AtPump}
			}
			m, err := plant.New(s)
			if err != nil {
				t.Fatal(err)
			}
			pl, err := Compute(context.Background(), m, m.Design(), nil)
			if err != nil {
				t.Fatal(err)
			}
			rg := m.Fluid.Density * hydraulics.StandardGravity
			static := c.lift + c.outlet/rg
			b := drop / (rg * qt * qt)
			need := rg * (static + b*qt*qt)
			speed := math.Sqrt((static + (a+b)*qt*qt) / h0)
			for _, v := range []struct {
				what      string
				got, want float64
			}{
				{"least differential", pl.Least, need},
				{"pump needed", pl.Pump.Needed, need},
				{"needed speed", pl.Pump.NeededSpeed, speed},
				{"differential after", pl.Pump.After.Differential, need},
				{"head after", pl.Pump.After.Head, static + b*qt*qt},
				{"flow after", pl.Pump.After.Flow, qt},
				{"available at max speed", pl.Pump.Available, rg * (h0*1.2*1.2 - a*qt*qt)},
			} {
				if c.controlled && v.what == "needed speed" {
					continue // checked below, where the drive holds the plan's set point
				}
				if math.Abs(v.got/v.want-1) > 1e-6 {
					t.Errorf("%s = %.9g, want %.9g", v.what, v.got, v.want)
				}
			}
			// A pump run at a speed holds the speed; a drive holding a
			// differential across the pump holds static + friction, at the
			// same speed.
			got, want := pl.Speed, speed
			if c.controlled {
				got, want = pl.Differential, need
				if s := pl.Pump.SpeedRatio; math.Abs(s/speed-1) > 1e-6 {
					t.Errorf("speed ratio %.9g, want %.9g", s, speed)
				}
				if math.Abs(pl.Pump.SetPoint/need-1) > 1e-6 {
					t.Errorf("set point at the pump %.9g Pa, want %.9g", pl.Pump.SetPoint, need)
				}
			}
			if math.Abs(got/want-1) > 1e-6 {
				t.Errorf("plan control value %.9g, want %.9g", got, want)
			}
		})
	}
}
