package units_test

import (
	"errors"
	"fmt"

	"flowset/internal/units"
)

func Example() {
	gpm, err := units.Lookup(units.Flow, "gpm")
	if err != nil {
		fmt.Println(err)
		return
	}
	q := gpm.ToSI(100) // m3/s
	m3h, _ := units.Lookup(units.Flow, "m³/h")
	fmt.Println(units.Format(q, m3h, 2))

	dp, _ := units.Lookup(units.Pressure, "ft wc")
	fmt.Println(units.Format(dp.ToSI(10), units.SI(units.Pressure), 0))

	_, err = units.Lookup(units.Flow, "kPa")
	fmt.Println(err, errors.Is(err, units.ErrWrongKind))
	// Output:
	// 22.71 m3/h
	// 29891 Pa
	// unit "kPa" is a pressure, not a flow true
}
