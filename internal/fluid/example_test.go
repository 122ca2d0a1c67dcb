package fluid_test

import (
	"fmt"

	"flowset/internal/fluid"
)

func ExampleWater() {
	s, err := fluid.Water(273.15 + 20)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("ρ = %.2f kg/m3, μ = %.4f mPa s, ν = %.4g m2/s\n", s.Density, s.Viscosity*1e3, s.Kinematic())

	_, err = fluid.Water(273.15 + 160)
	fmt.Println(err)
	// Output:
	// ρ = 998.21 kg/m3, μ = 1.0016 mPa s, ν = 1.003e-06 m2/s
	// water: temperature 433.15 K outside the valid range 274.15–423.15 K (1–150 °C)
}

func ExampleSpec_At() {
	kind, err := fluid.ParseKind("eg")
	if err != nil {
		fmt.Println(err)
		return
	}
	spec := fluid.Spec{Kind: kind, Percent: 30} // by volume
	for _, tC := range []float64{6, 12} {
		s, err := spec.At(273.15 + tC)
		if err != nil {
			fmt.Println(err)
			return
		}
		fmt.Printf("%v at %g °C: ρ = %.1f kg/m3, μ = %.2f mPa s\n", spec, tC, s.Density, s.Viscosity*1e3)
	}
	_, err = spec.At(273.15 - 15)
	fmt.Println(err)
	// Output:
	// ethylene-glycol 30 % by volume at 6 °C: ρ = 1050.0 kg/m3, μ = 3.37 mPa s
	// ethylene-glycol 30 % by volume at 12 °C: ρ = 1048.1 kg/m3, μ = 2.77 mPa s
	// ethylene-glycol 30 % by volume: temperature 258.15 K outside the valid range 263.15–398.15 K (-10 to 125 °C, table range at this concentration)
}
