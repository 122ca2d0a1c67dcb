package report

import (
	"errors"
	"fmt"
	"math"
)

// ErrInvalid is the cause wrapped by every error Write returns for an Input
// it cannot draw (an infinite number, a ragged table).
var ErrInvalid = errors.New("invalid report input")

// Input is the plain view model of one report. The report does no numerics:
// every number is already in the display units named by FlowUnit and
// PressureUnit, and every text is shown as given (escaped, never trusted).
//
// A NaN number means "not available": it is shown as a dash in text and left
// out of the charts. An infinite number is an error.
type Input struct {
	Site        string // site or circuit name, the report's title
	Fluid       string // e.g. "water" or "propylene glycol 30 %"
	Temperature string // e.g. "70 °C", already formatted
	Generated   string // date or time, formatted by the caller from an injected clock
	Measured    string // what was measured, one sentence

	FlowUnit     string // display unit of every flow, e.g. "l/s"
	PressureUnit string // display unit of every differential, e.g. "kPa"

	// ToleranceLow and ToleranceHigh bound the accepted flow in percent of
	// design, relative to design: -10 and +10 accept 90 % to 110 %.
	ToleranceLow, ToleranceHigh float64

	Summary  Summary
	Branches []Branch
	Combined Combined

	// Visit is the order of work on site: the report's first pages.
	Visit Visit

	// Trim, when not nil, makes the report the round after setting: its
	// first pages are the round's (what the readings prove, the pump, the
	// trims, every branch as found, predicted and as left) instead of the
	// visit's, and the appendix is the model fitted to every state.
	Trim *Trim

	Plan      Table // the full field sheet (appendix): every column, in walk order
	Diagnosis Table // findings with their evidence
	Readings  Table // every reading with its residual

	// Cautions are shown prominently in the header; when empty,
	// DefaultCautions are shown.
	Cautions []string

	// Warnings are the site check's warnings, each with its file and line.
	// The report groups them by Kind: a count, the first few and
	// WarningsWhere, which says where the whole list is.
	Warnings      []Warning
	WarningsWhere string

	// Files names, in a sentence, the files beside the report that hold
	// every table in full (e.g. "field-sheet.csv, readings.csv"). A large
	// site's report shows its long tables a page at a time on screen and
	// prints only the first page of each, so it says where the rest is.
	Files string
}

// Warning is one warning of the site check: its kind (what is wrong, the
// same text for every warning of the kind) and its whole text, with the
// file and line it is about.
type Warning struct {
	Kind, Text string
}

// Summary holds the headline results. Counts are given by the caller, who
// knows which branches were judged; nothing is recounted here.
type Summary struct {
	InBefore, OutBefore int // branches within / outside tolerance as found
	InAfter, OutAfter   int // the same, predicted after the plan

	Faults []string // one short line per fault found; the count is len(Faults)

	SetpointBefore string  // pump set-point as found, e.g. "42 kPa constant differential"
	SetpointAfter  string  // pump set-point planned
	SpeedRatio     float64 // planned / present pump speed (NaN when not applicable)
	EnergySaving   string  // e.g. "about 18 % less pump power (affinity laws)"

	Notes []string
}

// Branch is one parallel branch. Flows are in Input.FlowUnit, differentials
// in Input.PressureUnit.
type Branch struct {
	ID string

	Design    float64 // design flow
	Before    float64 // flow as found (measured or fitted)
	After     float64 // flow predicted after the plan
	AfterLow  float64 // lower end of the 95 % interval of After
	AfterHigh float64 // upper end of the 95 % interval of After

	// RatioFit is the fitted fixed resistance divided by the design
	// resistance; RatioLow and RatioHigh bound its 95 % interval.
	RatioFit, RatioLow, RatioHigh float64

	Flags []string // short diagnosis flags, e.g. "fouled strainer?"; empty when none

	SettingNow, SettingPlanned string  // valve settings as text for the tables
	NowValue, PlannedValue     float64 // the same settings as numbers for the chart
	ValveUnit                  string  // unit of NowValue and PlannedValue, e.g. "turns"

	// Curves of branch differential against flow (X flow, Y differential).
	DesignCurve []XY // from design data
	FitCurve    []XY // from the fitted resistance
	FitLow      []XY // lower edge of the 95 % band of FitCurve
	FitHigh     []XY // upper edge of the 95 % band of FitCurve

	Measured []Point // readings on this branch
}

// Visit is the job in the order a technician does it on site, shown first
// on screen and on paper: before you start, fix first, pump, valve settings,
// prove it, hand-over. Every text is already in plain words and display
// units; empty parts are left out (a part with nothing to do says so).
type Visit struct {
	// Short, when not empty, says the plan cannot meet its targets: what is
	// short, why and what would fix it, one line each. It is shown above
	// everything else and the report then claims no saving.
	Short []string

	BeforeStart []string // what would make the readings or settings wrong
	Fixes       []Fix    // faults to put right before setting valves
	// FixesFile is the file beside the report that lists every fix (a
	// large site's report shows them a page at a time).
	FixesFile string

	Pump PumpStep

	// OrderReason says once why the settings are in this order.
	OrderReason string
	// Settings are the valve settings in adjustment order, each with its
	// unit and check reading; Settings.WriteIn names the blank columns for
	// paper. Remedied are the settings once the fixes are made (no rows
	// when no fault changes them); its Notes say which to use when.
	Settings, Remedied Table

	// Prove lists the branches to read after setting, with the value
	// expected and its band.
	Prove Table

	// Handover is the hand-over record: each field with its value, or ""
	// for a blank to fill in on site.
	Handover []Field
}

// Fix is one fault to put right, with what it saves and what to read after.
type Fix struct {
	Where     string // branch or reading
	Action    string // what to do, e.g. "clean the strainer, check the isolating valve"
	Saves     string // what fixing it saves, e.g. "pump differential 169.3 -> 105.7 kPa"; "" when unknown
	ReadAfter string // what to read after fixing it
}

// PumpStep is the change asked of the pump.
type PumpStep struct {
	From, To string   // e.g. "98.5 % speed, 169.3 kPa"
	Where    string   // where it is set, e.g. "drive speed" or "differential set point at branch X"
	Warnings []string // e.g. no pump curve given, raised differential
	// Pumps says, for several pumps, which run and what each gives, and
	// whether one pump fewer would serve; empty for one pump.
	Pumps []string
}

// Field is one line of the hand-over record.
type Field struct{ Label, Value string }

// XY is one point of a curve.
type XY struct{ X, Y float64 }

// Point is one reading: X flow and Y differential with their standard or
// expanded uncertainties (half-widths of the error bars; 0 or NaN for none)
// and a short label such as "survey 1, tappings".
type Point struct {
	X, Y       float64
	XErr, YErr float64
	Label      string
}

// Combined is the whole circuit: the parallel branches' combined system
// curve and the pump curve, as found and as planned. X is flow, Y is the
// differential across the pump.
type Combined struct {
	System, SystemAfter   []XY
	PumpBefore, PumpAfter []XY
	OpBefore, OpAfter     XY // operating points (NaN coordinates when unknown)
}

// Table is a titled table of text cells. Every row must have as many cells
// as there are Columns.
type Table struct {
	Title   string
	Columns []string
	Rows    [][]string
	Notes   []string
	// WriteIn names blank columns added after Columns for writing in on
	// site (e.g. "set", "read after", "initials"); they hold no data.
	WriteIn []string
	// File is the file beside the report that holds this table in full
	// (e.g. "field-sheet.xlsx"); a long table's page says so.
	File string
}

// DefaultCautions are shown when Input.Cautions is empty.
func DefaultCautions() []string {
	return []string{
		"The readings are taken on a running system: test points carry pressurised water that may be hot enough to scald or cold enough to burn. Open them only with the meter's probes fitted, wear gloves and eye protection, and keep clear of hot and cold pipework and of rotating machinery and its electrical supply.",
		"Raising a pump's speed or set point raises the pressure in everything it serves: check the ratings of pipework, valves and equipment first. Put every control back to automatic before leaving.",
		"Every figure here is a prediction from a model fitted to the readings. Verify each setting and flow on site, with calibrated instruments; the work is for competent, authorised people only. Local codes, the plant's own instructions and licensed practice prevail over anything in this report.",
	}
}

// validate rejects numbers that cannot be drawn and tables that cannot be
// laid out. NaN is allowed: it means "not available".
func (in *Input) validate() error {
	var errs []error
	num := func(where string, v float64) {
		if math.IsInf(v, 0) {
			errs = append(errs, fmt.Errorf("%s is infinite: %w", where, ErrInvalid))
		}
	}
	// The names are formatted only for a bad number: a large site has
	// millions of curve points.
	curve := func(where string, c []XY) {
		for i, p := range c {
			if math.IsInf(p.X, 0) {
				num(fmt.Sprintf("%s[%d].X", where, i), p.X)
			}
			if math.IsInf(p.Y, 0) {
				num(fmt.Sprintf("%s[%d].Y", where, i), p.Y)
			}
		}
	}
	num("ToleranceLow", in.ToleranceLow)
	num("ToleranceHigh", in.ToleranceHigh)
	if in.ToleranceLow > in.ToleranceHigh {
		errs = append(errs, fmt.Errorf("tolerance low %g above high %g: %w", in.ToleranceLow, in.ToleranceHigh, ErrInvalid))
	}
	num("Summary.SpeedRatio", in.Summary.SpeedRatio)
	for i := range in.Branches {
		b := &in.Branches[i]
		w := fmt.Sprintf("branch %d", i)
		for _, f := range []struct {
			n string
			v float64
		}{
			{"Design", b.Design}, {"Before", b.Before}, {"After", b.After},
			{"AfterLow", b.AfterLow}, {"AfterHigh", b.AfterHigh},
			{"RatioFit", b.RatioFit}, {"RatioLow", b.RatioLow}, {"RatioHigh", b.RatioHigh},
			{"NowValue", b.NowValue}, {"PlannedValue", b.PlannedValue},
		} {
			num(w+" "+f.n, f.v)
		}
		curve(w+" DesignCurve", b.DesignCurve)
		curve(w+" FitCurve", b.FitCurve)
		curve(w+" FitLow", b.FitLow)
		curve(w+" FitHigh", b.FitHigh)
		for j, p := range b.Measured {
			if finite(p.X) && finite(p.Y) && !math.IsInf(p.XErr, 0) && !math.IsInf(p.YErr, 0) {
				continue
			}
			m := fmt.Sprintf("%s Measured[%d]", w, j)
			num(m+".X", p.X)
			num(m+".Y", p.Y)
			num(m+".XErr", p.XErr)
			num(m+".YErr", p.YErr)
		}
	}
	c := &in.Combined
	curve("Combined.System", c.System)
	curve("Combined.SystemAfter", c.SystemAfter)
	curve("Combined.PumpBefore", c.PumpBefore)
	curve("Combined.PumpAfter", c.PumpAfter)
	curve("Combined.OpBefore", []XY{c.OpBefore})
	curve("Combined.OpAfter", []XY{c.OpAfter})
	for _, t := range []struct {
		n string
		t *Table
	}{{"plan", &in.Plan}, {"diagnosis", &in.Diagnosis}, {"readings", &in.Readings},
		{"settings", &in.Visit.Settings}, {"remedied settings", &in.Visit.Remedied}, {"prove", &in.Visit.Prove}} {
		for i, r := range t.t.Rows {
			if len(t.t.Columns) > 0 && len(r) != len(t.t.Columns) {
				errs = append(errs, fmt.Errorf("%s table row %d has %d cells, want %d: %w", t.n, i, len(r), len(t.t.Columns), ErrInvalid))
			}
		}
	}
	if in.Trim != nil {
		errs = append(errs, in.Trim.validate(num)...)
	}
	if len(errs) > 10 {
		errs = append(errs[:10], fmt.Errorf("and %d more", len(errs)-10))
	}
	return errors.Join(errs...)
}
