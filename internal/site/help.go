package site

import (
	"fmt"
	"strings"

	"flowset/internal/units"
)

// Topic is one help text about the site sheets.
type Topic struct {
	Name  string // the word after `flowset help`
	Title string
	Body  string
}

// examples holds one small valid sheet per sheet name; together they make
// a complete site, which the tests read.
var examples = map[string]string{
	"site": `key,value
name,Block C heating
fluid,water
temperature [degC],70
header,direct-return
boundary,pump
speed [%],85
hours,5000
energy price,0.25
currency,EUR
`,
	"branches": `id,parent,design flow [l/s],pipe standard,pipe size,pipe length [m],terminal drop [kPa],valve,setting,supply length [m],return length [m],header standard,header size,header k,return size,return k
R1,,1.20,en10255-m,DN40,12,0,V25,3.5,8,8,en10255-m,DN65,1.0,,
R1.1,R1,0.40,en10255-m,DN20,25,10,V15,2.0,0,0,,,,,
R1.2,R1,0.80,en10255-m,DN25,30,12,V15,4.0,3,3,en10255-m,DN40,,,
R2,,0.60,en10255-m,DN25,40,15,V15,3.0,15,17,en10255-m,DN50,,DN40,0.9
`,
	"valves": `model,setting unit,setting,kv,characteristic,kvs,rangeability,max flow [l/s],hold diff [kPa]
V15,turns,0.5,0.15,,,,,
V15,turns,1,0.35,,,,,
V15,turns,2,0.90,,,,,
V15,turns,3,1.60,,,,,
V15,turns,4,2.30,,,,,
V25,turns,0.5,0.60,,,,,
V25,turns,2,2.40,,,,,
V25,turns,4,5.80,,,,,
CV20,%,,,equal-percentage,4.0,50,,
PI15,steps,1,,,,,0.03,20
PI15,steps,3,,,,,0.08,20
PI15,steps,5,,,,,0.15,20
`,
	"pump": `flow [l/s],head [m]
0,8.0
1.5,7.5
3.0,6.0
4.0,4.5
`,
	"readings": `state,where,quantity,value,unit,setting,instrument,uncertainty,time
as-found,R1.1,flow,0.52,l/s,,clamp-on,,09:40
as-found,R1.1,valve diff,8.4,kPa,,manometer,,09:42
as-found,R2,branch diff,31,kPa,,manometer,,09:45
as-found,pump,pump diff,62,kPa,,gauge,,09:50
as-found,pump,speed,85,%,,pump-display,,09:50
as-found,header,total flow,2.6,l/s,,orifice,4 %,09:55
after-change,R1.1,flow,0.41,l/s,1.5,valve-meter,,10:30
`,
	"states": `state,speed [%],note
as-found,85,drive as found
after-change,80,drive turned down for the second round
`,
	"moves": `state,branch,setting,note
after-change,R2,3.5,turned down but not read in that round
`,
	"targets": `branch,target flow [l/s]
R2,0.55
`,
}

var sheetIntro = map[string]string{
	"site": `The site sheet holds one setting per line as key and value. A unit goes in
brackets after the key, e.g. "temperature [degF]". Every key is optional; a
missing key or a blank value takes the default below. The sheet itself is
optional. A first line "key,value" is allowed and skipped.

Fluid as measured: the density and viscosity come from the property tables
for water and the glycols at the temperature given. For a fluid not in the
tables (fluid other), or a lab sample of the circuit's own fluid, give them
instead: a density and either a (dynamic) viscosity or a kinematic viscosity,
each with its unit. What is given replaces the table's value; fluid other
needs a density and a viscosity. For example:
  fluid,other
  temperature [degC],30
  density [kg/m3],1052
  kinematic viscosity [cSt],2.9
or, for water whose sample read a little denser than the tables say:
  fluid,water
  temperature [degF],45
  density [lb/ft3],62.5

Open circuits: a condenser-water or process circuit that lifts water from a
free surface (a cooling-tower basin, an open tank) to an open outlet (a
spray header, nozzles, an open tank above) takes two keys: static lift, the
height from the free surface the pump draws from up to the outlet (m or ft),
and outlet pressure, what the outlet needs above the air (kPa or psi; 0 for
a free discharge). The pump gives both before any water moves: every pump
differential (read, predicted, planned) includes them, branch and header
differentials do not, the system curve starts at them at no flow, and the
plan's least differential is the lift plus the index path's friction. A
differential boundary's set point, or a measured pump differential, is the
pump's (lift included); a header differential read is the branches'. For
example, a condenser circuit with its tower's spray header 7.5 m above the
basin and nozzles wanting 20 kPa:
  static lift [m],7.5
  outlet pressure [kPa],20
or in US units:
  static lift [ft],24.6
  outlet pressure [psi],2.9`,
	"branches": `The branches sheet lists every parallel branch, one per row: its design
flow, its pipe, its terminal, its regulating valve and the header segment
between the previous take-off and its own. Rows go in order along the
headers from the pump. A branch with a parent hangs from that riser; its
header segment is then the riser pipe from the previous take-off on the same
riser. The header columns describe both legs of the segment (supply and
return) and header k is shared evenly between them; where the return leg
differs, as in a reverse-return header whose legs carry different flows, give
its own return size or bore, return standard and return roughness, and put
each leg's own loss coefficients in supply k and return k. Blank return
columns take the header's. In a reverse-return header the return leg runs
from the first take-off onwards, so the first row's return leg is the return
main from the last take-off back to the pump. A riser whose differential a
controller holds gives it in the controller columns (flowset help
controllers). Required.

A three-port terminal (a coil whose three-port valve sends the flow through
the coil or past it through a bypass) names the bypass's own regulating
valve in bypass valve, with its as-found bypass setting. The branch's pipe,
fittings, control kvs (the three-port valve, the same Kvs both ways) and
its regulating valve carry the flow in both positions; the terminal drop
only through the coil, the bypass valve only through the bypass. Readings
taken with the flow through the bypass say so in the readings sheet's
position column; the fit uses both positions. The plan sets the bypass valve
so that full bypass passes the same flow as full coil flow (common
practice): at the target flow it drops what the coil drops. For example:

  id,design flow [l/s],pipe standard,pipe size,pipe length [m],terminal drop [kPa],valve,setting,bypass valve,bypass setting
  AHU-3,1.2,en10255-m,DN40,18,25,V25,3.5,V25,4`,
	"valves": `The valves sheet defines the regulating valve models the branches name,
one row per point of each model's Kv table ("long" format): settings must
rise down the table and Kv must rise with them. A valve without a table is
one row with a characteristic (linear, equal-percentage, quick-opening), its
Kvs and rangeability; its setting is then % of travel. A cv column instead
of kv (cvs instead of kvs) takes US Cv, converted with Kv = 0.864978 Cv.
Model-wide values (setting unit, step, min diff, hold diff) may sit on any
row of the model, once or repeated the same. A pressure-independent control
valve (a flow limiter with a setting and a regulator in one body, PI15 below)
gives max flow instead of kv on its rows, the flow it holds at each setting,
and its hold diff, the least differential at which it holds it; a kv on such
a row is its Kv below that differential (blank: the Kv that passes the row's
flow at the hold diff). See flowset help pressure-independent. Optional when
no branch names a valve.`,
	"pump": `The pump sheet is the pump's head curve at nominal speed: flows rising down
the sheet, head in height of the pumped fluid (m or ft; not a pressure).
At least three points: the curve is fitted as a quadratic. Optional; when present
the boundary defaults to pump.

Several pumps on one circuit: a pump column names the pump of each row, and
each pump gives its own curve (three points or more; identical pumps repeat
theirs). List them in the order they start, duty first. The site sheet says
how they work together: pump arrangement parallel (the default: each through
its own non-return valve into common headers; the flows add at equal head,
and a pump whose shut-off head is below the common head gives nothing) or
series (one feeding the next; the heads add at equal flow), and pumps
running (how many of them run, the first ones listed; default all). A
standby pump is listed and not counted as running: duty/standby is two pumps
with pumps running 1, duty/assist is pumps running 1 in one survey state and
2 in another (the states sheet's pumps running column). All the pumps run at
the site's (or the state's) speed, on one drive or on drives set alike; a
speed column gives a pump its own fixed speed instead (on any of its rows);
where every pump running has its own, the site's speed, a state's and the
plan's are ratios to those speeds (100 % is each at its own).
The plan finds the speed or set point for the pumps running and says
whether one pump fewer would serve, with the power of each. For example:

  pump,flow [l/s],head [m],speed [%]
  P1,0,9.0,
  P1,1.5,8.4,
  P1,3.0,6.8,
  P2,0,9.0,
  P2,1.5,8.4,
  P2,3.0,6.8,
  STBY,0,7.0,100
  STBY,1.0,6.4,
  STBY,2.0,5.0,

with pump arrangement parallel and pumps running 2 in the site sheet: P1 and
P2 run on one drive, STBY (its own fixed speed) stands by.`,
	"readings": `The readings sheet holds every measurement of the visit, one per row. A
reading names its state (as-found, after-change, ...), where it was taken (a
branch id, pump or header) and what it measures:
  flow         flow through a branch                      at a branch
  valve diff   differential across the branch's valve     at a branch with a valve
  branch diff  differential across the whole branch       at a branch
  header diff  differential between the headers           at a branch take-off or header
  pump diff    differential across the pump               at pump, or one pump's id
  total flow   flow through the pump                      at pump or header, or one pump's id
  speed        the drive's displayed speed                at pump, or one pump's id
  controlled diff  differential a riser's controller holds    at a riser with a controller
Where the pump sheet names several pumps, a reading at pump is the set's
(the common differential, the total flow) and a reading at a pump's id is
that pump's: its own flow, its differential (in series, its own share) and
its speed. The fit uses both.
The unit column gives the unit of value and uncertainty for that row; a
speed is a ratio to rated speed, or a percentage with unit %. A
setting records a valve moved for that reading; blank means the as-found
setting. Give an instrument kind or an uncertainty (or both); see
"flowset help instruments". Readings of one quantity at one place in one
state that disagree by more than three combined standard uncertainties are
warned about.

Readings are taken as the instruments gave them. A differential a little
below zero (a gauge read at no flow) is kept as read, with a warning, down to
twice its expanded uncertainty below zero; further below it is an error. A
speed may pass the site's max speed by as much (display noise), not more. An
uncertainty of 0 is replaced by the instrument's default, with a warning.
Required; a sheet without readings is read with a warning, as there is
nothing to calibrate.`,
	"states": `The states sheet gives a survey state its own pump setting, one row per
state: the speed the pump ran at (pump boundary) or the differential its
controller held (constant-differential boundary). A state not listed runs at
the site sheet's speed or set point; a blank cell does too. A pumps running
column gives the number of the pump sheet's pumps that ran in the state (the
first ones listed), for a site of several pumps. Every state named must
appear in the readings sheet. Optional.`,
	"moves": `The moves sheet gives a valve's setting in a survey state where no reading
of that state records one: a valve moved for the state (or set to a plan)
but not read in it. Without it such a valve is taken at its as-found setting
in every state, and the readings the state does have are explained with the
valve where it was not. One row per valve and state; a setting that differs
from one a reading of the same state gives is an error. Every state named
must appear in the readings sheet. Optional.`,
	"targets": `The targets sheet overrides the design flow of some branches as the flow to
balance to, one row per branch. Optional.`,
}

var sheetTitles = map[string]string{
	"site":     "site.csv: fluid, boundary and running costs",
	"branches": "branches.csv: the parallel branches and their headers",
	"valves":   "valves.csv: regulating valve Kv tables and characteristics",
	"pump":     "pump.csv: the pump curve, or one curve per pump",
	"readings": "readings.csv: what was measured on the visit",
	"states":   "states.csv: the pump's speed or set point in each survey state",
	"moves":    "moves.csv: valve settings in a state where nothing records them",
	"targets":  "targets.csv: flows to balance to other than design",
}

// Topics returns the help topics: one per sheet with a small example, one
// on the file format, one on units and one on instruments and
// uncertainties.
func Topics() []Topic {
	out := []Topic{sheetsTopic()}
	for _, sc := range sheets {
		var b strings.Builder
		b.WriteString(sheetIntro[sc.name])
		b.WriteString("\n\n")
		if sc == &siteKeys {
			b.WriteString("Keys (default unit in brackets):\n")
		} else {
			b.WriteString("Columns (default unit in brackets; name another in the header):\n")
		}
		for i := range sc.columns {
			c := &sc.columns[i]
			req := ""
			if c.required {
				req = "required; "
			}
			fmt.Fprintf(&b, "  %-22s %s%s\n", headerName(c), req, c.help)
		}
		fmt.Fprintf(&b, "\nExample %s.csv:\n", sc.name)
		for _, line := range strings.Split(strings.TrimRight(examples[sc.name], "\n"), "\n") {
			b.WriteString("  " + line + "\n")
		}
		out = append(out, Topic{Name: sc.name, Title: sheetTitles[sc.name], Body: b.String()})
	}
	out = append(out, pressureIndependentTopic(), controllersTopic(), unitsTopic(), instrumentsTopic())
	return out
}

// controllerExample is the controllers topic's example: the help's example
// site with a differential controller on riser R1 and a reading across its
// span (TestTopics reads it).
var controllerExample = map[string]string{
	"branches": `id,parent,design flow [l/s],pipe standard,pipe size,pipe length [m],terminal drop [kPa],valve,setting,supply length [m],return length [m],header standard,header size,controller set point [kPa],controller kvs,controller min [kPa],controller max [kPa]
R1,,1.20,en10255-m,DN40,12,0,V25,4,8,8,en10255-m,DN65,25,16,5,50
R1.1,R1,0.40,en10255-m,DN20,25,10,V15,2.0,0,0,,,,,,
R1.2,R1,0.80,en10255-m,DN25,30,12,V15,4.0,3,3,en10255-m,DN40,,,,
R2,,0.60,en10255-m,DN25,40,15,V15,3.0,15,17,en10255-m,DN50,,,,
`,
	"readings": `state,where,quantity,value,unit,setting,instrument
as-found,R1.1,flow,0.52,l/s,,clamp-on
as-found,R1,controlled diff,24.6,kPa,,manometer
as-found,R2,branch diff,31,kPa,,manometer
as-found,pump,pump diff,62,kPa,,gauge
after-change,R1,controlled diff,25.1,kPa,,manometer
`,
}

func controllersTopic() Topic {
	var b strings.Builder
	b.WriteString(`A differential-pressure controller on a riser or a branch group holds the
differential across that sub-circuit whatever the rest of the plant does: a
self-acting valve in the riser's return, its sensing line taken to the
riser's supply, usually with a partner (measuring) valve on the supply.
flowset takes the controller's valve to sit in the riser's return and its
sensor to read from the riser's supply take-off to the controller, so the
span it holds is the riser's own pipe and valve (the partner valve: the
riser's valve column) and every branch that hangs from the riser; or, with
controller senses = branches, the branches below alone.

The controller throttles until the span reads its set point. When the riser
gets less than the set point plus the drop of the controller's valve wide
open, it cannot: it lies wide open (its Kvs), and the span reads less.

Give the controller on the riser's row of the branches sheet:
  controller set point [kPa]   the differential it holds as found (blank: none)
  controller kvs               its valve's Kvs wide open (controller cvs: US Cv)
  controller min [kPa]         lowest set point it can be given (optional)
  controller max [kPa]         highest set point it can be given (optional)
  controller senses            riser (the default: from the riser's supply
                               take-off, its pipe and partner valve in the
                               span) or branches (across the branches below
                               alone, the riser's own parts outside it)
Only a branch that other branches hang from can have one. Read the span with
the quantity "controlled diff" at the riser (readings sheet), across the
points the controller's sensor reads: its sensing line's connection on the
supply and the controller's inlet on the return.

What flowset does with it:
  check   lists each controller with its set point, Kvs and range.
  curves  says where each controller starts to hold (the riser differential
          and the flow it then holds) and whether it holds now.
  fit     holds each span at its set point where the plant gives enough,
          and flags a controller that lies wide open, or whose span reads
          off its set point beyond the reading's uncertainty (k = 2): a set
          point other than recorded, a blocked sensing line, a faulty
          controller.
  plan    sets each controller to the least set point that serves the
          index branch of its span with the partner valve fully open (within
          its range: a higher lowest set point leaves the rest to the partner
          valve), plans the settings inside the span for that set point
          alone, and sets the pump to give every controller on the index
          path its set point plus its valve's wide-open drop. The field
          sheet lists the new set point after the riser's valve, with the
          span differential to check.

Example branches.csv (riser R1 held at 25 kPa, its valve V25 the partner valve):
`)
	for _, sheet := range []string{"branches", "readings"} {
		if sheet == "readings" {
			b.WriteString("\nExample readings.csv (the span read at R1):\n")
		}
		for _, line := range strings.Split(strings.TrimRight(controllerExample[sheet], "\n"), "\n") {
			b.WriteString("  " + line + "\n")
		}
	}
	return Topic{Name: "controllers", Title: "differential-pressure controllers on risers and branch groups", Body: b.String()}
}

func sheetsTopic() Topic {
	return Topic{Name: "sheets", Title: "how a site is laid out and written", Body: `A site is a folder of CSV files or one .xlsx workbook:
  site.csv       fluid, boundary, running costs          optional
  branches.csv   the parallel branches                   required
  valves.csv     regulating valve models                 when branches name valves
  pump.csv       pump curve                              optional
  readings.csv   the measurements of the visit           required
  states.csv     pump speed or set point per state       optional
  targets.csv    flows to balance to other than design   optional
In a workbook each sheet is a tab of the same name without ".csv".
"flowset help <sheet>" describes each one; "flowset help controllers" how
a riser's differential controller is given.

CSV files:
  - UTF-8, with or without a byte order mark; save from a spreadsheet as
    "CSV UTF-8".
  - Cells separated by commas, or by semicolons (or tabs): the header line
    decides. With semicolons or tabs a decimal comma is accepted (1,5).
  - A line whose first cell starts with # is a comment; blank lines are
    skipped. So no id or name may start with #.
  - The first line that is not a comment names the columns. Column names
    ignore case; spaces, hyphens and underscores are alike. Columns may
    come in any order; unknown columns are reported and ignored.
  - A unit goes in brackets in the column name: "design flow [l/s]",
    "pipe length [ft]". Cells hold bare numbers. See "flowset help units".
Workbooks: numbers may be stored as numbers or as text; a number format
does not change the value read. A cell formatted as a percentage is read as
that percentage.

Every problem is reported at once, as file:line:column: field "name": value
"text": what is wrong (want what was expected). Warnings do not stop the
site from being used; errors do. "flowset template" writes a blank site.`}
}

func unitsTopic() Topic {
	var b strings.Builder
	b.WriteString(`Values are converted to SI as they are read. Each numeric column has a
default unit, shown in brackets in "flowset help <sheet>"; write another in
the column name, e.g. "design flow [m3/h]". A unit of the wrong kind, e.g.
kPa on a flow column, is an error. Unit names are case-sensitive (mbar is
not Mbar). Accepted units by kind:
`)
	for _, k := range []units.Kind{units.Flow, units.Pressure, units.Length, units.Temperature, units.Head, units.Dimensionless,
		units.Density, units.Viscosity, units.KinematicViscosity} {
		label := k.String()
		if k == units.Dimensionless {
			label = "fraction"
		}
		syms := units.Symbols(k)
		for i, s := range syms {
			if s == "" {
				syms[i] = `(none)`
			}
		}
		fmt.Fprintf(&b, "  %-13s %s\n", label+":", strings.Join(syms, ", "))
		if k == units.Dimensionless {
			b.WriteString("  fluid properties, for the site sheet's density and viscosities:\n")
		}
	}
	b.WriteString(`Pressure units ending in H2O or "wc" are conventional water columns
(1 mH2O = 9.80665 kPa). A pump head is a height of the pumped fluid and
takes m or ft only. Kv and Kvs are m3/h at 1 bar and take no unit; a cv, cvs
or control cvs column takes US Cv (Kv = 0.864978 Cv). A percentage column
also accepts "85 %" in the cell. In readings the unit column sets the unit
of each row.
`)
	return Topic{Name: "units", Title: "units of measure in the sheets", Body: b.String()}
}

func instrumentsTopic() Topic {
	var b strings.Builder
	b.WriteString(`Each reading names the kind of instrument it was taken with. When the
uncertainty cell is blank the reading gets the default of its instrument:
the larger of a fraction of the reading and a floor, as an expanded
uncertainty with coverage factor k = 2 (about 95 %). It is divided by k to
give the standard uncertainty the calibration weighs readings with.
`)
	for _, in := range instruments {
		var reads []string
		for _, q := range in.Reads {
			reads = append(reads, q.String())
		}
		def := fmt.Sprintf("±%g %%", in.Rel*100)
		var floors []string
		if in.FlowFloor > 0 {
			floors = append(floors, fmt.Sprintf("%g l/s", in.FlowFloor*1e3))
		}
		if in.DiffFloor > 0 {
			floors = append(floors, fmt.Sprintf("%g kPa", in.DiffFloor/1e3))
		}
		if len(floors) > 0 {
			def += ", at least " + strings.Join(floors, " or ")
		}
		if in.SpeedFloor > 0 {
			def += fmt.Sprintf("; a speed ±%g %% of rated", in.SpeedFloor*100)
		}
		fmt.Fprintf(&b, "\n  %s: %s\n", in.Name, in.Title)
		fmt.Fprintf(&b, "      reads %s\n", strings.Join(reads, ", "))
		fmt.Fprintf(&b, "      default %s (k = 2)\n", def)
		fmt.Fprintf(&b, "      basis: %s\n", in.Source)
	}
	b.WriteString(`
A stated uncertainty replaces the default: "5 %" is relative to the
reading, a bare number is in the row's unit ("uncertainty [%]" makes all
bare numbers percentages). It is taken as expanded with k = 2 unless the k
column says otherwise (k = 1 for a standard uncertainty). A reading with
neither instrument nor uncertainty is an error. An uncertainty of 0 (or 0 %,
or a percentage of a zero reading) says nothing about the instrument: the
instrument's default replaces it, with a warning; without an instrument it is
an error.

A valve-meter flow is computed from the valve's differential and its Kv
table; the calibration converts it back to that differential, so it is not
counted twice with a valve diff of the same moment. Differentials below the
valve's min diff (3 kPa by default) read poorly.
`)
	return Topic{Name: "instruments", Title: "instrument kinds and default uncertainties", Body: b.String()}
}

func pressureIndependentTopic() Topic {
	return Topic{Name: "pressure-independent", Title: "pressure-independent control valves at terminals", Body: `A pressure-independent control valve joins a flow limiter with a setting and
a differential regulator in one body: above its hold differential it passes
the flow its setting gives whatever the differential; below it the regulator
is wide open and the valve is a fixed restriction, so the flow falls as the
square root of the differential.

Entering one. In valves.csv give the model one row per setting with the flow
it holds there (max flow) and, on any row, its hold diff (the maker's least
differential for holding the flow). A kv on a row is the valve's Kv at that
setting below the hold diff; blank, it is the Kv that passes the row's flow
at the hold diff (so the valve holds from exactly there). Between rows the
flow is interpolated as a monotone cubic in ln flow. A branch names the
model in its valve column and its as-found setting in its setting column,
as for any valve; readings may give a setting per state.
  model,setting unit,setting,max flow [l/s],hold diff [kPa]
  PI15,steps,1,0.03,20
  PI15,steps,3,0.08,20
  PI15,steps,5,0.15,20

What flowset does with it:
  model     the valve holds its set flow within 0.5 % per 100 kPa above its
            hold point (a stiff regulator; real valves hold within a few %)
  plan      each valve is set to the setting whose flow is the branch's
            target, and the pump to give the worst-placed valve its hold
            diff plus 10 % of it (a margin of common practice, no source)
  fit       while a valve regulates, its branch's flow does not depend on
            the branch's resistance: that resistance is kept at its design
            value and reported as not determined; the valve's own flow scale
            (does its setting give its flow?) is fitted where flows are read
  findings  a valve below its hold diff (starved: its flow falls short), a
            setting that does not give its table's flow (fitted more than
            5 % off it; the fit allows 10 % as one sd before the readings)
  check     warns where a valve cannot be set to hold its branch's target,
            and where a flow read through one is over 15 % above what it
            holds at its setting
  curves    flows a valve cannot pass at its setting are marked "held"
Readings: flow, branch diff and valve diff (across the whole valve body) as
for any branch; a valve meter cannot read one (it has no Kv table).`}
}
