package balance

import (
	"context"
	"math"
	"testing"

	"flowset/internal/hydraulics"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// bypassSite is an invented circuit of two three-port terminals (a coil of
// 30 and of 15 kPa at 0.5 l/s, a regulating valve each and a bypass valve
// of a generic equal-percentage characteristic, Kvs 6) on a pump
// H0 - aQ², its readings at the pump only.
func bypassSite() *site.Site {
	nan := math.NaN()
	h := func(q float64) float64 { return 30 - 4e6*q*q }
	br := func(id string, drop float64) site.Branch {
		return site.Branch{ID: id, DesignFlow: 0.5e-3, PipeBore: nan, Roughness: nan, TerminalDrop: drop, TerminalFlow: 0.5e-3,
			Valve: "V", Setting: nan, ControlKvs: 6, HeaderBore: nan, ReturnBore: nan, HeaderRoughness: nan, ReturnRoughness: nan,
			BypassValve: "B", BypassSetting: nan}
	}
	return &site.Site{
		Name: "three-port", Fluid: "water", Temperature: 273.15 + 20, Header: site.NoHeaderLoss,
		Boundary: site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 1.2, SetPoint: nan, Sensor: site.AtPump},
		Branches: []site.Branch{br("AHU-1", 30e3), br("AHU-2", 15e3)},
		Valves: []site.ValveModel{
			{Name: "V", Unit: "turns", Settings: []float64{0.5, 1, 2, 3, 4}, Kv: []float64{0.2, 0.4, 0.9, 1.5, 2.1}, Step: 0.1, MinDiff: 3e3},
			{Name: "B", Unit: "%", Characteristic: "equal-percentage", Kvs: 6, Rangeability: 50, Step: 1, MinDiff: 3e3},
		},
		Pump:            []site.PumpPoint{{Flow: 0, Head: h(0), Speed: nan, Efficiency: nan}, {Flow: 1e-3, Head: h(1e-3), Speed: nan, Efficiency: nan}, {Flow: 2e-3, Head: h(2e-3), Speed: nan, Efficiency: nan}},
		Readings:        []site.Reading{{State: "as-found", Where: site.AtPump, What: site.PumpDiff, Value: 1, Setting: nan, Sigma: 1}},
		Hours:           nan,
		PumpEfficiency:  0.7,
		MotorEfficiency: 0.9,
		EnergyPrice:     nan,
	}
}

// TestPlanBypass: the plan sets each three-port terminal's bypass valve so
// that full bypass passes the same flow as full coil flow (common practice,
// no source): its Kv gives at the target flow the coil's own drop (IEC
// 60534-2-1's Kv law: Q = Kv sqrt(Δp/1 bar) for water), and with the bypass
// valve at that exact setting and the three-port valve to bypass, the
// network at the plan's pump speed gives the branch the flow it gets
// through the coil.
func TestPlanBypass(t *testing.T) {
	ctx := context.Background()
	s := bypassSite()
	m, err := plant.New(s)
	if err != nil {
		t.Fatal(err)
	}
	pl, err := Compute(ctx, m, m.Design(), nil)
	if err != nil {
		t.Fatal(err)
	}
	coil, err := m.Solve(ctx, m.Design(), plant.State{Label: "coil", Settings: pl.Settings, Speed: pl.Speed})
	if err != nil {
		t.Fatal(err)
	}
	for k, bp := range pl.Branches {
		drop := s.Branches[k].TerminalDrop * math.Pow(bp.Target/0.5e-3, 2)
		want := bp.Target * 3600 * math.Sqrt(m.Fluid.Density/hydraulics.KvRefDensity/(drop/1e5))
		if math.Abs(bp.BypassKv/want-1) > 1e-9 || bp.Bypass != "B" || bp.BypassShort {
			t.Errorf("%s: bypass %q Kv %.6g, short %v; want B, %.6g", bp.ID, bp.Bypass, bp.BypassKv, bp.BypassShort, want)
		}
		if d := bp.BypassDiff / drop; math.Abs(d-1) > 0.05 {
			t.Errorf("%s: bypass check %.0f Pa, the coil drops %.0f Pa (the handwheel's 1 %% steps allow a few %%)", bp.ID, bp.BypassDiff, drop)
		}
		// The bypass valve at the exact setting, the three-port valve to
		// bypass: the same flow.
		exact, err := m.Branches[k].Bypass.SettingFor(bp.BypassKv)
		if err != nil {
			t.Fatal(err)
		}
		cs := *s
		cs.Branches = append([]site.Branch(nil), s.Branches...)
		cs.Branches[k].BypassSetting = exact
		cm, err := plant.New(&cs)
		if err != nil {
			t.Fatal(err)
		}
		st := plant.State{Label: "bypass", Settings: pl.Settings, Speed: pl.Speed, Bypass: make([]bool, len(cm.Branches))}
		st.Bypass[k] = true
		by, err := cm.Solve(ctx, cm.Design(), st)
		if err != nil {
			t.Fatal(err)
		}
		for i := range cm.Branches {
			if math.Abs(by.Flow(i)/coil.Flow(i)-1) > 1e-6 {
				t.Errorf("%s to bypass: branch %s gets %.9g m3/s, through the coil %.9g", bp.ID, cm.Branches[i].ID, by.Flow(i), coil.Flow(i))
			}
		}
	}
}

// TestBypassState: a state with the three-port valve to bypass takes the
// terminal out and the bypass valve in. On one branch of square laws
// against the pump H0 - aQ², Q = sqrt(H0/(a + b)) with b the sum of the
// path's square-law coefficients (pump and system curve intersection,
// common practice): the control valve, the regulating valve and the
// terminal through the coil; the control valve, the regulating valve and
// the bypass valve through the bypass.
func TestBypassState(t *testing.T) {
	s := bypassSite()
	s.Branches = s.Branches[:1]
	s.Branches[0].BypassSetting = 80
	m, err := plant.New(s)
	if err != nil {
		t.Fatal(err)
	}
	rg := m.Fluid.Density * hydraulics.StandardGravity
	kvB := func(kv float64) float64 { // m of water per (m3/s)²
		d, _ := hydraulics.KvDrop(1, kv, m.Fluid.Density)
		return d / rg
	}
	kvV, _ := m.Branches[0].Valve.KvAt(m.Branches[0].AsFound)
	kvBy, _ := m.Branches[0].Bypass.KvAt(80)
	coilB := 30e3/(0.5e-3*0.5e-3)/rg + kvB(6) + kvB(kvV)
	byB := kvB(6) + kvB(kvV) + kvB(kvBy)
	for _, c := range []struct {
		name   string
		bypass bool
		b      float64
	}{{"coil", false, coilB}, {"bypass", true, byB}} {
		st := m.BaseState()
		if c.bypass {
			st.Bypass = []bool{true}
		}
		sol, err := m.Solve(context.Background(), m.Design(), st)
		if err != nil {
			t.Fatal(err)
		}
		if want := math.Sqrt(30 / (4e6 + c.b)); math.Abs(sol.TotalFlow()/want-1) > 1e-6 {
			t.Errorf("%s: flow %.9g m3/s, want %.9g", c.name, sol.TotalFlow(), want)
		}
	}
}

// TestPlanBypassShort: a bypass valve too small to pass full coil flow even
// fully open (Kvs 2 where the coils need 3.3 and 4.6) is left fully open and
// said to pass less.
func TestPlanBypassShort(t *testing.T) {
	s := bypassSite()
	s.Valves[1].Kvs = 2
	m, err := plant.New(s)
	if err != nil {
		t.Fatal(err)
	}
	pl, err := Compute(context.Background(), m, m.Design(), nil)
	if err != nil {
		t.Fatal(err)
	}
	for _, bp := range pl.Branches {
		if !bp.BypassShort || bp.BypassNew != 100 || !(bp.BypassKv > 2) {
			t.Errorf("%s: bypass set to %g %%, short %v, Kv needed %.3g; want fully open (100 %%), short, above 2", bp.ID, bp.BypassNew, bp.BypassShort, bp.BypassKv)
		}
	}
}
