package plant

import (
	"context"
	"fmt"
	"math"

	"flowset/internal/hydraulics"
	"flowset/internal/network"
)

// Point is one point of a curve: flow m3/s and differential Pa.
type Point struct{ Flow, Diff float64 }

// BranchCurve returns branch i's system curve (its own parts, valve at the
// given setting) at the given flows.
func (m *Model) BranchCurve(p Params, i int, setting float64, flows []float64) []Point {
	elems := m.Elements(i, p, setting)
	out := make([]Point, len(flows))
	for k, q := range flows {
		var dp float64
		for _, e := range elems {
			d, _ := e.Drop(q, m.Fluid)
			dp += d
		}
		if m.Branches[i].Riser() {
			dp = math.NaN() // a riser's curve includes its sub-circuit; see SystemCurve
		}
		out[k] = Point{q, dp}
	}
	return out
}

// SystemCurve returns the combined curve of all branches seen from the source
// (header losses and an open circuit's static lift included): the total
// flow at each source differential,
// found by solving the network held at that differential. It is exact, not a
// fit to samples.
func (m *Model) SystemCurve(ctx context.Context, p Params, settings []float64, diffs []float64) ([]Point, error) {
	out := make([]Point, 0, len(diffs))
	var warm []float64
	lift := m.Lift()
	var b *network.Built
	sup := -1
	var prev float64
	l, err := m.Ladder(p, settings, nil)
	if err != nil {
		return nil, err
	}
	for _, d := range diffs {
		if d <= 0 {
			out = append(out, Point{0, 0})
			continue
		}
		if d <= lift {
			// An open circuit: nothing flows until the source gives the
			// static lift, where the system curve starts.
			out = append(out, Point{0, d})
			continue
		}
		if b == nil {
			b, err = m.Build(l, network.Source{Differential: d, Lift: lift})
			if err != nil {
				return nil, err
			}
			sup, _ = b.Net.NodeIndex(network.SupplyID)
		} else {
			// Only the held differential changes from point to point:
			// the network keeps its ordering and workspace, which on a
			// large site cost more to make than the solve.
			b.Net.FixPressure(sup, network.Source{Differential: d, Lift: lift}.Held())
		}
		if warm != nil && prev > lift {
			// Flows go nearly as the square root of the differential
			// above the lift: the last point's flows scaled so start
			// about one Newton step nearer.
			r := math.Sqrt((d - lift) / (prev - lift))
			for k := range warm {
				warm[k] *= r
			}
		}
		sol, err := b.Net.Solve(ctx, &network.Options{Initial: warm})
		if err != nil {
			return nil, fmt.Errorf("system curve at %.3g kPa: %w", d/1000, err)
		}
		// One buffer for every point: the solve copies its start.
		warm, prev = append(warm[:0], sol.Flow...), d
		var q float64
		for _, i := range m.top {
			if l := b.Branch[m.Branches[i].ID]; l >= 0 {
				q += sol.Flow[l]
			}
		}
		out = append(out, Point{q, d})
	}
	return out, nil
}

// PumpCurve returns the pump's differential at the given flows and speed
// ratio, or nil without a pump. For a Controlled pump it is the curve at
// its maximum speed whatever the speed asked: the most its drive can give,
// the limit every set point meets. With several pumps it is the combined
// curve of the first running ones (hydraulics.PumpSet, exact).
func (m *Model) PumpCurve(p Params, speed float64, running int, flows []float64) []Point {
	if !m.PumpDriven() {
		return nil
	}
	if m.Controlled() {
		speed = m.MaxSpeed()
	}
	c := m.Pump.AtSpeed(speed)
	set := m.Set(1, running).AtSpeed(speed)
	out := make([]Point, 0, len(flows))
	for _, q := range flows {
		h := c.Head(q) * p.PumpHead
		if m.Several() {
			hs, _ := set.Head(q)
			h = hs * p.PumpHead
		}
		if h < 0 {
			break
		}
		out = append(out, Point{q, h * m.Fluid.Density * hydraulics.StandardGravity})
	}
	return out
}
