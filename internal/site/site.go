// Package site reads a site survey — the design schedule of a water circuit
// with parallel branches, its valves, its pump and the readings taken on the
// visit — into a Site held in SI units, and reports every problem in the
// sheets with the file, line, column and field a technician has to fix.
//
// A site is either a folder of CSV files (site.csv, branches.csv, valves.csv,
// pump.csv, readings.csv, states.csv, targets.csv) or one .xlsx workbook with one tab per
// sheet of the same name. Only branches and readings are required. The
// layout of each sheet is given by Topics, which is also the text of
// `flowset help`.
//
// The package checks structure only: names, units, ranges, references
// between sheets and the shape of valve tables. It does no hydraulics.
package site

import (
	"fmt"
	"math"
	"slices"
	"strings"
	"unicode"
)

// Site is one surveyed circuit, in SI units. Fields documented as NaN hold NaN
// when the sheets do not give a value and no default applies.
type Site struct {
	Name          string
	Fluid         string  // "water", "ethylene-glycol", "propylene-glycol" or OtherFluid
	GlycolPercent float64 // glycol concentration, percent by volume; 0 for water
	Temperature   float64 // K, the circulating fluid during the survey
	// Density, Viscosity and KinematicViscosity are the fluid's properties
	// as measured (kg/m3, Pa s, m2/s), overriding the property tables; NaN
	// (or 0, in a Site built in code) when not given. At most one of the two
	// viscosities is given.
	Density, Viscosity, KinematicViscosity float64

	Header   Arrangement
	Boundary Boundary

	// StaticLift (m) and OutletPressure (Pa) describe an open circuit: the
	// height from the free surface the pump draws from to the open outlet,
	// and the pressure the outlet needs. Both 0 for a closed loop.
	StaticLift, OutletPressure float64

	Hours       float64 // running hours per year
	EnergyPrice float64 // price per kWh in Currency; NaN when not given
	Currency    string

	// PumpSeries is set when the pump sheet's pumps run in series (one
	// feeding the next); they run in parallel otherwise.
	PumpSeries bool
	// PumpsRunning is how many of the pump sheet's pumps run, the first
	// ones listed; 0 = all.
	PumpsRunning int

	PumpEfficiency  float64 // fraction
	MotorEfficiency float64 // fraction

	// ToleranceLow and ToleranceHigh bound an acceptable flow as fractions of
	// design (-0.10 and +0.10 by default).
	ToleranceLow, ToleranceHigh float64

	// Units names the units results are shown in: "si", "us", or "" for
	// the default (si). Inputs are SI inside whatever it says.
	Units string

	Branches []Branch
	Valves   []ValveModel
	Pump     []PumpPoint
	Readings []Reading
	// States gives some survey states their own pump speed or set point;
	// nil when states.csv is absent. A state not listed runs at the
	// Boundary's.
	States []StateSetting
	// Moves gives valve settings in survey states at branches no reading
	// of the state records a setting for (a valve moved for the state but
	// not read in it); nil when moves.csv is absent.
	Moves []Move
	// Targets overrides the design flow of some branches as the flow to
	// balance to, m3/s, keyed by branch ID; nil when targets.csv is absent.
	Targets map[string]float64

	Source Source
}

// Source tells where a Site was read from.
type Source struct {
	Path   string // folder or workbook as given
	Format string // "csv" or "xlsx"
	// Columns gives, per sheet (named as in problems), the column of each
	// field found in its header, from 1: problems found later, by the
	// model, are placed at their cell with Locate.
	Columns map[string]map[string]int
}

// Locate gives each problem that names a file, a line and a field but no
// column the column of that field in the sheet it was read from.
func (s *Site) Locate(probs Problems) {
	for _, p := range probs {
		if p.Column == 0 && p.Line > 0 && p.Field != "" {
			p.Column = s.Source.Columns[p.File][p.Field]
		}
	}
}

// Arrangement is how the main supply and return headers are laid out.
type Arrangement int

// The header arrangements.
const (
	NoHeaderLoss  Arrangement = iota // header losses neglected
	DirectReturn                     // first branch on supply is first on return
	ReverseReturn                    // first branch on supply is last on return
)

var arrangementWords = []string{NoHeaderLoss: "none", DirectReturn: "direct-return", ReverseReturn: "reverse-return"}

// String returns the word the site sheet uses for a.
func (a Arrangement) String() string { return word(arrangementWords, int(a), "arrangement") }

// BoundaryKind is what holds the circuit's differential pressure.
type BoundaryKind int

// The boundary kinds.
const (
	PumpCurve    BoundaryKind = iota // the pump's head curve at Speed
	ConstantDiff                     // a controller holds SetPoint at Sensor
	MeasuredDiff                     // the differentials read in each state
)

var boundaryWords = []string{PumpCurve: "pump", ConstantDiff: "constant-differential", MeasuredDiff: "measured-differential"}

// String returns the word the site sheet uses for k.
func (k BoundaryKind) String() string { return word(boundaryWords, int(k), "boundary") }

// Boundary is the pressure boundary condition of the circuit.
type Boundary struct {
	Kind     BoundaryKind
	Speed    float64 // pump speed as a ratio to nominal, default 1
	MaxSpeed float64 // highest speed ratio the drive allows, default 1
	SetPoint float64 // Pa, for ConstantDiff; NaN when not given
	Sensor   string  // "pump" or the ID of the branch where the sensor sits
}

// Branch is one parallel branch (a terminal circuit or a riser) with its
// pipe, terminal, regulating valve and the header segment that feeds it.
type Branch struct {
	ID     string
	Parent string // "" on the main headers, else the ID of the riser it hangs from

	DesignFlow float64 // m3/s

	PipeStandard string
	PipeSize     string
	PipeBore     float64 // m; NaN = from the catalogue by standard and size
	PipeLength   float64 // m, flow and return together
	Roughness    float64 // m; NaN = by material of the standard
	FittingsK    float64 // sum of loss coefficients

	TerminalDrop float64 // Pa at TerminalFlow
	TerminalFlow float64 // m3/s; NaN = at design flow

	Valve      string  // model name from the valves sheet, "" for none
	Setting    float64 // as-found setting in the valve's units; NaN if not recorded
	ControlKvs float64 // m3/h at 1 bar of a control valve in series; 0 = none

	// Controller is a differential controller holding the differential
	// across this riser's sub-circuit; the zero Controller is none.
	Controller Controller

	// BypassValve names the regulating valve model in the bypass of a
	// three-port terminal ("" for none): the three-port valve sends the
	// branch's flow through the terminal (coil) or through the bypass,
	// past the terminal and this valve. BypassSetting is its as-found
	// setting; NaN when not recorded (fully open).
	BypassValve   string
	BypassSetting float64

	// The header segment between the previous take-off and this one. The
	// header columns describe both legs; the return columns, where given,
	// the return leg alone (see ReturnLeg).
	SupplyLength    float64 // m
	ReturnLength    float64 // m
	HeaderStandard  string
	HeaderSize      string
	HeaderBore      float64 // m; NaN = from the catalogue
	HeaderK         float64 // loss coefficients of the segment, shared evenly by its two legs
	HeaderRoughness float64 // m; NaN or 0 = by the material of the standard
	SupplyK         float64 // loss coefficients of the supply leg alone
	ReturnK         float64 // loss coefficients of the return leg alone
	ReturnStandard  string  // "" = the header standard
	ReturnSize      string  // "" = as the supply leg
	ReturnBore      float64 // m; NaN or 0 = as the supply leg, or from ReturnSize
	ReturnRoughness float64 // m; NaN or 0 = as the supply leg, or by ReturnStandard

	Note string
	Pos  Pos
}

// Controller is a differential-pressure controller on a riser or branch
// group: its valve sits in the riser's return and it senses from the
// riser's supply take-off to its own inlet, so the span it holds is the
// riser's own parts (its partner valve, the branch's valve) and every
// branch below; or, with Senses SensesBranches, the branches below alone. It throttles until the span reads SetPoint, and lies wide
// open (Kvs) when even so the span reads less.
type Controller struct {
	SetPoint float64 // Pa, as found; 0 = no controller
	Kvs      float64 // m3/h at 1 bar, wide open
	// Min and Max bound the set point the controller can be given, Pa; 0
	// when not given.
	Min, Max float64
	// Senses is where its sensor reads from: SensesRiser ("" too) from the
	// riser's supply take-off, its own pipe and partner valve in the span;
	// SensesBranches across the branches below alone.
	Senses string
}

// Where a differential controller senses from.
const (
	SensesRiser    = "riser"
	SensesBranches = "branches"
)

// senseWords are the accepted values of the controller senses column.
var senseWords = []string{SensesRiser, SensesBranches}

// Below reports whether the controller senses across the branches below
// alone (its riser's own parts outside the span it holds).
func (c Controller) Below() bool { return c.Senses == SensesBranches }

// Has reports whether there is a controller.
func (c Controller) Has() bool { return c.SetPoint > 0 }

// Range returns the set points the controller can be given, Pa: Min and
// Max where given, else 0 and +Inf.
func (c Controller) Range() (lo, hi float64) {
	lo, hi = 0, math.Inf(1)
	if c.Min > 0 {
		lo = c.Min
	}
	if c.Max > 0 {
		hi = c.Max
	}
	return lo, hi
}

// Leg is one leg (supply or return) of a branch's header segment as the
// sheets give it: a bore, or a standard and size to look the bore up by.
type Leg struct {
	Standard, Size string
	Bore           float64 // m; NaN or 0 = from the catalogue by Standard and Size
	Roughness      float64 // m; NaN = by the material of Standard
	Length         float64 // m
	K              float64 // loss coefficients
}

// Sized reports whether the leg names a bore or a catalogue size.
func (l Leg) Sized() bool { return l.Bore > 0 || l.Standard != "" && l.Size != "" }

// SupplyLeg returns the supply leg of b's header segment: the header
// columns, half the header k and the supply k. A roughness of 0 counts as not
// given (no pipe is smooth), so a Branch built in code with the new fields
// left zero keeps the behaviour of one header pipe for both legs.
func (b *Branch) SupplyLeg() Leg {
	l := Leg{Standard: b.HeaderStandard, Size: b.HeaderSize, Bore: b.HeaderBore, Roughness: nan,
		Length: b.SupplyLength, K: b.HeaderK/2 + b.SupplyK}
	if b.HeaderRoughness > 0 {
		l.Roughness = b.HeaderRoughness
	}
	return l
}

// ReturnLeg returns the return leg of b's header segment: the header columns
// where the return columns are blank, half the header k and the return k. A
// return bore or size replaces the header's pipe (a return size is looked up
// in the return standard, else the header's); a return standard alone names
// the return leg's material, so its roughness follows it unless a header or
// return roughness is given.
func (b *Branch) ReturnLeg() Leg {
	l := b.SupplyLeg()
	l.Length, l.K = b.ReturnLength, b.HeaderK/2+b.ReturnK
	if b.ReturnStandard != "" {
		l.Standard = b.ReturnStandard
	}
	switch {
	case b.ReturnBore > 0:
		l.Bore, l.Size = b.ReturnBore, b.ReturnSize
	case b.ReturnSize != "":
		l.Bore, l.Size = nan, b.ReturnSize
	}
	if b.ReturnRoughness > 0 {
		l.Roughness = b.ReturnRoughness
	}
	return l
}

// StateSetting is one row of the states sheet: the pump as it ran in one
// survey state.
type StateSetting struct {
	Label    string
	Speed    float64 // pump speed ratio (pump boundary); NaN = the site's
	SetPoint float64 // Pa (constant-differential boundary); NaN = the site's
	Running  int     // pumps running, the first ones listed; 0 = the site's
	Note     string
	Pos      Pos
}

// Move is one row of the moves sheet: a valve's setting in one survey
// state where no reading of that state gives it.
type Move struct {
	State, Branch string
	Setting       float64
	Note          string
	Pos           Pos
}

// ValveModel is a regulating valve: either a table of Kv against setting,
// or a generic characteristic with Kvs and rangeability.
type ValveModel struct {
	Name string
	Unit string // unit of the settings: "turns", "%" or "steps"

	Settings []float64 // increasing
	Kv       []float64 // m3/h at 1 bar, one per setting

	Step float64 // smallest setting change the handwheel allows

	Characteristic string  // "" for a table; "linear", "equal-percentage" or "quick-opening"
	Kvs            float64 // m3/h at 1 bar fully open, for a characteristic
	Rangeability   float64 // Kvs over the smallest controllable Kv

	MinDiff float64 // Pa, smallest differential that reads reliably

	// MaxFlow, when not empty, makes the model a pressure-independent
	// control valve (a flow limiter and a differential regulator in one
	// body): the flow it holds at each of Settings, m3/s, rising with the
	// setting. Kv then gives its flow coefficient at each setting below
	// HoldDiff (NaN where the sheet leaves it blank: the Kv that passes
	// the setting's flow at HoldDiff).
	MaxFlow []float64
	// HoldDiff is the least differential across a pressure-independent
	// valve at which it holds its flow, Pa; NaN for other valves.
	HoldDiff float64

	Pos Pos
}

// Table reports whether v is defined by a Kv table.
func (v *ValveModel) Table() bool { return v.Characteristic == "" && len(v.MaxFlow) == 0 }

// PressureIndependent reports whether v is a pressure-independent control
// valve (a table of the flow it holds against setting).
func (v *ValveModel) PressureIndependent() bool { return len(v.MaxFlow) > 0 }

// Range returns the lowest and highest setting of the valve.
func (v *ValveModel) Range() (lo, hi float64) {
	if v.Characteristic == "" {
		if len(v.Settings) == 0 {
			return 0, 0
		}
		return v.Settings[0], v.Settings[len(v.Settings)-1]
	}
	return 0, 100
}

// PumpPoint is one point of a pump's head curve at nominal speed.
type PumpPoint struct {
	Pump string  // the pump's id; "" where the site has one pump
	Flow float64 // m3/s
	Head float64 // m of the pumped fluid
	// Speed is the pump's own fixed speed ratio, the same on each of its
	// points; NaN (or 0 in a Site built in code) = the set's speed.
	Speed float64
	// Efficiency is the pump's efficiency at Flow at nominal speed, a
	// fraction; NaN (or 0) when not given.
	Efficiency float64
	Pos        Pos
}

// Pumps returns the ids of the pump sheet's pumps in the order of their
// first points ("" for a site's one unnamed pump); nil without a pump
// sheet.
func (s *Site) Pumps() []string {
	var out []string
	for _, p := range s.Pump {
		if !slices.Contains(out, p.Pump) {
			out = append(out, p.Pump)
		}
	}
	return out
}

// Running returns how many pumps run in survey state label: the states
// sheet's number, else the site's, else all of them.
func (s *Site) Running(label string) int {
	n := len(s.Pumps())
	if st := s.State(label); st != nil && st.Running > 0 {
		return min(st.Running, n)
	}
	if s.PumpsRunning > 0 {
		return min(s.PumpsRunning, n)
	}
	return n
}

// Quantity is what a reading measures.
type Quantity int

// The quantities a reading can measure. The zero Quantity is not valid.
const (
	Flow       Quantity = iota + 1 // flow through a branch
	ValveDiff                      // differential across the branch's regulating valve
	BranchDiff                     // differential across the whole branch
	HeaderDiff                     // differential between supply and return headers
	PumpDiff                       // differential across the pump
	TotalFlow                      // flow through the pump
	Speed                          // the pump drive's displayed speed, as a ratio to rated
	// ControlledDiff is the differential across the span a riser's
	// differential controller holds (see Controller): what its sensor sees.
	ControlledDiff
)

var quantityWords = []string{Flow: "flow", ValveDiff: "valve diff", BranchDiff: "branch diff",
	HeaderDiff: "header diff", PumpDiff: "pump diff", TotalFlow: "total flow", Speed: "speed", ControlledDiff: "controlled diff"}

// String returns the word the readings sheet uses for q.
func (q Quantity) String() string { return word(quantityWords, int(q), "quantity") }

// IsFlow reports whether q is a flow (SI m3/s); otherwise it is a pressure
// difference (Pa) or, for Speed, a ratio.
func (q Quantity) IsFlow() bool { return q == Flow || q == TotalFlow }

// Reading is one measurement taken on the survey.
type Reading struct {
	State string // survey state label, e.g. "as-found", "after-change"
	Where string // branch ID, "pump" or "header"
	What  Quantity
	Value float64 // SI: m3/s or Pa
	// Setting is the valve setting at the time; NaN when not given, then
	// the branch's as-found setting applies.
	Setting float64
	// Bypass is set when the reading was taken with the branch's
	// three-port valve sending its flow through the bypass.
	Bypass     bool
	Instrument string  // instrument kind, see Instruments
	Sigma      float64 // standard uncertainty, SI
	Time, Note string
	Pos        Pos
}

// Pos is where a row was read from.
type Pos struct {
	File string
	Line int
}

// String returns "file:line", or the file alone when the line is 0.
func (p Pos) String() string {
	if p.Line == 0 {
		return Printable(p.File)
	}
	return fmt.Sprintf("%s:%d", Printable(p.File), p.Line)
}

// The places a reading can name besides a branch.
const (
	AtPump   = "pump"
	AtHeader = "header"
)

// Fluids lists the accepted fluid names.
var fluids = []string{"water", "ethylene-glycol", "propylene-glycol", OtherFluid}

// OtherFluid names a fluid not in the property tables: its density and
// viscosity are given in the site sheet.
const OtherFluid = "other"

// Characteristics lists the accepted generic valve characteristics.
var characteristics = []string{"linear", "equal-percentage", "quick-opening"}

// settingUnits lists the accepted valve setting units.
var settingUnits = []string{"turns", "%", "steps"}

func word(words []string, i int, what string) string {
	if i >= 0 && i < len(words) && words[i] != "" {
		return words[i]
	}
	return fmt.Sprintf("%s(%d)", what, i)
}

// normWord folds a keyword for comparison: lower case, spaces, hyphens and
// underscores all alike.
func normWord(s string) string {
	var b strings.Builder
	b.Grow(len(s))
	space := false
	for _, r := range strings.TrimSpace(s) {
		switch r {
		case '_', '-', ' ', '\t':
			space = true
			continue
		}
		if space && b.Len() > 0 {
			b.WriteByte(' ')
		}
		space = false
		b.WriteRune(unicode.ToLower(r))
	}
	return b.String()
}

// Branch returns the branch with the given ID, or nil.
func (s *Site) Branch(id string) *Branch {
	for i := range s.Branches {
		if s.Branches[i].ID == id {
			return &s.Branches[i]
		}
	}
	return nil
}

// Valve returns the valve model with the given name, or nil.
func (s *Site) Valve(name string) *ValveModel {
	for i := range s.Valves {
		if s.Valves[i].Name == name {
			return &s.Valves[i]
		}
	}
	return nil
}

// State returns the states sheet's row for survey state label, or nil.
func (s *Site) State(label string) *StateSetting {
	for i := range s.States {
		if s.States[i].Label == label {
			return &s.States[i]
		}
	}
	return nil
}

// Target returns the flow to balance branch id to: its target when one is
// given, else its design flow. It returns NaN for an unknown branch.
func (s *Site) Target(id string) float64 {
	if q, ok := s.Targets[id]; ok {
		return q
	}
	if b := s.Branch(id); b != nil {
		return b.DesignFlow
	}
	return nan
}
