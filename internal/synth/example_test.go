package synth_test

import (
	"context"
	"fmt"

	"flowset/internal/site"
	"flowset/internal/synth"
)

func ExampleGenerate() {
	s, truth, err := synth.Generate(context.Background(), synth.Spec{
		Branches: 20, Arrangement: site.DirectReturn, Boundary: site.PumpCurve, Seed: 42,
		Fouled: 0.1, MisSet: 0.05, Noise: 1, States: 2,
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	faults := map[string]int{}
	for _, f := range truth.Faults {
		faults[f]++
	}
	fmt.Printf("%d branches, %d valve models, %d pump points\n", len(s.Branches), len(s.Valves), len(s.Pump))
	fmt.Printf("hidden: %d fouled, %d mis-set\n", faults[synth.Fouled], faults[synth.MisSet])
	// Output:
	// 20 branches, 6 valve models, 5 pump points
	// hidden: 2 fouled, 1 mis-set
}

func ExampleSimulate() {
	s, truth, err := synth.Demo(context.Background())
	if err != nil {
		fmt.Println(err)
		return
	}
	// Every valve fully open (NaN leaves a valve at its as-found setting).
	settings := make([]float64, len(s.Branches))
	for i, b := range s.Branches {
		_, settings[i] = s.Valve(b.Valve).Range()
	}
	sol, err := synth.Simulate(context.Background(), s, truth, settings)
	if err != nil {
		fmt.Println(err)
		return
	}
	i, _ := sol.Model.Index("RAD-2F")
	// The mis-set valve's handwheel says 4 turns; it really sits at 2.2.
	fmt.Printf("RAD-2F valve at %.1f turns\n", sol.State.Settings[i])
	// Output:
	// RAD-2F valve at 2.2 turns
}
