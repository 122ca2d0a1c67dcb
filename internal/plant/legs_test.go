package plant

import (
	"context"
	"errors"
	"math"
	"testing"

	"flowset/internal/hydraulics"
	"flowset/internal/site"
)

// TestHeaderLegs checks that each leg of a header segment is built from its
// own pipe: bores from ASME B36.10M Schedule 40 (metric columns: NPS 2 is
// 60.3 mm OD with a 3.91 mm wall, DN40 48.3 mm with 3.68 mm), the header k
// shared evenly plus each leg's own k, and the roughness given per leg.
func TestHeaderLegs(t *testing.T) {
	cases := []struct {
		name                   string
		change                 func(b *site.Branch)
		supplyBore, returnBore float64
		supplyK, returnK       float64
		supplyRough, retRough  float64
	}{
		{name: "one pipe for both legs (the old columns)", change: func(b *site.Branch) { b.HeaderK = 2 },
			supplyBore: 60.3e-3 - 2*3.91e-3, returnBore: 60.3e-3 - 2*3.91e-3, supplyK: 1, returnK: 1,
			supplyRough: hydraulics.RoughnessSteel, retRough: hydraulics.RoughnessSteel},
		{name: "return leg one size smaller, own k and roughness", change: func(b *site.Branch) {
			b.HeaderK, b.SupplyK, b.ReturnK = 2, 0.5, 0.25
			b.ReturnSize, b.HeaderRoughness, b.ReturnRoughness = "DN40", 0.06e-3, 0.1e-3
		},
			supplyBore: 60.3e-3 - 2*3.91e-3, returnBore: 48.3e-3 - 2*3.68e-3, supplyK: 1.5, returnK: 1.25,
			supplyRough: 0.06e-3, retRough: 0.1e-3},
		{name: "return bore given, roughness shared", change: func(b *site.Branch) {
			b.ReturnBore, b.HeaderRoughness = 35e-3, 0.07e-3
		},
			supplyBore: 60.3e-3 - 2*3.91e-3, returnBore: 35e-3, supplyRough: 0.07e-3, retRough: 0.07e-3},
		{name: "copper return leg", change: func(b *site.Branch) { b.ReturnStandard, b.ReturnBore = "en1057", 30e-3 },
			supplyBore: 60.3e-3 - 2*3.91e-3, returnBore: 30e-3, supplyRough: hydraulics.RoughnessSteel, retRough: hydraulics.RoughnessCopper},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			s := smallSite()
			for i := range s.Branches {
				c.change(&s.Branches[i])
			}
			m, err := New(s)
			if err != nil {
				t.Fatal(err)
			}
			b := m.Branches[1]
			check := func(leg string, es []hydraulics.Element, bore, k, rough float64) {
				t.Helper()
				var gotK float64
				var pipe *hydraulics.Pipe
				for _, e := range es {
					switch x := e.(type) {
					case hydraulics.Pipe:
						pipe = &x
					case hydraulics.Fitting:
						gotK += x.K
						if math.Abs(x.Bore-bore) > 1e-9 {
							t.Errorf("%s leg fitting bore %g, want %g", leg, x.Bore, bore)
						}
					}
				}
				if pipe == nil {
					t.Fatalf("%s leg has no pipe: %v", leg, es)
				}
				if math.Abs(pipe.Bore-bore) > 1e-9 || pipe.Length != 10 || math.Abs(pipe.Roughness-rough) > 1e-12 {
					t.Errorf("%s leg pipe %+v, want bore %g, length 10, roughness %g", leg, *pipe, bore, rough)
				}
				if math.Abs(gotK-k) > 1e-12 {
					t.Errorf("%s leg K %g, want %g", leg, gotK, k)
				}
			}
			check("supply", b.Supply, c.supplyBore, c.supplyK, c.supplyRough)
			check("return", b.Return, c.returnBore, c.returnK, c.retRough)
		})
	}
}

// TestHeaderLegDrop solves a circuit whose return legs are narrower than the
// supply legs and checks the pressure lost along one return segment against
// Darcy-Weisbach with the Swamee-Jain (1976) explicit friction factor, which
// is within about 1 % of Colebrook-White for 5000 < Re < 1e8 and
// 1e-6 < e/D < 1e-2 (Swamee and Jain, J. Hydraulics Div. ASCE 102(5), 1976).
func TestHeaderLegDrop(t *testing.T) {
	s := smallSite()
	for i := range s.Branches {
		s.Branches[i].ReturnSize = "DN40"
	}
	m, err := New(s)
	if err != nil {
		t.Fatal(err)
	}
	sol, err := m.Solve(context.Background(), m.Design(), m.States[0])
	if err != nil {
		t.Fatal(err)
	}
	// In direct return the return segment of take-off 2 (between take-offs
	// 1 and 2) carries the flow of branches 2 and 3; it joins the return
	// nodes of branches 2 and 1.
	q := sol.Flow(1) + sol.Flow(2)
	r1, r0 := sol.Built.ReturnNode["b"], sol.Built.ReturnNode["a"]
	got := sol.Sol.Pressure[r1] - sol.Sol.Pressure[r0]

	d, l, e := 48.3e-3-2*3.68e-3, 10.0, hydraulics.RoughnessSteel
	area := math.Pi * d * d / 4
	v := q / area
	re := m.Fluid.Density * v * d / m.Fluid.Viscosity
	f := 0.25 / math.Pow(math.Log10(e/(3.7*d)+5.74/math.Pow(re, 0.9)), 2)
	want := f * l / d * m.Fluid.Density * v * v / 2
	if re < 5000 {
		t.Fatalf("Re %g below the Swamee-Jain range", re)
	}
	if math.Abs(got-want) > 0.015*want {
		t.Errorf("return segment drop %g Pa at %g m3/s, want %g Pa (Swamee-Jain, within 1.5 %%)", got, q, want)
	}
}

// TestStateSettings checks that the states sheet gives each survey state its
// own pump speed (pump boundary) or set point (a controlled pump), and that a
// state not listed runs at the site's.
func TestStateSettings(t *testing.T) {
	nan := math.NaN()
	reading := func(state string) site.Reading {
		return site.Reading{State: state, Where: "a", What: site.Flow, Value: 0.5e-3, Setting: nan, Sigma: 0.02e-3}
	}
	cases := []struct {
		name          string
		kind          site.BoundaryKind
		states        []site.StateSetting
		speed, differ []float64 // per state as-found, slow, other
	}{
		{name: "pump speed per state", kind: site.PumpCurve,
			states: []site.StateSetting{{Label: "slow", Speed: 0.8, SetPoint: nan}},
			speed:  []float64{1, 0.8, 1}, differ: []float64{nan, nan, nan}},
		{name: "set point per state", kind: site.ConstantDiff,
			states: []site.StateSetting{{Label: "slow", Speed: nan, SetPoint: 30e3}, {Label: "other", Speed: nan, SetPoint: nan}},
			speed:  []float64{1, 1, 1}, differ: []float64{40e3, 30e3, 40e3}},
		{name: "no states sheet", kind: site.PumpCurve,
			speed: []float64{1, 1, 1}, differ: []float64{nan, nan, nan}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			s := smallSite()
			s.Boundary.Kind = c.kind
			if c.kind == site.ConstantDiff {
				s.Boundary.SetPoint = 40e3
			}
			s.Readings = []site.Reading{reading("as-found"), reading("slow"), reading("other")}
			s.States = c.states
			m, err := New(s)
			if err != nil {
				t.Fatal(err)
			}
			for k, st := range m.States {
				if st.Speed != c.speed[k] || !(st.Differential == c.differ[k] || math.IsNaN(st.Differential) && math.IsNaN(c.differ[k])) {
					t.Errorf("state %q: speed %g, differential %g; want %g, %g", st.Label, st.Speed, st.Differential, c.speed[k], c.differ[k])
				}
			}
			// The solved state runs where the sheet says: a pump at its
			// state's speed, a controlled pump at its state's set point
			// (the pump here can give 30 and 40 kPa: 78 kPa at shut-off).
			for k, st := range m.States {
				sol, err := m.Solve(context.Background(), m.Design(), st)
				if err != nil {
					t.Fatal(err)
				}
				if c.kind == site.PumpCurve {
					if got := sol.Speed(); got != c.speed[k] {
						t.Errorf("state %q: Speed() %g, want %g", st.Label, got, c.speed[k])
					}
				} else if got := sol.PumpDiff(); math.Abs(got-c.differ[k]) > 2e-3*c.differ[k] {
					// The held differential droops slightly with flow
					// (hydraulics.ControlledPump keeps the solver's
					// Jacobian regular), hence 0.2 %.
					t.Errorf("state %q: pump differential %g, want the set point %g", st.Label, got, c.differ[k])
				}
			}
		})
	}
}

// TestSetUnrecorded: a state read after setting takes the plan's settings
// for the valves none of its readings records, keeps those recorded, and
// takes the plan's pump unless the states sheet gives the state its own.
func TestSetUnrecorded(t *testing.T) {
	nan := math.NaN()
	for _, tc := range []struct {
		name      string
		states    []site.StateSetting
		wantSpeed float64
	}{
		{name: "pump from the plan", wantSpeed: 0.9},
		{name: "pump from the states sheet", states: []site.StateSetting{{Label: "after", Speed: 0.85, SetPoint: nan}}, wantSpeed: 0.85},
	} {
		t.Run(tc.name, func(t *testing.T) {
			s := smallSite()
			s.Readings = append(s.Readings, site.Reading{State: "after", Where: "a", What: site.Flow, Value: 0.5e-3, Setting: 1.5, Sigma: 0.02e-3})
			s.States = tc.states
			m, err := New(s)
			if err != nil {
				t.Fatal(err)
			}
			n, err := m.SetUnrecorded("after", []float64{2.5, 3.5, nan}, 0.9, nan)
			if err != nil {
				t.Fatal(err)
			}
			st := m.States[1]
			// a recorded (1.5), b from the plan (3.5), c as found (NaN: no setting given).
			if n != 1 || st.Settings[0] != 1.5 || st.Settings[1] != 3.5 || st.Speed != tc.wantSpeed {
				t.Errorf("gave %d; settings %v, speed %g; want 1, [1.5 3.5 ...], %g", n, st.Settings, st.Speed, tc.wantSpeed)
			}
			if m.States[0].Settings[1] != 3 {
				t.Errorf("the as-found state changed: %v", m.States[0].Settings)
			}
			if _, err := m.SetUnrecorded("later", []float64{1, 1, 1}, 0, 0); err == nil {
				t.Error("an unknown state was accepted")
			}
			if _, err := m.SetUnrecorded("after", []float64{1}, 0, 0); err == nil {
				t.Error("settings of the wrong length were accepted")
			}
		})
	}
}

// TestMoves: a valve the moves sheet sets in a state takes that setting
// there and nowhere else, and a plan applied to the state afterwards
// (SetUnrecorded) leaves it, as it leaves one a reading records.
func TestMoves(t *testing.T) {
	nan := math.NaN()
	s := smallSite()
	s.Readings = append(s.Readings, site.Reading{State: "after", Where: "a", What: site.Flow, Value: 0.5e-3, Setting: 1.5, Sigma: 0.02e-3})
	s.Moves = []site.Move{{State: "after", Branch: "b", Setting: 2}}
	m, err := New(s)
	if err != nil {
		t.Fatal(err)
	}
	if got := m.States[1].Settings[:2]; got[0] != 1.5 || got[1] != 2 {
		t.Errorf("after: settings %v, want [1.5 2 ...]", got)
	}
	if m.States[0].Settings[1] != 3 {
		t.Errorf("the as-found state took the move: %v", m.States[0].Settings)
	}
	n, err := m.SetUnrecorded("after", []float64{2.5, 3.5, nan}, 0.9, nan)
	if err != nil {
		t.Fatal(err)
	}
	if st := m.States[1]; n != 0 || st.Settings[0] != 1.5 || st.Settings[1] != 2 {
		t.Errorf("the plan gave %d settings; after: %v, want 0, [1.5 2 ...]", n, st.Settings)
	}
	s.Moves = append(s.Moves, site.Move{State: "after", Branch: "a", Setting: 2})
	if _, err := New(s); !errors.Is(err, ErrModel) {
		t.Errorf("a move other than the setting read in the same state: err %v, want ErrModel", err)
	}
}
