package balance

import (
	"context"
	"math"
	"strings"
	"testing"

	"flowset/internal/hydraulics"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// pumpsSite is an invented circuit: one branch with a square-law terminal
// b Q² (drop at qt), driven by n identical pumps H0 - aQ² in parallel (each
// given by three points on its curve, with efficiency points eff when not
// nil), running of them running.
func pumpsSite(h0, a, drop, qt float64, n, running int, controlled bool, eff []float64) *site.Site {
	nan := math.NaN()
	h := func(q float64) float64 { return h0 - a*q*q }
	s := &site.Site{
		Name: "pumps", Fluid: "water", Temperature: 273.15 + 20, Header: site.NoHeaderLoss,
		Boundary: site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 1, SetPoint: nan, Sensor: site.AtPump},
		Branches: []site.Branch{{ID: "coil", DesignFlow: qt, PipeBore: nan, Roughness: nan, TerminalDrop: drop, TerminalFlow: qt,
			Setting: nan, ControlKvs: nan, HeaderBore: nan, ReturnBore: nan, HeaderRoughness: nan, ReturnRoughness: nan}},
		Readings:        []site.Reading{{State: "as-found", Where: site.AtPump, What: site.PumpDiff, Value: 1, Setting: nan, Sigma: 1}},
		Hours:           8760,
		PumpEfficiency:  0.7,
		MotorEfficiency: 0.9,
		EnergyPrice:     nan,
		PumpsRunning:    running,
	}
	if controlled {
		s.Boundary = site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 200e3, Sensor: site.AtPump}
	}
	for k := range n {
		for i, q := range []float64{0, 0.01, 0.02} {
			pt := site.PumpPoint{Pump: string(rune('A' + k)), Flow: q, Head: h(q), Speed: nan, Efficiency: nan}
			if eff != nil {
				pt.Efficiency = eff[i]
			}
			s.Pump = append(s.Pump, pt)
		}
	}
	return s
}

// TestPlanPumps plans n identical pumps H0 - aQ² in parallel. At speed
// ratio s, k pumps give H0 s² - a(Q/k)² (affinity laws, references §5.1,
// and flows adding at equal head, from memory), so the duty b Qt² at the
// target flow needs s_k = sqrt((b + a/k²) Qt² / H0); one pump fewer serves
// when H0 - a(Qt/(k-1))² at full speed reaches b Qt². The checks are these
// closed forms (computed).
func TestPlanPumps(t *testing.T) {
	const h0, a = 30.0, 40000.0 // m, m/(m3/s)²
	for _, tc := range []struct {
		name        string
		drop, qt    float64 // the branch's duty
		n, running  int
		controlled  bool
		fewerServes bool
	}{
		{"two running, one serves", 80e3, 0.012, 2, 2, false, true},
		{"two running, one cannot", 80e3, 0.024, 2, 2, false, false},
		{"two running, one far short", 40e3, 0.036, 2, 2, false, false},
		{"three running, two serve", 150e3, 0.030, 3, 3, false, true},
		{"controlled, two running, one serves", 80e3, 0.012, 2, 2, true, true},
		{"duty and standby: none to spare", 80e3, 0.012, 2, 1, false, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			m, err := plant.New(pumpsSite(h0, a, tc.drop, tc.qt, tc.n, tc.running, tc.controlled, nil))
			if err != nil {
				t.Fatal(err)
			}
			pl, err := Compute(context.Background(), m, m.Design(), nil)
			if err != nil {
				t.Fatal(err)
			}
			rg := m.Fluid.Density * hydraulics.StandardGravity
			b := tc.drop / (rg * tc.qt * tc.qt)
			k := float64(tc.running)
			speed := func(k float64) float64 { return math.Sqrt((b + a/(k*k)) * tc.qt * tc.qt / h0) }
			pp := pl.Pump
			if pp.Pumps != tc.n || pp.Running != tc.running || len(pp.Duties) != tc.running {
				t.Fatalf("pumps %d, running %d, %d duties; want %d, %d", pp.Pumps, pp.Running, len(pp.Duties), tc.n, tc.running)
			}
			if got := pp.SpeedRatio; math.Abs(got/speed(k)-1) > 1e-6 {
				t.Errorf("speed ratio %.9g, want %.9g", got, speed(k))
			}
			for _, d := range pp.Duties {
				if math.Abs(d.Flow/(tc.qt/k)-1) > 1e-6 {
					t.Errorf("pump %s gives %.6g m3/s, want %.6g (an equal share)", d.ID, d.Flow, tc.qt/k)
				}
			}
			if tc.running < 2 {
				if pp.Fewer != nil {
					t.Errorf("Fewer = %+v, want nil with one pump running", *pp.Fewer)
				}
				return
			}
			o := pp.Fewer
			if o == nil || o.Running != tc.running-1 {
				t.Fatalf("Fewer = %+v, want an option with %d running", o, tc.running-1)
			}
			f := k - 1
			avail := rg * (h0 - a*tc.qt*tc.qt/(f*f))
			if math.Abs(o.Available/avail-1) > 1e-9 || o.Serves != tc.fewerServes || (avail >= tc.drop) != tc.fewerServes {
				t.Errorf("one fewer: available %.6g Pa (closed form %.6g, duty %.6g), serves %v; want serves %v", o.Available, avail, tc.drop, o.Serves, tc.fewerServes)
			}
			if !tc.fewerServes {
				if !math.IsNaN(o.Speed) || !math.IsNaN(o.Electrical) {
					t.Errorf("one fewer that cannot serve: speed %g, power %g; want NaN", o.Speed, o.Electrical)
				}
				// Flat out, the pumps left meet the branch's square law at
				// H0 - a(Q/f)² = b Q²: Q = sqrt(H0/(a/f² + b)) (computed).
				q1 := math.Sqrt(h0 / (a/(f*f) + b))
				pct := 100 * q1 / tc.qt
				if o.FlatOutBranches != 1 || math.Abs(o.FlatOutLowest/pct-1) > 1e-6 || (o.FlatOutInBand == 1) != (math.Abs(pct-100) <= 10) {
					t.Errorf("one fewer flat out: %d of %d in band, lowest %.6g %%; want 1 branch at %.6g %%", o.FlatOutInBand, o.FlatOutBranches, o.FlatOutLowest, pct)
				}
				return
			}
			if math.Abs(o.Speed/speed(f)-1) > 1e-6 {
				t.Errorf("one fewer: speed %.9g, want %.9g", o.Speed, speed(f))
			}
			// One efficiency for every pump: the same duty takes the same
			// power whatever the number of pumps.
			if math.Abs(o.Electrical/pp.ElectricalAfter-1) > 1e-9 || math.Abs(o.AnnualEnergySaving) > 1e-6*pp.ElectricalAfter {
				t.Errorf("one fewer: %.6g W, saving %.6g kWh; the plan's pumps %.6g W", o.Electrical, o.AnnualEnergySaving, pp.ElectricalAfter)
			}
		})
	}
}

// TestPlanPumpsEfficiency: with efficiency points, each pump's shaft power
// is ρ g q H / η(q/s) at its own flow q (the affinity laws carry the
// efficiency along with the duty); the option of one pump fewer is worked
// out the same way and compared by hand.
func TestPlanPumpsEfficiency(t *testing.T) {
	const h0, a, drop, qt = 30.0, 40000.0, 80e3, 0.012
	eff := []float64{0.2, 0.6, 0.75} // at 0, 10 and 20 l/s: invented
	m, err := plant.New(pumpsSite(h0, a, drop, qt, 2, 2, false, eff))
	if err != nil {
		t.Fatal(err)
	}
	pl, err := Compute(context.Background(), m, m.Design(), nil)
	if err != nil {
		t.Fatal(err)
	}
	rg := m.Fluid.Density * hydraulics.StandardGravity
	interp := func(x float64) float64 { // the points, by hand
		if x <= 0.01 {
			return 0.2 + (0.6-0.2)*x/0.01
		}
		return 0.6 + (0.75-0.6)*(x-0.01)/0.01
	}
	power := func(k, s float64) float64 { // k pumps sharing qt at speed s
		q := qt / k
		return k * rg * q * (drop / rg) / interp(q/s) / 0.9
	}
	pp := pl.Pump
	if want := power(2, pp.SpeedRatio); math.Abs(pp.ElectricalAfter/want-1) > 1e-6 {
		t.Errorf("two pumps: %.6g W, want %.6g", pp.ElectricalAfter, want)
	}
	o := pp.Fewer
	if o == nil || !o.Serves {
		t.Fatalf("Fewer = %+v, want one pump serving", o)
	}
	want := power(1, o.Speed)
	if math.Abs(o.Electrical/want-1) > 1e-6 {
		t.Errorf("one pump: %.6g W, want %.6g", o.Electrical, want)
	}
	if saving := (pp.ElectricalAfter - o.Electrical) * 8760 / 1e3; math.Abs(o.AnnualEnergySaving-saving) > 1e-6*math.Abs(saving) || !(saving > 0) {
		t.Errorf("one pump saves %.6g kWh a year, want %.6g (one pump nearer its best efficiency)", o.AnnualEnergySaving, saving)
	}
}

// TestPlanPumpsOwnSpeeds: two identical pumps each on its own speed 0.9 of
// nominal. The plan turns both from there by one ratio, so it needs ratio
// s_2/0.9, s_2 = sqrt((b + a/4) Qt² / H0) the speed from nominal (affinity
// laws, references §5.1; parallel rule from memory), and says so.
func TestPlanPumpsOwnSpeeds(t *testing.T) {
	const h0, a, drop, qt = 30.0, 40000.0, 80e3, 0.012
	s := pumpsSite(h0, a, drop, qt, 2, 2, false, nil)
	for i := range s.Pump {
		s.Pump[i].Speed = 0.9
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
	b := drop / (rg * qt * qt)
	want := math.Sqrt((b+a/4)*qt*qt/h0) / 0.9
	if math.Abs(pl.Speed/want-1) > 1e-6 {
		t.Errorf("plan speed ratio %.9g, want %.9g", pl.Speed, want)
	}
	for _, d := range pl.Pump.Duties {
		if math.Abs(d.Speed/(0.9*want)-1) > 1e-6 {
			t.Errorf("pump %s at speed %.6g, want %.6g of nominal", d.ID, d.Speed, 0.9*want)
		}
	}
	if len(pl.Warnings) == 0 || !strings.Contains(strings.Join(pl.Warnings, " "), "its own speed") {
		t.Errorf("warnings %q: want the plan's speed said to be a ratio to the pumps' own", pl.Warnings)
	}
}
