package plant

import (
	"context"
	"math"
	"strings"
	"testing"

	"flowset/internal/site"
)

// picvSite is smallSite with pressure-independent valves on every branch
// (invented: a model holding 0.1 to 0.6 l/s over settings 1 to 6 from
// 20 kPa); branch c's terminal is rated at a drop so high that the pump
// cannot give its valve 20 kPa.
func picvSite() *site.Site {
	s := smallSite()
	nan := math.NaN()
	s.Valves = []site.ValveModel{{Name: "PI", Unit: "steps", Settings: []float64{1, 2, 3, 4, 5, 6},
		MaxFlow: []float64{0.1e-3, 0.2e-3, 0.3e-3, 0.4e-3, 0.5e-3, 0.6e-3}, Kv: []float64{nan, nan, nan, nan, nan, nan},
		HoldDiff: 20e3, Step: 0.5, MinDiff: 3e3, Kvs: nan, Rangeability: nan}}
	for i := range s.Branches {
		s.Branches[i].Valve = "PI"
	}
	s.Branches[0].Setting = 5 // 0.5 l/s
	s.Branches[1].Setting = 2 // 0.2 l/s, below its design flow
	s.Branches[2].Setting = 4
	s.Branches[2].TerminalDrop = 60e3
	return s
}

// TestPressureIndependentBranches solves picvSite as found: a valve that
// sees its hold differential passes its set flow whatever its branch
// differential (within the regulator's droop), the starved one passes what
// its Kv gives (IEC 60534-2-1's square law through terminal and valve in
// series: common practice, no source for the series sum), and the model
// says which regulates.
func TestPressureIndependentBranches(t *testing.T) {
	m, err := New(picvSite())
	if err != nil {
		t.Fatal(err)
	}
	for i := range m.Branches {
		if m.Branches[i].PI == nil || m.Branches[i].Valve != nil {
			t.Fatalf("branch %s: PI %v, Valve %v; want a pressure-independent valve only", m.Branches[i].ID, m.Branches[i].PI, m.Branches[i].Valve)
		}
	}
	s, err := m.Solve(context.Background(), m.Design(), m.States[0])
	if err != nil {
		t.Fatal(err)
	}
	for i, want := range []float64{0.5e-3, 0.2e-3} {
		if !s.Regulates(i) {
			t.Errorf("branch %s: valve sees %.1f kPa, hold %.1f kPa: not regulating", m.Branches[i].ID, s.ValveDiff(i)/1e3, s.HoldDiff(i)/1e3)
		}
		if r := s.Flow(i) / want; r < 0.995 || r > 1.01 {
			t.Errorf("branch %s: flow %.4g l/s, want its set %.4g", m.Branches[i].ID, s.Flow(i)*1e3, want*1e3)
		}
	}
	if s.Regulates(2) {
		t.Errorf("branch c: valve sees %.1f kPa, hold %.1f kPa: regulating, want starved", s.ValveDiff(2)/1e3, s.HoldDiff(2)/1e3)
	}
	// Starved: the valve is its Kv at setting 4 (0.4 l/s at 20 kPa), in
	// series with the rest of the branch.
	v, err := m.Branches[2].PI.At(4, 1)
	if err != nil {
		t.Fatal(err)
	}
	q := s.Flow(2)
	want := v.Kv / 3600 * math.Sqrt(s.ValveDiff(2)/1e5*999.1/m.Fluid.Density)
	if math.Abs(q-want) > 1e-6*want || !(q < 0.4e-3*0.99) {
		t.Errorf("branch c: flow %.6g m3/s at a valve differential of %.2f kPa, want %.6g from its Kv %.4g, below its set 0.4 l/s", q, s.ValveDiff(2)/1e3, want, v.Kv)
	}
	// Raising b's setting to 4 gives it 0.4 l/s without changing a's.
	st := m.States[0]
	st.Settings = append([]float64(nil), st.Settings...)
	st.Settings[1] = 4
	s2, err := m.Solve(context.Background(), m.Design(), st)
	if err != nil {
		t.Fatal(err)
	}
	if r := s2.Flow(1) / 0.4e-3; r < 0.995 || r > 1.01 {
		t.Errorf("b at setting 4: flow %.4g l/s, want 0.4", s2.Flow(1)*1e3)
	}
	if r := s2.Flow(0) / s.Flow(0); math.Abs(r-1) > 0.002 {
		t.Errorf("a's flow moved by %.3f %% when b's setting changed", (r-1)*100)
	}
}

// TestPressureIndependentCheck checks the warnings about such valves: a
// target outside what the valve can be set to hold, and a flow read more
// than 15 % above what it holds at its setting (common practice, no
// source: beyond the valve's and a clamp-on meter's tolerances).
func TestPressureIndependentCheck(t *testing.T) {
	s := picvSite()
	s.Branches[1].DesignFlow = 0.8e-3 // above the table's 0.6 l/s
	s.Readings = append(s.Readings,
		site.Reading{State: "as-found", Where: "b", What: site.Flow, Value: 0.25e-3, Setting: math.NaN(), Sigma: 0.01e-3}, // setting 2: 0.2 l/s held
		site.Reading{State: "as-found", Where: "c", What: site.Flow, Value: 0.41e-3, Setting: math.NaN(), Sigma: 0.01e-3}) // setting 4: 0.4 l/s
	m, err := New(s)
	if err != nil {
		t.Fatal(err)
	}
	var msgs []string
	for _, p := range m.Check() {
		msgs = append(msgs, p.Error())
	}
	want := []string{"branch b's target 0.8 l/s is outside the 0.1 to 0.6 l/s", "flow more than 15 % above the 0.2 l/s"}
	for _, w := range want {
		found := false
		for _, m := range msgs {
			found = found || strings.Contains(m, w)
		}
		if !found {
			t.Errorf("no problem says %q:\n%s", w, strings.Join(msgs, "\n"))
		}
	}
	if len(msgs) != len(want) {
		t.Errorf("%d problems, want %d:\n%s", len(msgs), len(want), strings.Join(msgs, "\n"))
	}
}
