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

// TestNewRefuses gives New sites the site reader would stop (or that other
// code builds by hand) and checks each is refused with the branch, sheet
// line or state at fault and the reason, never a model that solves to
// nonsense.
func TestNewRefuses(t *testing.T) {
	for _, c := range []struct {
		name  string
		edit  func(s *site.Site)
		cause error
		want  string
	}{
		{"parents in a loop", func(s *site.Site) { s.Branches[1].Parent, s.Branches[2].Parent = "c", "b" }, ErrModel,
			`branch "b" is not reachable from the main headers (its parents form a loop)`},
		{"branch hangs from itself", func(s *site.Site) { s.Branches[1].Parent = "b" }, ErrModel,
			`branch "b" is not reachable from the main headers (its parents form a loop)`},
		{"every branch in a loop", func(s *site.Site) {
			s.Branches[0].Parent, s.Branches[1].Parent, s.Branches[2].Parent = "c", "a", "b"
		}, ErrModel, "no branch hangs from the main headers"},
		{"unknown parent", func(s *site.Site) { s.Branches[2].Parent = "z" }, ErrModel,
			`branch "c" hangs from unknown branch "z"`},
		{"duplicate branch", func(s *site.Site) { s.Branches[2].ID = "a" }, ErrModel, `branch "a" appears twice`},
		{"shut position in a valve table", func(s *site.Site) { s.Valves[0].Kv[0] = 0 }, hydraulics.ErrInvalid,
			`valve "V25": valve table: kv 0 at setting 0 must be positive`},
		{"unknown valve", func(s *site.Site) { s.Branches[1].Valve = "V99" }, ErrModel,
			`branch "b": valve model "V99" is not on the valves sheet`},
		{"pump boundary without points", func(s *site.Site) { s.Pump = nil }, ErrModel,
			"boundary is a pump but the pump sheet has no points"},
		{"pump with no head", func(s *site.Site) {
			for i := range s.Pump {
				s.Pump[i].Head = 0
			}
		}, hydraulics.ErrInvalid, "pump curve: pump fit: shut-off head 0 m of the fit is not positive"},
		{"measured boundary without a differential", func(s *site.Site) {
			s.Boundary.Kind = site.MeasuredDiff
		}, ErrModel, `state "as-found" has no header or pump differential reading`},
		{"measured boundary reading 0 Pa", func(s *site.Site) {
			s.Boundary.Kind = site.MeasuredDiff
			s.Readings = append(s.Readings, site.Reading{State: "as-found", Where: site.AtHeader, What: site.HeaderDiff, Value: 0,
				Setting: math.NaN(), Sigma: 100, Pos: site.Pos{File: "readings.csv", Line: 3}})
		}, ErrModel, `readings.csv:3: boundary is the measured differential but state "as-found" reads 0 Pa, which drives no flow`},
		{"setting on a branch without a valve", func(s *site.Site) {
			s.Branches[0].Valve = ""
			s.Readings[0].Setting = 2
		}, ErrModel, `gives a valve setting for branch "a", which has no balancing valve`},
		{"two settings in one state", func(s *site.Site) {
			r := s.Readings[0]
			r.Setting, r.What, r.Value = 2, site.ValveDiff, 5000
			s.Readings = append(s.Readings, r)
			s.Readings[0].Setting = 3
		}, ErrModel, `state "as-found" gives branch "a" two settings (3 and 2)`},
		{"nothing to size the fittings by", func(s *site.Site) {
			s.Branches[0].PipeLength, s.Branches[0].PipeStandard, s.Branches[0].PipeSize = 0, "", ""
		}, ErrModel, `branch "a": fittings K needs a pipe size or bore`},
		{"a terminal with nothing in it", func(s *site.Site) {
			b := &s.Branches[1]
			b.PipeLength, b.FittingsK, b.TerminalDrop, b.Valve, b.Setting = 0, 0, 0, "", math.NaN()
			b.Pos = site.Pos{File: "branches.csv", Line: 3}
		}, ErrModel, `branches.csv:3: branch "b" has nothing that resists flow`},
	} {
		t.Run(c.name, func(t *testing.T) {
			s := smallSite()
			c.edit(s)
			m, err := New(s)
			if err == nil {
				t.Fatalf("New: got a model of %d branches, want an error", len(m.Branches))
			}
			if !errors.Is(err, c.cause) || !strings.Contains(err.Error(), c.want) {
				t.Errorf("New: error %q, want one wrapping %v and saying %q", err, c.cause, c.want)
			}
		})
	}
}

// TestSolveEdges solves states at the edges of the model: every valve at
// the bottom of its table, a constant differential of a few pascals, the
// largest values the sheets take. Each must give finite flows that close
// continuity, or a clear error.
func TestSolveEdges(t *testing.T) {
	for _, c := range []struct {
		name string
		edit func(s *site.Site)
		// st makes the state to solve from the model; nil = first survey state
		st func(m *Model) State
		// want is the error wanted, "" for a solution
		want string
	}{
		{name: "every valve at the bottom of its table", st: func(m *Model) State {
			st := m.States[0]
			st.Settings = []float64{0, 0, 0}
			return st
		}},
		{name: "every valve nearly shut", edit: func(s *site.Site) { s.Valves[0].Kv[0] = 1e-6 }, st: func(m *Model) State {
			st := m.States[0]
			st.Settings = []float64{0, 0, 0}
			return st
		}},
		{name: "constant differential of 3 Pa", edit: func(s *site.Site) {
			s.Boundary = site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 3, Sensor: site.AtPump}
			s.Pump = nil
		}},
		{name: "zero differential", edit: func(s *site.Site) {
			s.Boundary = site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 3, Sensor: site.AtPump}
			s.Pump = nil
		}, st: func(m *Model) State {
			st := m.States[0]
			st.Differential = 0
			return st
		}, want: `state "as-found": no pump curve and no positive differential to drive the circuit`},
		{name: "tiny pump", edit: func(s *site.Site) {
			for i := range s.Pump {
				s.Pump[i].Head *= 1e-4
			}
		}},
		{name: "largest values the sheets take", edit: func(s *site.Site) {
			for i := range s.Branches {
				b := &s.Branches[i]
				b.DesignFlow, b.PipeLength, b.FittingsK, b.TerminalDrop, b.PipeBore, b.HeaderBore = 10, 1e4, 1e4, 1e7, 3, 3
			}
			s.Valves[0].Kv = []float64{1e5 / 16, 1e5 / 8, 1e5 / 4, 1e5 / 2, 1e5}
			s.Pump = []site.PumpPoint{{Flow: 0, Head: 1000}, {Flow: 5, Head: 900}, {Flow: 10, Head: 600}}
		}},
		{name: "smallest values the sheets take", edit: func(s *site.Site) {
			for i := range s.Branches {
				b := &s.Branches[i]
				b.DesignFlow, b.PipeLength, b.FittingsK, b.TerminalDrop, b.PipeBore, b.HeaderBore = 1e-7, 1e-3, 0, 1, 1e-3, 1e-3
			}
			s.Valves[0].Kv = []float64{1e-6, 2e-6, 4e-6, 8e-6, 1.6e-5}
			s.Pump = []site.PumpPoint{{Flow: 0, Head: 1e-3}, {Flow: 1e-7, Head: 0.9e-3}, {Flow: 2e-7, Head: 0.6e-3}}
		}},
	} {
		t.Run(c.name, func(t *testing.T) {
			s := smallSite()
			if c.edit != nil {
				c.edit(s)
			}
			m, err := New(s)
			if err != nil {
				t.Fatal(err)
			}
			st := m.States[0]
			if c.st != nil {
				st = c.st(m)
			}
			sol, err := m.Solve(context.Background(), m.Design(), st)
			if c.want != "" {
				if err == nil || !strings.Contains(err.Error(), c.want) {
					t.Fatalf("Solve: error %v, want %q", err, c.want)
				}
				return
			}
			if err != nil {
				t.Fatalf("Solve: %v", err)
			}
			var sum float64
			for i := range m.Branches {
				q, dp, dv := sol.Flow(i), sol.BranchDiff(i), sol.ValveDiff(i)
				if !(q > 0) || math.IsInf(q, 0) || math.IsNaN(dp) || math.IsInf(dp, 0) || math.IsNaN(dv) || math.IsInf(dv, 0) {
					t.Errorf("branch %s: flow %g, differential %g, valve differential %g; want a positive flow and finite differentials", m.Branches[i].ID, q, dp, dv)
				}
				sum += q
			}
			// Continuity at the source (exact): the source carries the sum
			// of the branch flows.
			if got := sol.TotalFlow(); !(math.Abs(got-sum) <= 1e-9*sum) {
				t.Errorf("TotalFlow() = %g, want the sum of the branches %g", got, sum)
			}
			if d := sol.PumpDiff(); !(d > 0) || math.IsInf(d, 0) {
				t.Errorf("PumpDiff() = %g, want positive and finite", d)
			}
		})
	}
}
