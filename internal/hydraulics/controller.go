package hydraulics

import (
	"fmt"
	"math"

	"flowset/internal/fluid"
)

// DiffController is a self-acting differential-pressure controller's valve,
// as an element in series with the sub-circuit (riser or branch group)
// whose differential it holds. The controller senses the differential
// across the sub-circuit, supply to return (its partner valve included), and
// throttles until that differential is SetPoint; when even wide open it
// cannot give it, it is a fixed Kvs.
//
// The sensed span lies beside the controller's own link, so the law cannot
// be a drop at the controller's own flow in the way a pump's is. It becomes
// one by the span's own behaviour: the sub-circuit's differential rises with
// its flow, so holding SetPoint across it is the same as holding the flow
// Hold at which the sub-circuit (its partner valve, riser parts and every
// branch below) drops SetPoint. Hold depends only on the sub-circuit, so the
// caller works it out from a solve of the sub-circuit alone at SetPoint.
// The controller's drop is then
//
//	Kvs law at q            for q <= Hold   (wide open: not holding)
//	Kvs law at q + k(q - Hold)   above     (throttling the excess)
//
// where the steep slope k stands for a vertical line at Hold, as
// ControlledPump's droop stands for a flat one: k is finite so that the
// network's Jacobian stays definite and the Todini-Pilati iteration can
// cross the corner. k is chosen so that throttling a drop as large as the
// set point lets the flow rise by ControllerDroop of Hold (0.01 %), so the
// held differential moves by about 0.02 % of the set point per set point of
// excess: far below what a differential gauge resolves (±1 % of reading at
// best) and below a self-acting controller's own proportional band, which
// the model does not claim to know (a numerical choice, no source).
type DiffController struct {
	Kvs      float64 // m3/h at 1 bar, wide open
	SetPoint float64 // Pa, across the sub-circuit
	Hold     float64 // m3/s: the sub-circuit's flow at SetPoint
}

// Validate reports whether the controller can serve as an element.
func (c DiffController) Validate() error {
	if !(c.Kvs > 0) || math.IsInf(c.Kvs, 1) {
		return fmt.Errorf("differential controller: kvs %g must be positive: %w", c.Kvs, ErrInvalid)
	}
	if !(c.SetPoint > 0) || math.IsInf(c.SetPoint, 1) {
		return fmt.Errorf("differential controller: set point %g Pa must be positive: %w", c.SetPoint, ErrInvalid)
	}
	if !(c.Hold > 0) || math.IsInf(c.Hold, 1) {
		return fmt.Errorf("differential controller: held flow %g m3/s must be positive: %w", c.Hold, ErrInvalid)
	}
	return nil
}

// stiff is the slope of the throttling law, Pa s/m3.
func (c DiffController) stiff() float64 { return c.SetPoint / (ControllerDroop * c.Hold) }

// Drop implements Element. It is odd in q like every element's drop;
// reverse flow is not a state a controller is built for.
func (c DiffController) Drop(q float64, f fluid.State) (dp, slope float64) {
	dp, slope = KvDrop(q, c.Kvs, f.Density)
	if a := math.Abs(q); a > c.Hold {
		k := c.stiff()
		dp += math.Copysign(k*(a-c.Hold), q)
		slope += k
	}
	return dp, slope
}

// Throttle returns the drop the controller takes at flow q beyond its
// wide-open drop, Pa: 0 while it is wide open (not holding).
func (c DiffController) Throttle(q float64) float64 {
	if q > c.Hold {
		return c.stiff() * (q - c.Hold)
	}
	return 0
}

// Holding reports whether at flow q the controller throttles (holds its set
// point) rather than lying wide open. A flow within a part in 10⁹ of Hold
// counts as wide open: the solver's tolerance.
func (c DiffController) Holding(q float64) bool { return q > c.Hold*(1+1e-9) }
