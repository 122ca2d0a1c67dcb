package network_test

import (
	"context"
	"fmt"

	"flowset/internal/fluid"
	"flowset/internal/hydraulics"
	"flowset/internal/network"
)

// Three terminals rated 12 kPa at 0.5 m3/h on a direct-return header of
// DN32 steel, held at 40 kPa: the near branch takes the most water.
func ExampleBuild() {
	water := fluid.State{Temperature: 293.15, Density: 998.2, Viscosity: 1.0016e-3}
	header := hydraulics.Pipe{Bore: 0.03508, Length: 15, Roughness: 4.5e-5}
	var l network.Ladder
	l.Arrangement = network.DirectReturn
	for _, id := range []string{"near", "middle", "far"} {
		l.Branches = append(l.Branches, network.Branch{
			ID:       id,
			Elements: []hydraulics.Element{hydraulics.Terminal{RatedDrop: 12e3, RatedFlow: 0.5 / 3600}},
			Supply:   []hydraulics.Element{header},
			Return:   []hydraulics.Element{header},
		})
	}
	bt, err := network.Build(l, network.Source{Differential: 40e3, Static: 150e3}, water)
	if err != nil {
		fmt.Println(err)
		return
	}
	sol, err := bt.Net.Solve(context.Background(), nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, id := range []string{"near", "middle", "far"} {
		fmt.Printf("%-6s %.3f m3/h\n", id, sol.Flow[bt.Branch[id]]*3600)
	}
	// Output:
	// near   0.844 m3/h
	// middle 0.810 m3/h
	// far    0.800 m3/h
}

// The Hardy Cross check of two parallel square-law resistances r = 1 and 4
// carrying 6 units: the flows are 4 and 2 at a common drop of 16.
func ExampleParallel_Split() {
	sq := func(r float64) network.Curve { return square(r) }
	dp, flows, err := network.Parallel{Curves: []network.Curve{sq(1), sq(4)}}.Split(6)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("dp %.6g, flows %.6g %.6g\n", dp, flows[0], flows[1])
	// Output:
	// dp 16, flows 4 2
}

// square is the curve r q|q|.
type square float64

func (r square) Drop(q float64) (float64, float64) {
	a := q
	if a < 0 {
		a = -a
	}
	return float64(r) * q * a, 2 * float64(r) * a
}
