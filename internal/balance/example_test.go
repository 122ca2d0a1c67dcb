package balance_test

import (
	"context"
	"fmt"
	"math"

	"flowset/internal/balance"
	"flowset/internal/plant"
	"flowset/internal/site"
)

// ExampleCompute plans three terminal circuits on ideal headers held at a
// constant differential. Branch b needs the most with its valve open, so it
// is the index; the others' valves take the surplus. The flows are chosen so
// the valve drops are the check values of the hydronic Kv short form
// (IEC 60534-2-1): 1 m3/h at 10 kPa is Kv 3.16, 0.36 m3/h at 3 kPa Kv 2.08,
// and 2.5 m3/h through the open Kv 5 valve takes 25 kPa.
func ExampleCompute() {
	nan := math.NaN()
	br := func(id string, lps, kPa float64) site.Branch {
		return site.Branch{ID: id, DesignFlow: lps / 1e3, PipeBore: nan, Roughness: nan,
			TerminalDrop: kPa * 1e3, TerminalFlow: nan, Valve: "DN20", Setting: 4, HeaderBore: nan}
	}
	s := &site.Site{
		Name: "example", Fluid: "water", Temperature: 273.15 + 15, Header: site.NoHeaderLoss,
		Boundary: site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 60e3, Sensor: site.AtPump},
		Branches: []site.Branch{br("a", 0.2778, 30), br("b", 0.6944, 15), br("c", 0.1, 37)},
		Valves: []site.ValveModel{{Name: "DN20", Unit: "turns", Settings: []float64{0, 1, 2, 3, 4},
			Kv: []float64{0.5, 1.5, 2.8, 4.0, 5.0}, Step: 0.1, MinDiff: 3e3}},
		ToleranceLow: -0.1, ToleranceHigh: 0.1,
	}
	m, err := plant.New(s)
	if err != nil {
		fmt.Println(err)
		return
	}
	pl, err := balance.Compute(context.Background(), m, m.Design(), &balance.Options{Rounding: balance.Smart})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("index %s, differential %.1f kPa\n", pl.Index, pl.Required/1e3)
	for _, b := range pl.Branches {
		fmt.Printf("%s: Kv %.2f, set %.1f %s, %.0f %% of target, check %.1f kPa\n", b.ID, b.KvRequired, b.New, b.Unit, b.Percent, b.ValveDiff/1e3)
	}
	// Output:
	// index b, differential 40.0 kPa
	// a: Kv 3.16, set 2.3 turns, 100 % of target, check 9.9 kPa
	// b: Kv 5.00, set 4.0 turns, 100 % of target, check 25.0 kPa
	// c: Kv 2.08, set 1.5 turns, 100 % of target, check 2.8 kPa
}
