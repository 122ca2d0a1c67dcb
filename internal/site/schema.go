package site

import (
	"math"

	"flowset/internal/units"
)

// KvPerCv converts a US flow coefficient Cv (US gal/min of water at 1 psi)
// to Kv (m3/h at 1 bar): Kv = 0.864978 Cv, exact from the definitions of the
// US gallon, the psi and the bar (shared/references.md §3.3).
const KvPerCv = 0.864978

var nan = math.NaN()

type colType int

const (
	textCol colType = iota
	numCol
	wordCol
)

// column describes one column of a sheet, or one key of the site sheet.
type column struct {
	name     string
	aliases  []string
	typ      colType
	kind     units.Kind // for numCol: the quantity; 0 = a plain number with no unit
	unit     string     // default unit, also the unit the writer uses
	required bool
	what     string // noun for messages
	lo, hi   float64
	words    []string // for wordCol
	cv       string   // name of a column giving the same value as a US Cv
	want     string   // replaces the generated range hint
	help     string
}

// schema is the layout of one sheet.
type schema struct {
	name    string // sheet name; the CSV file is name + ".csv"
	columns []column
}

func (s *schema) column(name string) *column {
	for i := range s.columns {
		if s.columns[i].name == name {
			return &s.columns[i]
		}
	}
	return nil
}

// Plausible bounds, SI. They catch slips (a flow in l/h typed into l/s,
// a bore in inches typed as mm) and absurd numbers; they are not design
// limits. Common practice, no source.
const (
	maxFlow     = 10   // m3/s
	minFlow     = 1e-7 // m3/s, 0.36 l/h
	maxLength   = 1e4  // m
	minBore     = 1e-3 // m
	maxBore     = 3    // m
	maxRough    = 0.01 // m
	maxK        = 1e4  // loss coefficient sum
	maxPressure = 1e7  // Pa, 100 bar
	maxHead     = 1000 // m
	maxKv       = 1e5  // m3/h
	maxSetting  = 1e6  // any setting unit
	maxPumps    = 20   // pumps on one circuit
	minTemp     = 223.15
	// minMagnitude is the smallest non-zero SI value accepted anywhere;
	// smaller ones are slips, and could not be written in every unit.
	minMagnitude = 1e-15
	boundSlack   = 1e-9
	maxTemp      = 473.15
	// A liquid in a hydronic or process circuit: light oils and
	// hydrocarbons (about 600 kg/m3) to brines (about 1300 kg/m3), with
	// room either side; viscosities from hot water (0.14 mPa s at 150 degC)
	// to a heavy oil. Common practice, no source.
	minDensity   = 400  // kg/m3
	maxDensity   = 2500 // kg/m3
	minViscosity = 1e-5 // Pa s, 0.01 mPa s
	maxViscosity = 10   // Pa s
	minKinematic = 1e-8 // m2/s, 0.01 mm2/s
	maxKinematic = 1e-2 // m2/s
)

var siteKeys = schema{name: "site", columns: []column{
	{name: "name", typ: textCol, help: "site name shown in reports; default the folder or workbook name"},
	{name: "fluid", typ: wordCol, words: fluids, help: "water, ethylene-glycol, propylene-glycol or other (density and viscosity given); default water"},
	{name: "glycol", typ: numCol, kind: units.Dimensionless, unit: "%", what: "concentration", lo: 0, hi: 1,
		help: "glycol concentration by volume; required for a glycol, 0 for water"},
	{name: "temperature", typ: numCol, kind: units.Temperature, unit: "degC", what: "temperature", lo: minTemp, hi: maxTemp,
		help: "mean circulating temperature during the survey; default 20 degC"},
	{name: "density", typ: numCol, kind: units.Density, unit: "kg/m3", what: "density", lo: minDensity, hi: maxDensity,
		help: "density of the fluid as measured (a lab sample); blank = from the fluid tables at the temperature"},
	{name: "viscosity", typ: numCol, kind: units.Viscosity, unit: "mPa s", what: "dynamic viscosity", lo: minViscosity, hi: maxViscosity,
		help: "dynamic viscosity as measured (1 cP = 1 mPa s); blank = from the fluid tables"},
	{name: "kinematic viscosity", typ: numCol, kind: units.KinematicViscosity, unit: "mm2/s", what: "kinematic viscosity", lo: minKinematic, hi: maxKinematic,
		help: "kinematic viscosity as measured (1 cSt = 1 mm2/s), instead of viscosity; blank = from the fluid tables"},
	{name: "header", typ: wordCol, words: arrangementWords, help: "none, direct-return or reverse-return; default none (header losses neglected)"},
	{name: "boundary", typ: wordCol, words: boundaryWords,
		help: "pump, constant-differential or measured-differential; default pump when pump.csv is given, else measured-differential"},
	{name: "speed", typ: numCol, kind: units.Dimensionless, unit: "", what: "speed ratio", lo: 1e-3, hi: 2,
		want: `a ratio to nominal speed from 0.001 to 2; write "speed [%]" for a percentage`,
		help: "pump speed during the survey as a ratio to nominal; default 1"},
	{name: "max speed", typ: numCol, kind: units.Dimensionless, unit: "", what: "speed ratio", lo: 1e-3, hi: 2,
		want: `a ratio to nominal speed from 0.001 to 2; write "max speed [%]" for a percentage`,
		help: "highest speed the drive allows as a ratio to nominal; default 1"},
	{name: "set point", aliases: []string{"setpoint"}, typ: numCol, kind: units.Pressure, unit: "kPa", what: "pressure difference", lo: 1, hi: maxPressure,
		help: "differential the controller holds, for a constant-differential boundary"},
	{name: "static lift", typ: numCol, kind: units.Length, unit: "m", what: "height", lo: 0, hi: maxHead,
		help: "open circuit: height from the free surface the pump draws from (basin, tank) up to the open outlet (spray header, nozzles); default 0, a closed loop"},
	{name: "outlet pressure", typ: numCol, kind: units.Pressure, unit: "kPa", what: "pressure", lo: 0, hi: maxPressure,
		help: "open circuit: pressure the open outlet needs above the air (spray nozzles); default 0"},
	{name: "pump arrangement", typ: wordCol, words: pumpArrangementWords,
		help: "several pumps on the pump sheet: parallel (each through its own non-return valve) or series; default parallel"},
	{name: "pumps running", typ: numCol, what: "number of pumps", lo: 1, hi: maxPumps,
		help: "how many of the pump sheet's pumps run, the first ones listed (the rest stand by); default all"},
	{name: "sensor", typ: textCol, help: "where the differential sensor sits: pump or a branch id; default pump"},
	{name: "hours", typ: numCol, what: "number of hours", lo: 0, hi: 8784, help: "running hours per year; default 8760"},
	{name: "energy price", typ: numCol, what: "price", lo: 0, hi: 1e3, help: "price of one kWh of electricity; default none (no costs shown)"},
	{name: "currency", typ: textCol, help: "currency of the energy price, e.g. EUR"},
	{name: "pump efficiency", typ: numCol, kind: units.Dimensionless, unit: "%", what: "efficiency", lo: 0.01, hi: 1,
		help: "hydraulic efficiency of the pump; default 70 %"},
	{name: "motor efficiency", typ: numCol, kind: units.Dimensionless, unit: "%", what: "efficiency", lo: 0.01, hi: 1,
		help: "efficiency of motor and drive; default 90 %"},
	{name: "tolerance low", typ: numCol, kind: units.Dimensionless, unit: "%", what: "tolerance", lo: -1, hi: 0,
		want: "a value from -100 % to 0 %, e.g. -10", help: "lowest acceptable flow relative to design; default -10 %"},
	{name: "tolerance high", typ: numCol, kind: units.Dimensionless, unit: "%", what: "tolerance", lo: 0, hi: 10,
		want: "a value from 0 % to 1000 %, e.g. 10", help: "highest acceptable flow relative to design; default +10 %"},
	{name: "units", typ: wordCol, words: displayUnitWords,
		help: "units of the results: si (l/s, kPa, Kv, degC), si-m3h (m3/h, kPa, Kv, degC) or us (gpm, psi, Cv, degF); default si; --units overrides"},
}}

// positionWords are the positions of a three-port terminal's valve.
var positionWords = []string{"coil", "bypass"}

// pumpArrangementWords are the accepted values of the site's "pump
// arrangement" key.
var pumpArrangementWords = []string{"parallel", "series"}

// displayUnitWords are the accepted values of the site's "units" key.
var displayUnitWords = []string{"si", "si-m3h", "us"}

var branchColumns = schema{name: "branches", columns: []column{
	{name: "id", typ: textCol, required: true, help: "unique name of the branch, e.g. AHU-2 or R1.3"},
	{name: "parent", typ: textCol, help: "id of the riser this branch hangs from; blank on the main headers"},
	{name: "design flow", typ: numCol, kind: units.Flow, unit: "l/s", required: true, what: "flow", lo: minFlow, hi: maxFlow,
		help: "design flow of the branch"},
	{name: "pipe standard", typ: textCol, help: "pipe catalogue: en10255-m, en10255-h, sch40, sch80, en1057 (copper), pe100-sdr11; see flowset help pipes"},
	{name: "pipe size", typ: textCol, help: "nominal size in that catalogue, e.g. DN25 or 1"},
	{name: "pipe bore", typ: numCol, kind: units.Length, unit: "mm", what: "bore", lo: minBore, hi: maxBore,
		help: "inside diameter; blank = from the catalogue"},
	{name: "pipe length", typ: numCol, kind: units.Length, unit: "m", what: "length", lo: 0, hi: maxLength,
		help: "length of flow and return pipe together; default 0"},
	{name: "roughness", typ: numCol, kind: units.Length, unit: "mm", what: "roughness", lo: 0, hi: maxRough,
		help: "absolute roughness; blank = by the material of the standard"},
	{name: "fittings k", typ: numCol, what: "loss coefficient", lo: 0, hi: maxK, help: "sum of the fittings' loss coefficients; default 0"},
	{name: "terminal drop", typ: numCol, kind: units.Pressure, unit: "kPa", what: "pressure difference", lo: 0, hi: maxPressure,
		help: "rated pressure drop of the terminal (coil, radiator, exchanger); default 0"},
	{name: "terminal flow", typ: numCol, kind: units.Flow, unit: "l/s", what: "flow", lo: minFlow, hi: maxFlow,
		help: "flow at which the terminal drop is rated; blank = design flow"},
	{name: "valve", typ: textCol, help: "regulating valve model from the valves sheet; blank for none"},
	{name: "setting", typ: numCol, what: "setting", lo: 0, hi: maxSetting, help: "as-found setting in the valve's own units"},
	{name: "control kvs", typ: numCol, what: "Kvs", lo: 0, hi: maxKv, cv: "control cvs",
		help: "Kvs (m3/h at 1 bar) of a control valve in series, fully open; a control cvs column takes US Cv"},
	{name: "supply length", typ: numCol, kind: units.Length, unit: "m", what: "length", lo: 0, hi: maxLength,
		help: "supply header from the previous take-off to this one; default 0"},
	{name: "return length", typ: numCol, kind: units.Length, unit: "m", what: "length", lo: 0, hi: maxLength,
		help: "return header from the previous take-off to this one; default 0"},
	{name: "header standard", typ: textCol, help: "pipe catalogue of that header segment"},
	{name: "header size", typ: textCol, help: "nominal size of that header segment"},
	{name: "header bore", typ: numCol, kind: units.Length, unit: "mm", what: "bore", lo: minBore, hi: maxBore,
		help: "inside diameter of that header segment; blank = from the catalogue"},
	{name: "header k", typ: numCol, what: "loss coefficient", lo: 0, hi: maxK,
		help: "loss coefficients of that header segment, shared evenly by its supply and return legs; default 0"},
	{name: "header roughness", typ: numCol, kind: units.Length, unit: "mm", what: "roughness", lo: 0, hi: maxRough,
		help: "absolute roughness of that header segment; blank or 0 = by the material of its standard"},
	{name: "supply k", typ: numCol, what: "loss coefficient", lo: 0, hi: maxK,
		help: "loss coefficients of the supply leg alone, added to its share of header k; default 0"},
	{name: "return k", typ: numCol, what: "loss coefficient", lo: 0, hi: maxK,
		help: "loss coefficients of the return leg alone, added to its share of header k; default 0"},
	{name: "return standard", typ: textCol, help: "pipe catalogue of the return leg; blank = the header standard"},
	{name: "return size", typ: textCol, help: "nominal size of the return leg; blank = as the header (supply leg)"},
	{name: "return bore", typ: numCol, kind: units.Length, unit: "mm", what: "bore", lo: minBore, hi: maxBore,
		help: "inside diameter of the return leg; blank = as the header, or from the return size"},
	{name: "return roughness", typ: numCol, kind: units.Length, unit: "mm", what: "roughness", lo: 0, hi: maxRough,
		help: "absolute roughness of the return leg; blank or 0 = as the header, or by the return standard"},
	{name: "controller set point", typ: numCol, kind: units.Pressure, unit: "kPa", what: "pressure difference", lo: 0, hi: maxPressure,
		help: "a riser's differential controller: the differential it holds as found, from the riser's supply take-off to the controller in its return (partner valve and every branch below); blank = none; see flowset help controllers"},
	{name: "controller kvs", typ: numCol, what: "Kvs", lo: 0, hi: maxKv, cv: "controller cvs",
		help: "Kvs (m3/h at 1 bar) of the controller's valve wide open; a controller cvs column takes US Cv"},
	{name: "controller min", typ: numCol, kind: units.Pressure, unit: "kPa", what: "pressure difference", lo: 0, hi: maxPressure,
		help: "lowest set point the controller can be given; blank = not known"},
	{name: "controller max", typ: numCol, kind: units.Pressure, unit: "kPa", what: "pressure difference", lo: 0, hi: maxPressure,
		help: "highest set point the controller can be given; blank = not known"},
	{name: "controller senses", typ: wordCol, words: senseWords,
		help: "riser (from the riser's supply take-off, its pipe and partner valve in the span; the default) or branches (across the branches below alone)"},
	{name: "bypass valve", typ: textCol,
		help: "a three-port terminal: the regulating valve model (valves sheet) in its bypass, which the three-port valve sends the flow through instead of the terminal; blank = none; see flowset help branches"},
	{name: "bypass setting", typ: numCol, what: "setting", lo: 0, hi: maxSetting, help: "as-found setting of the bypass valve in its own units; blank = fully open"},
	{name: "note", typ: textCol, help: "free text"},
}}

var valveColumns = schema{name: "valves", columns: []column{
	{name: "model", typ: textCol, required: true, help: "valve model name as used in the branches sheet"},
	{name: "setting unit", typ: wordCol, words: settingUnits, help: "turns, % or steps; default turns for a table, % for a characteristic"},
	{name: "step", typ: numCol, what: "step", lo: 1e-6, hi: maxSetting, help: "smallest setting change; default 0.1 turns, 1 % or 1 step"},
	{name: "min diff", typ: numCol, kind: units.Pressure, unit: "kPa", what: "pressure difference", lo: 1, hi: maxPressure,
		help: "smallest differential that reads reliably; default 3 kPa"},
	{name: "setting", typ: numCol, what: "setting", lo: 0, hi: maxSetting, help: "one setting of the Kv table"},
	{name: "kv", typ: numCol, what: "Kv", lo: 0, hi: maxKv, cv: "cv", help: "Kv (m3/h at 1 bar) at that setting; a cv column takes US Cv"},
	{name: "max flow", typ: numCol, kind: units.Flow, unit: "l/s", what: "flow", lo: minFlow, hi: maxFlow,
		help: "pressure-independent valve: the flow it holds at that setting (kv then optional: its Kv below the hold diff)"},
	{name: "hold diff", typ: numCol, kind: units.Pressure, unit: "kPa", what: "pressure difference", lo: 100, hi: maxPressure,
		help: "pressure-independent valve: least differential across it at which it holds its flow"},
	{name: "characteristic", typ: wordCol, words: characteristics, help: "for a valve without a table: linear, equal-percentage or quick-opening"},
	{name: "kvs", typ: numCol, what: "Kvs", lo: 1e-6, hi: maxKv, cv: "cvs", help: "Kv fully open, for a characteristic; a cvs column takes US Cv"},
	{name: "rangeability", typ: numCol, what: "rangeability", lo: 1.0001, hi: 1e4, help: "Kvs over the smallest controllable Kv; default 50"},
	{name: "note", typ: textCol, help: "free text"},
}}

var pumpColumns = schema{name: "pump", columns: []column{
	{name: "pump", typ: textCol,
		help: "pump id where there are several: one curve per id, the pumps in the order they start (duty first); blank = the site's one pump"},
	{name: "flow", typ: numCol, kind: units.Flow, unit: "l/s", required: true, what: "flow", lo: 0, hi: maxFlow, help: "flow of one curve point"},
	{name: "head", typ: numCol, kind: units.Head, unit: "m", required: true, what: "head", lo: 0, hi: maxHead,
		want: "a head of pumped fluid from 0 to 1000 m", help: "head at that flow at nominal speed, in height of the pumped fluid"},
	{name: "speed", typ: numCol, kind: units.Dimensionless, unit: "", what: "speed ratio", lo: 1e-3, hi: 2,
		want: `a ratio to nominal speed from 0.001 to 2; write "speed [%]" for a percentage`,
		help: "this pump's own fixed speed as a ratio to nominal, on any of its rows (a pump on its own drive or none); blank = the set's speed"},
	{name: "efficiency", typ: numCol, kind: units.Dimensionless, unit: "%", what: "efficiency", lo: 0.01, hi: 1,
		help: "pump efficiency at that flow at nominal speed, from the pump's data sheet; blank = the site's pump efficiency"},
	{name: "note", typ: textCol, help: "free text"},
}}

var readingColumns = schema{name: "readings", columns: []column{
	{name: "state", typ: textCol, help: "survey state, e.g. as-found or after-change; default as-found"},
	{name: "where", typ: textCol, required: true, help: "branch id, pump or header"},
	{name: "quantity", typ: wordCol, required: true, words: quantityWords[1:],
		help: "flow, valve diff, branch diff, header diff, pump diff, total flow or speed"},
	{name: "value", typ: numCol, required: true, what: "reading", help: "the reading, in the row's unit"},
	{name: "unit", typ: textCol, help: "unit of value and uncertainty; default l/s for flows, kPa for differentials, a ratio for speed"},
	{name: "setting", typ: numCol, what: "setting", lo: 0, hi: maxSetting, help: "valve setting when read; blank = the moves sheet's for the state, else the as-found setting"},
	{name: "instrument", typ: wordCol, words: instrumentNames(), help: "instrument kind, see flowset help instruments"},
	{name: "uncertainty", typ: textCol, help: "expanded uncertainty, e.g. 5 % or 0.2 in the row's unit; default by instrument"},
	{name: "k", aliases: []string{"coverage", "coverage factor"}, typ: numCol, what: "coverage factor", lo: 0.5, hi: 10,
		help: "coverage factor of the uncertainty; default 2 (about 95 %)"},
	{name: "position", typ: wordCol, words: positionWords,
		help: "a three-port terminal's valve when read: coil (through the terminal) or bypass; blank = coil"},
	{name: "time", typ: textCol, help: "when it was read, free text"},
	{name: "note", typ: textCol, help: "free text"},
}}

var stateColumns = schema{name: "states", columns: []column{
	{name: "state", typ: textCol, required: true, help: "survey state label as used in the readings sheet, e.g. as-found"},
	{name: "speed", typ: numCol, kind: units.Dimensionless, unit: "", what: "speed ratio", lo: 1e-3, hi: 2,
		want: `a ratio to nominal speed from 0.001 to 2; write "speed [%]" for a percentage`,
		help: "pump speed in that state as a ratio to nominal, for a pump boundary; blank = the site's speed"},
	{name: "set point", aliases: []string{"setpoint"}, typ: numCol, kind: units.Pressure, unit: "kPa", what: "pressure difference", lo: 1, hi: maxPressure,
		help: "differential the controller held in that state, for a constant-differential boundary; blank = the site's set point"},
	{name: "pumps running", typ: numCol, what: "number of pumps", lo: 1, hi: maxPumps,
		help: "how many of the pump sheet's pumps ran in that state, the first ones listed; blank = the site's pumps running"},
	{name: "note", typ: textCol, help: "free text"},
}}

var moveColumns = schema{name: "moves", columns: []column{
	{name: "state", typ: textCol, required: true, help: "survey state label as used in the readings sheet, e.g. after-change"},
	{name: "branch", typ: textCol, required: true, help: "branch id"},
	{name: "setting", typ: numCol, required: true, what: "setting", lo: 0, hi: maxSetting, help: "the valve's setting in that state"},
	{name: "note", typ: textCol, help: "free text"},
}}

var targetColumns = schema{name: "targets", columns: []column{
	{name: "branch", typ: textCol, required: true, help: "branch id"},
	{name: "target flow", typ: numCol, kind: units.Flow, unit: "l/s", required: true, what: "flow", lo: minFlow, hi: maxFlow,
		help: "flow to balance to instead of the design flow"},
	{name: "note", typ: textCol, help: "free text"},
}}

// sheets lists every sheet in reading order.
var sheets = []*schema{&siteKeys, &branchColumns, &valveColumns, &pumpColumns, &readingColumns, &stateColumns, &moveColumns, &targetColumns}

// Defaults stated in the help and applied by the reader.
const (
	defaultTemperature     = 293.15 // K, 20 degC
	defaultHours           = 8760   // continuous running, the upper bound
	defaultPumpEfficiency  = 0.70   // common practice, no source
	defaultMotorEfficiency = 0.90   // common practice, no source
	// ±10 % of design: "typical ±10 %" (shared/references.md §6).
	defaultToleranceLow  = -0.10
	defaultToleranceHigh = 0.10
	defaultRangeability  = 50  // shared/references.md §3.4, "50 commonly quoted"
	defaultMinDiff       = 3e3 // Pa; shared/references.md §6, ≥ 3 kPa across a variable-orifice valve, common practice
	defaultCoverage      = 2.0 // k = 2, about 95 % for a normal distribution (JCGM 100:2008 (GUM) §6.3, from memory)
	defaultState         = "as-found"
	defaultSensor        = AtPump
	defaultFluid         = "water"
)

func defaultStep(unit string) float64 {
	if unit == "turns" {
		return 0.1 // common practice, no source
	}
	return 1
}
