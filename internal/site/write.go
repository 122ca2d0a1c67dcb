package site

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
	"strconv"
	"strings"

	"flowset/internal/units"
)

// outSheet is one sheet ready to write: cells are strings, float64 (NaN
// for blank) or nil.
type outSheet struct {
	name   string
	header []string
	help   []string
	rows   [][]any
}

// headerName is a column's name as written, with its default unit.
func headerName(c *column) string { return siSheets.header(c) }

// inUnit converts an SI value to the column's default unit.
func inUnit(c *column, si float64) any { return siSheets.value(c, si) }

// SheetUnits chooses the units WriteDirIn writes a site's sheets in.
type SheetUnits int

// The unit sets of the sheets.
const (
	// SheetsSI writes each column in its default unit (l/s, kPa, m, mm,
	// degC, Kv), as WriteDir does.
	SheetsSI SheetUnits = iota
	// SheetsUS writes US customary units: gpm, psi, ft (lengths and pump
	// heads), in (bores and roughness), degF, and Cv in the cv columns.
	SheetsUS
)

// usUnit is the US customary unit written in place of a default unit; a
// default unit not listed (%, kg/m3, mm2/s, a ratio) is written as it is.
var usUnit = map[units.Kind]map[string]string{
	units.Flow:        {"l/s": "gpm"},
	units.Pressure:    {"kPa": "psi"},
	units.Length:      {"m": "ft", "mm": "in"},
	units.Head:        {"m": "ft"},
	units.Temperature: {"degC": "degF"},
}

// sheetUnits writes cells and headers in one set of units.
type sheetUnits struct{ us bool }

var siSheets = sheetUnits{}

// unit is the unit symbol column c is written in.
func (w sheetUnits) unit(c *column) string {
	if w.us {
		if u, ok := usUnit[c.kind][c.unit]; ok {
			return u
		}
	}
	return c.unit
}

// cv reports whether column c is written as a US Cv.
func (w sheetUnits) cv(c *column) bool { return w.us && c.cv != "" }

func (w sheetUnits) header(c *column) string {
	if w.cv(c) {
		return c.cv
	}
	if u := w.unit(c); c.typ == numCol && c.kind != 0 && u != "" {
		return c.name + " [" + u + "]"
	}
	return c.name
}

// value converts an SI value (a Kv as m3/h at 1 bar) to the unit column c
// is written in.
func (w sheetUnits) value(c *column, si float64) any {
	if math.IsNaN(si) {
		return nil
	}
	if w.cv(c) {
		return w.num(si / KvPerCv)
	}
	if c.kind == 0 {
		return si
	}
	u, err := units.Lookup(c.kind, w.unit(c))
	if err != nil {
		return si // unreachable: the schema's units are in the table
	}
	return w.num(u.FromSI(si))
}

// num is a converted value as written. In US sheets it is rounded to 14
// significant figures: a conversion factor that is not a power of ten
// leaves some decimals no SI double maps back to exactly (15 psi came out
// as 14.999999999999998, 44 degF as 43.9999999999999), and a 14-digit decimal reads back
// within the round trip's 1e-12.
func (w sheetUnits) num(x float64) float64 {
	if !w.us || math.IsNaN(x) || math.IsInf(x, 0) {
		return x
	}
	r, err := strconv.ParseFloat(strconv.FormatFloat(x, 'g', 14, 64), 64)
	if err != nil {
		return x // not reached: FormatFloat's output parses
	}
	return r
}

// reading is the unit a reading of q is written in.
func (w sheetUnits) reading(q Quantity) units.Unit {
	u := displayUnit(q)
	if w.us && q != Speed {
		sym := "psi"
		if q.IsFlow() {
			sym = "gpm"
		}
		if uu, err := units.Lookup(u.Kind, sym); err == nil {
			return uu
		}
	}
	return u
}

func columnSheet(sc *schema) outSheet { return siSheets.columnSheet(sc) }

func (w sheetUnits) columnSheet(sc *schema) outSheet {
	o := outSheet{name: sc.name}
	for i := range sc.columns {
		c := &sc.columns[i]
		o.header = append(o.header, w.header(c))
		o.help = append(o.help, c.help)
	}
	if len(o.help) > 0 {
		o.help[0] = "# " + o.help[0]
	}
	return o
}

// template returns the blank sheets: headers and a help row.
func template() []outSheet {
	var out []outSheet
	for _, sc := range sheets {
		if sc == &siteKeys {
			o := outSheet{name: sc.name, header: []string{"key", "value", "note"},
				help: []string{"# a blank value takes the default named in the note"}}
			for i := range sc.columns {
				o.rows = append(o.rows, []any{headerName(&sc.columns[i]), nil, sc.columns[i].help})
			}
			out = append(out, o)
			continue
		}
		out = append(out, columnSheet(sc))
	}
	return out
}

// render returns the sheets that describe s, in the units of w.
func (w sheetUnits) render(s *Site) []outSheet {
	site := outSheet{name: siteKeys.name, header: []string{"key", "value"}}
	key := func(name string, v any) {
		c := siteKeys.column(name)
		if f, ok := v.(float64); ok {
			v = w.value(c, f)
		}
		site.rows = append(site.rows, []any{w.header(c), v})
	}
	key("name", s.Name)
	key("fluid", s.Fluid)
	key("glycol", s.GlycolPercent/100)
	key("temperature", s.Temperature)
	// The measured properties only when given, so older sheets read back
	// unchanged.
	if s.Density > 0 {
		key("density", s.Density)
	}
	if s.Viscosity > 0 {
		key("viscosity", s.Viscosity)
	}
	if s.KinematicViscosity > 0 {
		key("kinematic viscosity", s.KinematicViscosity)
	}
	key("header", s.Header.String())
	key("boundary", s.Boundary.Kind.String())
	key("speed", s.Boundary.Speed)
	key("max speed", s.Boundary.MaxSpeed)
	key("set point", s.Boundary.SetPoint)
	key("sensor", s.Boundary.Sensor)
	// An open circuit's lift only when it has one, so older sheets read
	// back unchanged.
	if s.StaticLift > 0 || s.OutletPressure > 0 {
		key("static lift", s.StaticLift)
		key("outlet pressure", s.OutletPressure)
	}
	key("hours", s.Hours)
	key("energy price", s.EnergyPrice)
	key("currency", s.Currency)
	key("pump efficiency", s.PumpEfficiency)
	key("motor efficiency", s.MotorEfficiency)
	key("tolerance low", s.ToleranceLow)
	key("tolerance high", s.ToleranceHigh)
	if s.Units != "" {
		key("units", s.Units) // only when given, so older sheets read back unchanged
	}
	if s.PumpSeries {
		key("pump arrangement", "series")
	}
	if s.PumpsRunning > 0 {
		key("pumps running", float64(s.PumpsRunning))
	}

	br := w.columnSheet(&branchColumns)
	br.help = nil
	for _, b := range s.Branches {
		br.rows = append(br.rows, w.cellsOf(&branchColumns, map[string]any{
			"id": b.ID, "parent": b.Parent, "design flow": b.DesignFlow,
			"pipe standard": b.PipeStandard, "pipe size": b.PipeSize, "pipe bore": b.PipeBore, "pipe length": b.PipeLength,
			"roughness": b.Roughness, "fittings k": b.FittingsK, "terminal drop": b.TerminalDrop, "terminal flow": b.TerminalFlow,
			"valve": b.Valve, "setting": b.Setting, "control kvs": b.ControlKvs,
			"controller set point": given(b.Controller.SetPoint), "controller kvs": given(b.Controller.Kvs),
			"controller min": given(b.Controller.Min), "controller max": given(b.Controller.Max), "controller senses": b.Controller.Senses,
			"supply length": b.SupplyLength, "return length": b.ReturnLength, "header standard": b.HeaderStandard,
			"header size": b.HeaderSize, "header bore": b.HeaderBore, "header k": b.HeaderK,
			"header roughness": given(b.HeaderRoughness), "supply k": b.SupplyK, "return k": b.ReturnK,
			"return standard": b.ReturnStandard, "return size": b.ReturnSize, "return bore": given(b.ReturnBore),
			"return roughness": given(b.ReturnRoughness), "bypass valve": b.BypassValve, "bypass setting": bypassSetting(b),
			"note": b.Note,
		}))
	}
	if !slices.ContainsFunc(s.Branches, func(b Branch) bool { return b.BypassValve != "" }) {
		// The three-port columns only where a branch has a bypass.
		br = dropColumns(br, []string{"bypass valve", "bypass setting"})
	}

	if !slices.ContainsFunc(s.Branches, ownLegs) {
		// The per-leg columns are written only where a branch uses them,
		// so a site with one pipe per header segment reads as before.
		br = dropColumns(br, legColumns)
	}
	if !slices.ContainsFunc(s.Branches, func(b Branch) bool { return b.Controller.Has() }) {
		// Likewise the controller columns.
		br = dropColumns(br, controllerColumns)
	}

	va := w.columnSheet(&valveColumns)
	va.help = nil
	for _, v := range s.Valves {
		common := map[string]any{"model": v.Name, "setting unit": v.Unit, "step": v.Step, "min diff": v.MinDiff,
			"characteristic": v.Characteristic, "kvs": v.Kvs, "rangeability": v.Rangeability}
		if v.PressureIndependent() {
			common["hold diff"] = v.HoldDiff
			for i := range v.Settings {
				m := map[string]any{"setting": v.Settings[i], "kv": v.Kv[i], "max flow": v.MaxFlow[i]}
				for k, x := range common {
					m[k] = x
				}
				va.rows = append(va.rows, w.cellsOf(&valveColumns, m))
			}
			continue
		}
		if !v.Table() {
			va.rows = append(va.rows, w.cellsOf(&valveColumns, common))
			continue
		}
		for i := range v.Settings {
			m := map[string]any{"setting": v.Settings[i], "kv": v.Kv[i]}
			for k, x := range common {
				m[k] = x
			}
			va.rows = append(va.rows, w.cellsOf(&valveColumns, m))
		}
	}

	if !slices.ContainsFunc(s.Valves, func(v ValveModel) bool { return v.PressureIndependent() }) {
		// As for the legs: a site without pressure-independent valves
		// reads and writes as before.
		va = dropColumns(va, []string{"max flow", "hold diff"})
	}

	pu := w.columnSheet(&pumpColumns)
	pu.help = nil
	for _, pt := range s.Pump {
		pu.rows = append(pu.rows, w.cellsOf(&pumpColumns, map[string]any{"pump": pt.Pump, "flow": pt.Flow, "head": pt.Head, "speed": given(pt.Speed), "efficiency": given(pt.Efficiency)}))
	}
	// The columns of several pumps only where they are used, so a site of
	// one pump reads as before.
	if !slices.ContainsFunc(s.Pump, func(pt PumpPoint) bool { return pt.Pump != "" }) {
		pu = dropColumns(pu, []string{"pump"})
	}
	if !slices.ContainsFunc(s.Pump, func(pt PumpPoint) bool { return pt.Speed > 0 }) {
		pu = dropColumns(pu, []string{"speed"})
	}
	if !slices.ContainsFunc(s.Pump, func(pt PumpPoint) bool { return pt.Efficiency > 0 }) {
		pu = dropColumns(pu, []string{"efficiency"})
	}

	rd := w.columnSheet(&readingColumns)
	rd.help = nil
	for _, r := range s.Readings {
		u := w.reading(r.What)
		rd.rows = append(rd.rows, w.cellsOf(&readingColumns, map[string]any{
			"state": r.State, "where": r.Where, "quantity": r.What.String(), "value": w.num(u.FromSI(r.Value)), "unit": u.Symbol,
			"setting": r.Setting, "instrument": r.Instrument, "uncertainty": fmtFloat(w.num(u.FromSI(r.Sigma * defaultCoverage))),
			"k": defaultCoverage, "time": r.Time, "note": r.Note, "position": positionWord(r.Bypass),
		}))
	}
	if !slices.ContainsFunc(s.Readings, func(r Reading) bool { return r.Bypass }) {
		rd = dropColumns(rd, []string{"position"})
	}
	out := []outSheet{site, br, va, pu, rd}
	if s.States != nil {
		st := w.columnSheet(&stateColumns)
		st.help = nil
		for _, x := range s.States {
			st.rows = append(st.rows, w.cellsOf(&stateColumns, map[string]any{"state": x.Label, "speed": x.Speed,
				"set point": x.SetPoint, "pumps running": count(x.Running), "note": x.Note}))
		}
		if !slices.ContainsFunc(s.States, func(x StateSetting) bool { return x.Running > 0 }) {
			st = dropColumns(st, []string{"pumps running"})
		}
		out = append(out, st)
	}
	if s.Moves != nil {
		mv := w.columnSheet(&moveColumns)
		mv.help = nil
		for _, x := range s.Moves {
			mv.rows = append(mv.rows, w.cellsOf(&moveColumns, map[string]any{"state": x.State, "branch": x.Branch, "setting": x.Setting, "note": x.Note}))
		}
		out = append(out, mv)
	}
	if s.Targets != nil {
		tg := w.columnSheet(&targetColumns)
		tg.help = nil
		ids := sortedKeys(s.Targets)
		row := make(map[string]int, len(s.Branches))
		for i := range s.Branches {
			row[s.Branches[i].ID] = i
		}
		at := func(id string) int {
			if i, ok := row[id]; ok {
				return i
			}
			return len(s.Branches)
		}
		slices.SortStableFunc(ids, func(a, b string) int { return at(a) - at(b) })
		for _, id := range ids {
			tg.rows = append(tg.rows, w.cellsOf(&targetColumns, map[string]any{"branch": id, "target flow": s.Targets[id]}))
		}
		out = append(out, tg)
	}
	if len(s.Valves) == 0 {
		out = slices.DeleteFunc(out, func(o outSheet) bool { return o.name == valveColumns.name })
	}
	if len(s.Pump) == 0 {
		out = slices.DeleteFunc(out, func(o outSheet) bool { return o.name == pumpColumns.name })
	}
	return out
}

// bypassSetting is b's bypass setting as a cell: blank without a bypass.
func bypassSetting(b Branch) float64 {
	if b.BypassValve == "" {
		return nan
	}
	return b.BypassSetting
}

// positionWord is a reading's position cell: bypass, or blank for coil.
func positionWord(bypass bool) string {
	if bypass {
		return "bypass"
	}
	return ""
}

// count is a count of pumps as a cell: blank for 0 (not given).
func count(n int) float64 {
	if n > 0 {
		return float64(n)
	}
	return nan
}

// legColumns are the branches sheet's columns for header legs that differ.
var legColumns = []string{"header roughness", "supply k", "return k", "return standard", "return size", "return bore", "return roughness"}

// controllerColumns are the branches sheet's columns of a riser's
// differential controller.
// (controller cvs: its name in US sheets).
var controllerColumns = []string{"controller set point", "controller kvs", "controller cvs", "controller min", "controller max", "controller senses"}

// ownLegs reports whether b's header legs need the per-leg columns.
func ownLegs(b Branch) bool {
	return b.HeaderRoughness > 0 || b.SupplyK > 0 || b.ReturnK > 0 || b.ReturnStandard != "" || b.ReturnSize != "" ||
		b.ReturnBore > 0 || b.ReturnRoughness > 0
}

// dropColumns removes the named columns of a sheet without help rows.
func dropColumns(o outSheet, names []string) outSheet {
	var keep []int
	for i, h := range o.header {
		name, _, _ := splitUnit(h)
		if !slices.Contains(names, name) {
			keep = append(keep, i)
		}
	}
	out := outSheet{name: o.name}
	for _, i := range keep {
		out.header = append(out.header, o.header[i])
	}
	for _, r := range o.rows {
		row := make([]any, 0, len(keep))
		for _, i := range keep {
			row = append(row, r[i])
		}
		out.rows = append(out.rows, row)
	}
	return out
}

// given writes a value whose zero means "not given" (a Branch built in code
// leaves the header leg fields zero) as a blank cell.
func given(x float64) float64 {
	if x > 0 {
		return x
	}
	return nan
}

// cellsOf lays values out in the schema's column order, converting SI
// numbers to each column's unit.
func (w sheetUnits) cellsOf(sc *schema, vals map[string]any) []any {
	row := make([]any, len(sc.columns))
	for i := range sc.columns {
		c := &sc.columns[i]
		v, ok := vals[c.name]
		if !ok {
			continue
		}
		if f, isNum := v.(float64); isNum && c.typ == numCol && !(sc == &readingColumns && c.name == "value") {
			v = w.value(c, f)
		}
		row[i] = v
	}
	return row
}

func fmtFloat(x float64) string { return strconv.FormatFloat(x, 'g', -1, 64) }

// cellText is the CSV text of one cell.
func cellText(v any) string {
	switch x := v.(type) {
	case nil:
		return ""
	case string:
		return x
	case float64:
		if math.IsNaN(x) {
			return ""
		}
		return fmtFloat(x)
	default:
		return fmt.Sprint(x)
	}
}

// quote returns a CSV cell, quoted where needed so the reader gets the
// same text back: separators, quotes, line breaks, a leading # or
// surrounding spaces.
func quote(s string) string {
	if s == "" || !strings.ContainsAny(s, ",;\t\"\r\n") && !strings.HasPrefix(s, "#") && strings.TrimSpace(s) == s {
		return s
	}
	return `"` + strings.ReplaceAll(s, `"`, `""`) + `"`
}

func writeCSV(w io.Writer, o outSheet) error {
	bw := bufio.NewWriter(w)
	line := func(cells []string) {
		for i, c := range cells {
			if i > 0 {
				bw.WriteByte(',')
			}
			bw.WriteString(c)
		}
		bw.WriteByte('\n')
	}
	q := make([]string, len(o.header))
	for i, h := range o.header {
		q[i] = quote(h)
	}
	line(q)
	if o.help != nil {
		// A comment line: the reader skips every line whose first
		// character is #, so only the text after it needs no quoting.
		h := make([]string, len(o.help))
		for i, x := range o.help {
			h[i] = quote(x)
			if i == 0 {
				h[i] = x
			}
		}
		line(h)
	}
	for _, r := range o.rows {
		cells := make([]string, len(r))
		for i, v := range r {
			cells[i] = quote(cellText(v))
		}
		line(cells)
	}
	return bw.Flush()
}

// WriteDir writes s as CSV sheets, one file per sheet, each opened with
// create(name), for example "branches.csv". Values are written in each
// column's default unit, named in the header.
func WriteDir(s *Site, create func(name string) (io.WriteCloser, error)) error {
	if s == nil {
		return errNoSite
	}
	return writeSheets(siSheets.render(s), create)
}

// WriteDirIn is WriteDir with the sheets in the units of u: with SheetsUS
// every header names its US customary unit (or is the Cv column), and
// readings are in gpm and psi.
func WriteDirIn(s *Site, u SheetUnits, create func(name string) (io.WriteCloser, error)) error {
	if s == nil {
		return errNoSite
	}
	return writeSheets(sheetUnits{us: u == SheetsUS}.render(s), create)
}

// WriteTemplateCSV writes a blank site: every sheet with its header line
// and a comment line explaining each column.
func WriteTemplateCSV(create func(name string) (io.WriteCloser, error)) error {
	return writeSheets(template(), create)
}

func writeSheets(sheets []outSheet, create func(name string) (io.WriteCloser, error)) error {
	for _, o := range sheets {
		w, err := create(o.name + ".csv")
		if err != nil {
			return fmt.Errorf("write %s.csv: %w", o.name, err)
		}
		err = writeCSV(w, o)
		if cerr := w.Close(); err == nil {
			err = cerr
		}
		if err != nil {
			return fmt.Errorf("write %s.csv: %w", o.name, err)
		}
	}
	return nil
}

var errNoSite = errors.New("no site to write")
