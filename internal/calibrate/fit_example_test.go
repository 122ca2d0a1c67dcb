package calibrate_test

import (
	"context"
	"fmt"

	"flowset/internal/calibrate"
	"flowset/internal/plant"
	"flowset/internal/synth"
)

// ExampleFit calibrates the invented demo site (synth.Demo: a school's
// heating circuit whose AHU-2 coil is hidden fouled three times and whose
// RAD-2F valve is hidden 1.8 turns from where it was recorded) and prints
// what the fit finds.
func ExampleFit() {
	ctx := context.Background()
	s, _, err := synth.Demo(ctx)
	if err != nil {
		fmt.Println(err)
		return
	}
	m, err := plant.New(s)
	if err != nil {
		fmt.Println(err)
		return
	}
	cal, err := calibrate.Fit(ctx, m, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, b := range cal.Branches {
		switch {
		case b.Above(1.5):
			fmt.Printf("%s: resistance %.1f times design (95 %% %.1f-%.1f)\n", b.ID, b.Ratio, b.Lo, b.Hi)
		case b.Below(1 / 1.5):
			fmt.Printf("%s: resistance %.2f times design\n", b.ID, b.Ratio)
		}
		if v := b.Valve; v.Hypothesis == calibrate.SetElsewhere || v.Hypothesis == calibrate.HoldsOneKv {
			fmt.Printf("%s: valve %v, recorded %.1f turns, really about %.1f\n", b.ID, v.Hypothesis, v.Recorded[0], v.Implied[0])
		}
	}
	fmt.Println("converged:", cal.Converged)
	// Output:
	// AHU-2: resistance 3.0 times design (95 % 2.8-3.2)
	// RAD-2F: valve set elsewhere than recorded, recorded 3.0 turns, really about 1.2
	// converged: true
}
