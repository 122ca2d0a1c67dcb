package plant

import (
	"context"
	"math"
	"testing"

	"flowset/internal/hydraulics"
	"flowset/internal/site"
)

// smallSite is a three-branch direct-return circuit on a pump, invented for
// the tests.
func smallSite() *site.Site {
	nan := math.NaN()
	br := func(id string, q, term float64, setting float64) site.Branch {
		return site.Branch{ID: id, DesignFlow: q, PipeStandard: "sch40", PipeSize: "1", PipeBore: nan, PipeLength: 20,
			Roughness: nan, FittingsK: 5, TerminalDrop: term, TerminalFlow: nan, Valve: "V25", Setting: setting,
			SupplyLength: 10, ReturnLength: 10, HeaderStandard: "sch40", HeaderSize: "2", HeaderBore: nan}
	}
	return &site.Site{
		Name: "test", Fluid: "water", Temperature: 273.15 + 20, Header: site.DirectReturn,
		Boundary: site.Boundary{Kind: site.PumpCurve, Speed: 1, MaxSpeed: 1, SetPoint: nan},
		Branches: []site.Branch{br("a", 0.5e-3, 20e3, 2), br("b", 0.6e-3, 25e3, 3), br("c", 0.4e-3, 15e3, nan)},
		Valves:   []site.ValveModel{{Name: "V25", Unit: "turns", Settings: []float64{0, 1, 2, 3, 4}, Kv: []float64{0.3, 1.2, 2.6, 4.2, 5.6}, Step: 0.1}},
		Pump:     []site.PumpPoint{{Flow: 0, Head: 8}, {Flow: 1e-3, Head: 7.2}, {Flow: 2e-3, Head: 5}},
		Readings: []site.Reading{{State: "as-found", Where: "a", What: site.Flow, Value: 0.5e-3, Setting: nan, Sigma: 0.02e-3}},
	}
}

// TestSolveContinuity checks that the flows the model reports close the
// loop: the pump carries the sum of the branch flows (continuity, exact).
func TestSolveContinuity(t *testing.T) {
	m, err := New(smallSite())
	if err != nil {
		t.Fatal(err)
	}
	s, err := m.Solve(context.Background(), m.Design(), m.States[0])
	if err != nil {
		t.Fatal(err)
	}
	var sum float64
	for i := range m.Branches {
		sum += s.Flow(i)
		if s.Flow(i) <= 0 {
			t.Errorf("branch %s flow %g, want positive", m.Branches[i].ID, s.Flow(i))
		}
	}
	if got := s.TotalFlow(); math.Abs(got-sum) > 1e-12 {
		t.Errorf("TotalFlow() = %g, want sum of branches %g", got, sum)
	}
	// The pump's differential equals its curve at the total flow.
	want := m.Pump.Head(sum) * m.Fluid.Density * hydraulics.StandardGravity
	if got := s.PumpDiff(); math.Abs(got-want) > 1e-6*want {
		t.Errorf("PumpDiff() = %g, want %g from the fitted curve", got, want)
	}
	// In direct return the first branch sees the highest differential.
	if !(s.BranchDiff(0) > s.BranchDiff(1) && s.BranchDiff(1) > s.BranchDiff(2)) {
		t.Errorf("branch differentials %g %g %g not falling along a direct-return header", s.BranchDiff(0), s.BranchDiff(1), s.BranchDiff(2))
	}
	// A branch's differential is its fixed parts plus its valve.
	for i := range m.Branches {
		fd, _ := m.FixedElement(i, 1).Drop(s.Flow(i), m.Fluid)
		if got, want := s.BranchDiff(i), fd+s.ValveDiff(i); math.Abs(got-want) > 1e-6*want {
			t.Errorf("branch %d: differential %g, want fixed+valve %g", i, got, want)
		}
	}
}

// TestHeaderDiffAtBranch checks that a header differential read at a
// branch's take-off is predicted as that branch's differential, and one read
// at the header as the differential where the branches begin.
func TestHeaderDiffAtBranch(t *testing.T) {
	m, err := New(smallSite())
	if err != nil {
		t.Fatal(err)
	}
	s, err := m.Solve(context.Background(), m.Design(), m.States[0])
	if err != nil {
		t.Fatal(err)
	}
	nan := math.NaN()
	got, err := s.Predict(&site.Reading{Where: "b", What: site.HeaderDiff, Setting: nan})
	if err != nil || got != s.BranchDiff(1) {
		t.Errorf("Predict(header diff at b) = %g, %v; want branch b's differential %g", got, err, s.BranchDiff(1))
	}
	got, err = s.Predict(&site.Reading{Where: site.AtHeader, What: site.HeaderDiff, Setting: nan})
	if err != nil || got != s.HeaderDiff() {
		t.Errorf("Predict(header diff at the header) = %g, %v; want %g", got, err, s.HeaderDiff())
	}
	if !(s.HeaderDiff() > s.BranchDiff(0)) {
		t.Errorf("header differential %g not above the first branch's %g in direct return", s.HeaderDiff(), s.BranchDiff(0))
	}
}

// TestPumpCurveControlled checks the pump curve the curves and the report
// draw: on a pump boundary the curve at the speed asked, on a controlled
// pump the curve at its maximum speed whatever the speed asked (the affinity
// laws, H(q, s) = A0 s² + A1 q s + A2 q², at s = MaxSpeed), and nothing on
// a differential boundary without a pump sheet.
func TestPumpCurveControlled(t *testing.T) {
	flows := []float64{0, 0.5e-3, 1e-3}
	for _, c := range []struct {
		name  string
		b     site.Boundary
		pump  bool
		speed float64 // the speed the curve must be drawn at
	}{
		{"pump", site.Boundary{Kind: site.PumpCurve, Speed: 0.9, MaxSpeed: 1.1, SetPoint: math.NaN()}, true, 0.9},
		{"controlled", site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1.1, SetPoint: 60e3}, true, 1.1},
		{"ideal", site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 60e3}, false, 0},
	} {
		t.Run(c.name, func(t *testing.T) {
			s := smallSite()
			s.Boundary = c.b
			if !c.pump {
				s.Pump = nil
			}
			m, err := New(s)
			if err != nil {
				t.Fatal(err)
			}
			got := m.PumpCurve(m.Design(), 0.9, 0, flows)
			if !c.pump {
				if got != nil {
					t.Fatalf("PumpCurve = %v, want nil without a pump", got)
				}
				return
			}
			if len(got) != len(flows) {
				t.Fatalf("PumpCurve gave %d points, want %d", len(got), len(flows))
			}
			p := *m.Pump
			rg := m.Fluid.Density * hydraulics.StandardGravity
			for k, q := range flows {
				v := c.speed
				want := (p.A0*v*v + p.A1*q*v + p.A2*q*q) * rg
				if math.Abs(got[k].Diff-want) > 1e-9*want {
					t.Errorf("at %g m3/s: %.9g Pa, want %.9g (speed %g)", q, got[k].Diff, want, v)
				}
			}
		})
	}
}
