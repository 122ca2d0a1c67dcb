package network_test

import (
	"context"
	"fmt"
	"math"
	"testing"

	"flowset/internal/fluid"
	"flowset/internal/hydraulics"
	"flowset/internal/network"
)

// TestPressureIndependentLadder solves, by the Todini-Pilati iteration, a
// direct-return ladder of three terminals each behind a pressure-independent
// valve set to 0.1 l/s, at source differentials from starving every valve to
// ten times what they need. Where a valve sees more than its hold
// differential its terminal gets the set flow (within the regulator's droop);
// where it sees less, the branch is a fixed resistance, and its flow is the
// one the square law of its terminal and the valve's Kv in series gives at
// the branch differential (IEC 60534-2-1 for the valve, the rated-point
// square law for the terminal: common practice, no source).
func TestPressureIndependentLadder(t *testing.T) {
	water := fluid.State{Temperature: 293.15, Density: 998.2, Viscosity: 1.0016e-3}
	header := hydraulics.Pipe{Bore: 0.02096, Length: 20, Roughness: 4.5e-5}
	term := hydraulics.Terminal{RatedDrop: 10e3, RatedFlow: 0.1e-3}
	valve := hydraulics.PressureIndependent{Flow: 0.1e-3, Kv: 1.2}
	hold := valve.HoldDiff(water.Density)
	ids := []string{"near", "middle", "far"}
	var l network.Ladder
	l.Arrangement = network.DirectReturn
	for _, id := range ids {
		l.Branches = append(l.Branches, network.Branch{ID: id,
			Elements: []hydraulics.Element{term, valve},
			Supply:   []hydraulics.Element{header}, Return: []hydraulics.Element{header}})
	}
	for _, dp := range []float64{5e3, 15e3, 25e3, 40e3, 100e3, 300e3} {
		bt, err := network.Build(l, network.Source{Differential: dp}, water)
		if err != nil {
			t.Fatal(err)
		}
		sol, err := bt.Net.Solve(context.Background(), nil)
		if err != nil {
			t.Fatalf("%.0f kPa: %v", dp/1e3, err)
		}
		for _, id := range ids {
			q := sol.Flow[bt.Branch[id]]
			bd := sol.Pressure[bt.SupplyNode[id]] - sol.Pressure[bt.ReturnNode[id]]
			td, _ := term.Drop(q, water)
			vd := bd - td
			if vd > 1.01*hold {
				if r := q / valve.Flow; r < 0.995 || r > 1+hydraulics.RegulatorDroop*vd+1e-3 {
					t.Errorf("%.0f kPa, %s: valve sees %.1f kPa (holds from %.1f) but passes %.4f of its set flow", dp/1e3, id, vd/1e3, hold/1e3, r)
				}
				continue
			}
			if vd < 0.99*hold {
				// Below the hold point: terminal and Kv in series, a square law
				// with 1/k² = 1/kt² + 1/kv² in flow per root differential.
				kt := term.RatedFlow / math.Sqrt(term.RatedDrop)
				kv := valve.Kv / 3600 * math.Sqrt(1e-5*hydraulics.KvRefDensity/water.Density)
				want := math.Sqrt(bd / (1/(kt*kt) + 1/(kv*kv)))
				if math.Abs(q-want) > 1e-6*want {
					t.Errorf("%.0f kPa, %s: starved branch passes %.6g m3/s at %.2f kPa, want %.6g", dp/1e3, id, q, bd/1e3, want)
				}
			}
		}
	}
}

// BenchmarkPressureIndependentLadder solves direct-return ladders whose
// terminals all sit behind pressure-independent valves, held at a source
// differential (40 kPa) near what a terminal needs (10 kPa and 9 kPa of hold)
// plus the headers, so that near valves regulate and far ones are starved
// (how many depends on n), and reports the Newton iterations per solve
// beside the time, against the same ladders with the valves replaced by
// their fixed Kv ("kv"): the stiff regulator must not cost the solver extra
// iterations out of proportion.
func BenchmarkPressureIndependentLadder(b *testing.B) {
	water := fluid.State{Temperature: 293.15, Density: 998.2, Viscosity: 1.0016e-3}
	term := hydraulics.Terminal{RatedDrop: 10e3, RatedFlow: 0.1e-3}
	valve := hydraulics.PressureIndependent{Flow: 0.1e-3, Kv: 1.2}
	for _, c := range []struct {
		name  string
		valve hydraulics.Element
		n     int
	}{{"held/10", valve, 10}, {"held/100", valve, 100}, {"held/1000", valve, 1000},
		{"kv/10", hydraulics.FixedKv{Kv: valve.Kv}, 10}, {"kv/1000", hydraulics.FixedKv{Kv: valve.Kv}, 1000}} {
		n := c.n
		b.Run(c.name, func(b *testing.B) {
			// The header is sized so its loss at n × 0.1 l/s is a few
			// times a branch's need, whatever n.
			header := hydraulics.Pipe{Bore: 0.02 * math.Sqrt(float64(n)), Length: 200 / float64(n), Roughness: 4.5e-5}
			var l network.Ladder
			l.Arrangement = network.DirectReturn
			for k := range n {
				l.Branches = append(l.Branches, network.Branch{ID: fmt.Sprint("b", k),
					Elements: []hydraulics.Element{term, c.valve},
					Supply:   []hydraulics.Element{header}, Return: []hydraulics.Element{header}})
			}
			bt, err := network.Build(l, network.Source{Differential: 40e3}, water)
			if err != nil {
				b.Fatal(err)
			}
			var iters int
			for b.Loop() {
				sol, err := bt.Net.Solve(context.Background(), nil)
				if err != nil {
					b.Fatal(err)
				}
				iters = sol.Iterations
			}
			b.ReportMetric(float64(iters), "iterations")
		})
	}
}
