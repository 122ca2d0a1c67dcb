package diagnose

import (
	"fmt"
	"math"
)

// Controller is the evidence about one riser's differential controller.
type Controller struct {
	ID       string
	SetPoint float64 // Pa, as recorded
	// Open reports that the calibrated model has the controller wide open
	// in state State, its span reading Span (Pa) below the set point: the
	// riser's supply does not give the set point plus the valve's drop.
	Open  bool
	State string
	Span  float64
	// Readings are the survey's readings of the span, in states where the
	// model has the controller throttling (so its span should read the set
	// point).
	Readings []SpanReading
	// Held is the set point the calibration finds it held as found, with
	// its 95 % interval Lo-Hi, Pa; NaN (or 0) without a fit.
	Held, Lo, Hi float64
}

// OffSetTolerance is how far the set point a controller is found to hold
// may lie from the one recorded before it is flagged: 5 %, about what its
// scale can be read to (common practice, no source).
const OffSetTolerance = 0.05

// SpanReading is one reading across a controller's span.
type SpanReading struct {
	Label, State string
	Value, Sigma float64 // Pa; Sigma a standard uncertainty
}

// Controllers returns the findings about differential controllers: one
// wide open where its model says so, and one whose span reads off its set
// point beyond the reading's expanded uncertainty (k = 2) while the model
// has it throttling.
func Controllers(cs []Controller, t Thresholds) []Finding {
	t = t.withDefaults()
	var out []Finding
	for _, c := range cs {
		if c.Open {
			out = append(out, Finding{Code: ControllerOpen, Severity: Warning, Branch: c.ID, Confidence: math.NaN(),
				Message:  "the differential controller lies wide open: the riser's supply is less than its set point plus its valve's drop, so its branches get less than the set point",
				Evidence: fmt.Sprintf("in state %q the model has its span at %.1f kPa against a set point of %.1f kPa", c.State, c.Span/1e3, c.SetPoint/1e3),
				Action:   "give the riser more differential (see the pump step of the plan) or, if its branches need less, lower the set point"})
		}
		fitted := ""
		if c.Held > 0 {
			fitted = fmt.Sprintf("; the survey as a whole puts what it held at %.1f kPa (95 %% %.1f-%.1f)", c.Held/1e3, c.Lo/1e3, c.Hi/1e3)
		}
		flagged := false
		for _, r := range c.Readings {
			if !(r.Sigma > 0) {
				continue
			}
			z := (r.Value - c.SetPoint) / r.Sigma
			if math.Abs(z) <= 2 {
				continue
			}
			conf := 2*normalCDF(math.Abs(z)) - 1
			if conf < t.Confidence {
				continue
			}
			out = append(out, Finding{Code: ControllerOffSet, Severity: Fault, Branch: c.ID, Reading: r.Label, Confidence: conf,
				Message:  offSetMessage,
				Evidence: fmt.Sprintf("read %.1f kPa ± %.1f kPa (k = 2) in state %q against a set point of %.1f kPa", r.Value/1e3, 2*r.Sigma/1e3, r.State, c.SetPoint/1e3) + fitted,
				Action:   offSetAction})
			flagged = true
		}
		if !flagged && c.Held > 0 && (c.Lo > c.SetPoint*(1+OffSetTolerance) || c.Hi < c.SetPoint*(1-OffSetTolerance)) {
			// No reading of the span says so, but the rest of the survey
			// cannot be explained with the set point recorded.
			out = append(out, Finding{Code: ControllerOffSet, Severity: Warning, Branch: c.ID, Confidence: 0.95,
				Message:  offSetMessage,
				Evidence: fmt.Sprintf("recorded at %.1f kPa", c.SetPoint/1e3) + fitted,
				Action:   offSetAction + "; a reading across the span would confirm it"})
		}
	}
	return out
}

const (
	offSetMessage = "the span of the differential controller does not read its set point although its valve could still throttle: a set point other than recorded, a blocked or misconnected sensing line, or a faulty controller"
	offSetAction  = "check the controller's set point scale and its sensing line, then read across the span again"
)
