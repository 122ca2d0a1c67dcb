// Package hydraulics holds the pressure-drop laws of the parts of a water
// circuit: pipes (Darcy-Weisbach with Colebrook-White), fittings, terminal
// units, balancing and control valves, and pumps. Each element gives its
// pressure drop at a flow and the derivative needed by Newton's method.
//
// Flows are volumetric in m3/s, pressures in Pa, lengths in m.
package hydraulics

import "flowset/internal/fluid"

// Element is one part of a circuit through which water flows.
//
// Drop returns the pressure drop dp [Pa] in the direction of the flow q
// [m3/s] and its derivative slope = d(dp)/dq [Pa s/m3]. Drop is odd in q
// (Drop(-q) = -Drop(q)) so reversed flow is handled; slope is never negative
// for a passive element. A pump returns a negative drop (a gain).
type Element interface {
	Drop(q float64, f fluid.State) (dp, slope float64)
}
