package site

import "math"

// Instrument is a kind of instrument and the uncertainty taken for its
// readings when the sheet states none.
type Instrument struct {
	Name  string
	Title string
	Reads []Quantity
	// Rel and Floor give the default expanded uncertainty (k = 2) of one
	// reading: the larger of Rel times the reading and Floor (SI, m3/s for
	// flows, Pa for differentials; FlowFloor and DiffFloor below).
	Rel        float64
	FlowFloor  float64
	DiffFloor  float64
	SpeedFloor float64 // of a speed ratio
	Source     string
}

// instruments is the table behind Instruments. The figures are the
// defaults a technician gets without stating an uncertainty; where no
// published figure was found the entry says so.
var instruments = []Instrument{
	{Name: "clamp-on", Title: "ultrasonic clamp-on flow meter", Reads: []Quantity{Flow, TotalFlow},
		Rel: 0.05, FlowFloor: 1e-5,
		// shared/references.md §6: "site instruments ±5 % at best".
		Source: "site instruments are good to ±5 % at best; the floor is common practice, no source"},
	{Name: "valve-meter", Title: "flow derived from a regulating valve's differential and its Kv table", Reads: []Quantity{Flow},
		Rel: 0.10, FlowFloor: 1e-5,
		// shared/references.md §6: ±5 % fully open, markedly worse closed by half or more.
		Source: "±5 % fully open and markedly worse when closed by half or more; ±10 % is taken for an unknown opening, common practice, no source"},
	{Name: "orifice", Title: "fixed-orifice metering station", Reads: []Quantity{Flow, TotalFlow},
		Rel: 0.05, FlowFloor: 1e-5,
		// shared/references.md §6, fixed-orifice metering station.
		Source: "±5 % with 5 diameters of straight pipe upstream and 2 downstream"},
	{Name: "mag-meter", Title: "electromagnetic in-line flow meter", Reads: []Quantity{Flow, TotalFlow},
		Rel: 0.02, FlowFloor: 1e-5, Source: "common practice, no source"},
	{Name: "manometer", Title: "digital differential manometer", Reads: []Quantity{ValveDiff, BranchDiff, HeaderDiff, PumpDiff, ControlledDiff},
		Rel: 0.02, DiffFloor: 100, Source: "common practice, no source"},
	{Name: "gauge", Title: "pair of dial pressure gauges, read as a difference", Reads: []Quantity{BranchDiff, HeaderDiff, PumpDiff, ControlledDiff},
		Rel: 0.05, DiffFloor: 5e3, Source: "common practice, no source"},
	{Name: "transmitter", Title: "installed sensor read from the controls", Reads: []Quantity{Flow, ValveDiff, BranchDiff, HeaderDiff, PumpDiff, TotalFlow, ControlledDiff},
		Rel: 0.05, FlowFloor: 1e-5, DiffFloor: 500, Source: "common practice, no source"},
	{Name: "pump-display", Title: "flow, head or speed shown by the pump's own controller", Reads: []Quantity{PumpDiff, TotalFlow, Speed},
		Rel: 0.10, FlowFloor: 5e-5, DiffFloor: 1e3, SpeedFloor: 0.01,
		Source: "common practice, no source; a drive's speed display: ±1 % of rated (common practice, no source)"},
}

// Instruments returns the instrument kinds a reading may name.
func Instruments() []Instrument {
	out := make([]Instrument, len(instruments))
	copy(out, instruments)
	return out
}

func instrumentNames() []string {
	out := make([]string, len(instruments))
	for i, in := range instruments {
		out[i] = in.Name
	}
	return out
}

func findInstrument(name string) *Instrument {
	for i := range instruments {
		if instruments[i].Name == name {
			return &instruments[i]
		}
	}
	return nil
}

// reads reports whether the instrument can read q.
func (in *Instrument) reads(q Quantity) bool {
	for _, r := range in.Reads {
		if r == q {
			return true
		}
	}
	return false
}

// DefaultSigma returns the standard uncertainty (k = 1) the instrument's
// default gives a reading of value v of quantity q.
func (in *Instrument) DefaultSigma(q Quantity, v float64) float64 {
	floor := in.DiffFloor
	switch {
	case q.IsFlow():
		floor = in.FlowFloor
	case q == Speed:
		return in.SpeedFloor / defaultCoverage
	}
	return math.Max(in.Rel*math.Abs(v), floor) / defaultCoverage
}
