package site

import (
	"bytes"
	"context"
	"encoding/csv"
	"errors"
	"flag"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"testing/fstest"

	"github.com/google/go-cmp/cmp"
	"github.com/google/go-cmp/cmp/cmpopts"
	"github.com/xuri/excelize/v2"

	"flowset/internal/units"
)

var update = flag.Bool("update", false, "rewrite testdata/small.xlsx from testdata/small/*.csv")

// sameSite compares sites read from different files: positions name
// different files, and numbers may differ in the last bit after a unit
// conversion there and back.
var sameSite = cmp.Options{
	cmpopts.EquateNaNs(),
	cmpopts.EquateApprox(1e-12, 0),
	cmpopts.IgnoreFields(Pos{}, "File"),
	cmpopts.IgnoreFields(Site{}, "Source"),
}

// ignoreLines also ignores line numbers, for sites written back by this
// package, which drops comments and blank lines.
var ignoreLines = cmp.Options{sameSite, cmpopts.IgnoreTypes(Pos{})}

func readSmall(t *testing.T) *Site {
	t.Helper()
	s, p, err := ReadDir(os.DirFS("testdata/small"), ".")
	if err != nil {
		t.Fatalf("ReadDir(testdata/small): %v", err)
	}
	if len(p) > 0 {
		t.Fatalf("ReadDir(testdata/small): unexpected problems:\n%v", p)
	}
	return s
}

func near(got, want, rel float64) bool {
	return math.Abs(got-want) <= rel*math.Abs(want)
}

// TestReadDirValues spot-checks values of the fixture after conversion to
// SI. Conversion factors are exact by definition: 1 m3/h = 1/3600 m3/s,
// 0 degC = 273.15 K (NIST SP 811, B.9), 1 kPa = 1000 Pa.
func TestReadDirValues(t *testing.T) {
	s := readSmall(t)
	const tol = 1e-12
	checks := []struct {
		name      string
		got, want float64
	}{
		{"temperature", s.Temperature, 282.15},
		{"glycol percent", s.GlycolPercent, 30},
		{"set point", s.Boundary.SetPoint, 60e3},
		{"speed", s.Boundary.Speed, 0.92},
		{"max speed", s.Boundary.MaxSpeed, 1},
		{"hours", s.Hours, 4200},
		{"energy price", s.EnergyPrice, 0.21},
		{"pump efficiency", s.PumpEfficiency, 0.62},
		{"motor efficiency", s.MotorEfficiency, 0.88},
		{"tolerance low", s.ToleranceLow, -0.05},
		{"tolerance high", s.ToleranceHigh, 0.10},
		{"AHU-1 design flow", s.Branches[0].DesignFlow, 6.0 / 3600},
		{"AHU-1 terminal drop", s.Branches[0].TerminalDrop, 22e3},
		{"AHU-1 control kvs", s.Branches[0].ControlKvs, 16},
		{"R2.1 bore", s.Branches[2].PipeBore, 0.0217},
		{"R2.1 roughness", s.Branches[2].Roughness, 45e-6},
		{"R2.2 header bore", s.Branches[3].HeaderBore, 0.036},
		{"AHU-1 header roughness", s.Branches[0].HeaderRoughness, 50e-6},
		{"AHU-1 return k", s.Branches[0].ReturnK, 0.3},
		// The supply leg takes half the header k; the return leg half plus its own.
		{"AHU-1 supply leg k", s.Branches[0].SupplyLeg().K, 0.4},
		{"AHU-1 return leg k", s.Branches[0].ReturnLeg().K, 0.7},
		{"AHU-1 return leg roughness", s.Branches[0].ReturnLeg().Roughness, 50e-6},
		{"after-change set point", s.States[0].SetPoint, 55e3},
		{"BV32 min diff", s.Valves[1].MinDiff, 2e3},
		{"BV40 min diff (default 3 kPa)", s.Valves[2].MinDiff, 3e3},
		{"BV40 step", s.Valves[2].Step, 0.2},
		{"CV25 kvs", s.Valves[3].Kvs, 6.3},
		{"CV25 rangeability", s.Valves[3].Rangeability, 30},
		{"pump point 3 flow", s.Pump[2].Flow, 12.0 / 3600},
		{"pump point 3 head", s.Pump[2].Head, 11.6},
		{"reading 1 value", s.Readings[0].Value, 6.9 / 3600},
		// clamp-on default ±5 % at k = 2 (shared/references.md §6).
		{"reading 1 sigma", s.Readings[0].Sigma, 0.05 * 6.9 / 3600 / 2},
		// Stated 0.4 kPa with k = 1 is a standard uncertainty already.
		{"reading 5 sigma", s.Readings[4].Sigma, 400},
		// Stated 4 % with the default k = 2 (JCGM 100:2008 §6.3).
		{"reading 11 sigma", s.Readings[10].Sigma, 0.04 * 6.4 / 3600 / 2},
		// gauge default ±5 %, at least 5 kPa: 5 % of 118 kPa = 5.9 kPa.
		{"reading 6 sigma", s.Readings[5].Sigma, 5.9e3 / 2},
		{"reading 9 setting", s.Readings[8].Setting, 3.2},
		{"target AHU-1", s.Targets["AHU-1"], 1.6e-3},
	}
	for _, c := range checks {
		if !near(c.got, c.want, tol) {
			t.Errorf("%s = %.15g, want %.15g", c.name, c.got, c.want)
		}
	}
	nans := []struct {
		name string
		v    float64
	}{
		{"AHU-1 pipe bore", s.Branches[0].PipeBore},
		{"AHU-1 roughness", s.Branches[0].Roughness},
		{"R2 terminal flow", s.Branches[1].TerminalFlow},
		{"R2.1 header bore", s.Branches[2].HeaderBore},
		{"AHU-1 return bore", s.Branches[0].ReturnBore},
		{"AHU-1 return leg bore (from its size)", s.Branches[0].ReturnLeg().Bore},
		{"R2 header roughness", s.Branches[1].HeaderRoughness},
		{"after-change speed", s.States[0].Speed},
		{"reading 1 setting", s.Readings[0].Setting},
		{"BV20 kvs", s.Valves[0].Kvs},
	}
	for _, c := range nans {
		if !math.IsNaN(c.v) {
			t.Errorf("%s = %g, want NaN (not given)", c.name, c.v)
		}
	}
	words := []struct{ name, got, want string }{
		{"name", s.Name, "East annex chilled water"},
		{"fluid", s.Fluid, "propylene-glycol"},
		{"header", s.Header.String(), "reverse-return"},
		{"boundary", s.Boundary.Kind.String(), "constant-differential"},
		{"sensor", s.Boundary.Sensor, "R2"},
		{"R2.1 parent", s.Branches[2].Parent, "R2"},
		{"AHU-1 note", s.Branches[0].Note, "roof plant, north"},
		{"BV20 unit", s.Valves[0].Unit, "turns"},
		{"CV25 unit", s.Valves[3].Unit, "%"},
		{"CV25 characteristic", s.Valves[3].Characteristic, "equal-percentage"},
		{"reading 2 quantity", s.Readings[1].What.String(), "valve diff"},
		{"reading 9 state", s.Readings[8].State, "after-change"},
		{"AHU-1 return leg size", s.Branches[0].ReturnLeg().Size, "DN65"},
		{"AHU-1 return leg standard", s.Branches[0].ReturnLeg().Standard, "en10255-m"},
		{"AHU-1 supply leg size", s.Branches[0].SupplyLeg().Size, "DN80"},
		{"state label", s.States[0].Label, "after-change"},
		{"R2.1 position", s.Branches[2].Pos.String(), "testdata/small/branches.csv:6"},
	}
	for _, c := range words[:len(words)-1] {
		if c.got != c.want {
			t.Errorf("%s = %q, want %q", c.name, c.got, c.want)
		}
	}
	if got := s.Branches[2].Pos.Line; got != 6 {
		t.Errorf("R2.1 line = %d, want 6 (after a blank line and a comment)", got)
	}
	if diff := cmp.Diff([]float64{0.5, 1, 2, 3, 4}, s.Valves[0].Settings); diff != "" {
		t.Errorf("BV20 settings (-want +got):\n%s", diff)
	}
	if diff := cmp.Diff([]float64{0.30, 0.62, 1.45, 2.60, 3.90}, s.Valves[0].Kv); diff != "" {
		t.Errorf("BV20 kv (-want +got):\n%s", diff)
	}
}

// TestUnits checks conversions of units named in headers against their
// definitions: US gallon = 231 in3, inch = 0.0254 m, foot = 0.3048 m
// (exact, NIST SP 811 B.8), T/K = (t/degF + 459.67)/1.8 (NIST SP 811 B.9),
// Kv = 0.864978 Cv (shared/references.md §3.3), and decimal commas.
func TestUnits(t *testing.T) {
	gallon := 231 * 0.0254 * 0.0254 * 0.0254
	files := map[string]string{
		"site.csv":     "temperature [degF],45\n",
		"branches.csv": "id,design flow [gpm],pipe length [ft],pipe bore [in],control cvs\nA,10,100,0.824,1\n",
		"valves.csv":   "model;setting;cv\nV;0,5;0,25\nV;4;2\n",
		"pump.csv":     "flow [gpm],head [ft]\n0,40\n50,30\n70,22\n",
		"readings.csv": "where;quantity;value [bar];unit;uncertainty;instrument\nA;branch diff;0,2;;2 %;manometer\nA;flow;1,5;l/s;;clamp-on\n",
	}
	s, p, err := ReadDir(mapFS(files), ".")
	if err != nil {
		t.Fatalf("ReadDir: %v", err)
	}
	if len(p) > 0 {
		t.Fatalf("ReadDir: unexpected problems:\n%v", p)
	}
	checks := []struct {
		name      string
		got, want float64
	}{
		{"design flow 10 gpm", s.Branches[0].DesignFlow, 10 * gallon / 60},
		{"pipe length 100 ft", s.Branches[0].PipeLength, 30.48},
		{"pipe bore 0.824 in", s.Branches[0].PipeBore, 0.824 * 0.0254},
		{"control cvs 1", s.Branches[0].ControlKvs, 0.864978},
		{"temperature 45 degF", s.Temperature, (45 + 459.67) / 1.8},
		{"valve cv 0,25", s.Valves[0].Kv[0], 0.25 * 0.864978},
		{"valve setting 0,5", s.Valves[0].Settings[0], 0.5},
		{"pump head 40 ft", s.Pump[0].Head, 12.192},
		{"pump flow 50 gpm", s.Pump[1].Flow, 50 * gallon / 60},
		{"reading 0,2 bar", s.Readings[0].Value, 20e3},
		{"reading 2 % of 0,2 bar at k = 2", s.Readings[0].Sigma, 0.02 * 20e3 / 2},
		// The unit cell overrides the value column's [bar].
		{"flow 1,5 l/s", s.Readings[1].Value, 1.5e-3},
	}
	for _, c := range checks {
		if !near(c.got, c.want, 1e-12) {
			t.Errorf("%s = %.15g SI, want %.15g", c.name, c.got, c.want)
		}
	}
}

// TestWorkbookMatchesCSV reads the fixture as CSV files and as a workbook
// holding the same cells (some numbers stored as text, a percentage-
// formatted cell) and expects the same Site, line numbers included.
func TestWorkbookMatchesCSV(t *testing.T) {
	if *update {
		writeSmallWorkbook(t)
	}
	want := readSmall(t)
	data, err := os.ReadFile("testdata/small.xlsx")
	if err != nil {
		t.Fatal(err)
	}
	got, p, err := ReadWorkbook(bytes.NewReader(data), int64(len(data)), "small.xlsx")
	if err != nil {
		t.Fatalf("ReadWorkbook: %v", err)
	}
	if len(p) > 0 {
		t.Fatalf("ReadWorkbook: unexpected problems:\n%v", p)
	}
	if diff := cmp.Diff(want, got, sameSite); diff != "" {
		t.Errorf("workbook and CSV differ (-csv +xlsx):\n%s", diff)
	}
	if got.Branches[0].Pos.File != "small.xlsx[branches]" || got.Source.Format != "xlsx" {
		t.Errorf("workbook positions name %q, source %+v", got.Branches[0].Pos.File, got.Source)
	}
}

// writeSmallWorkbook copies each CSV cell of the fixture to the same row
// and column of a tab, numbers as numbers except where a cell is kept as
// text on purpose. Run with -update after changing the fixture.
func writeSmallWorkbook(t *testing.T) {
	f := excelize.NewFile()
	defer f.Close()
	pct, err := f.NewStyle(&excelize.Style{NumFmt: 10}) // 0.00%
	if err != nil {
		t.Fatal(err)
	}
	for i, sc := range sheets {
		data, err := os.ReadFile(filepath.Join("testdata/small", sc.name+".csv"))
		if err != nil {
			t.Fatal(err)
		}
		if i == 0 {
			f.SetSheetName("Sheet1", sc.name)
		} else if _, err := f.NewSheet(sc.name); err != nil {
			t.Fatal(err)
		}
		r := csv.NewReader(bytes.NewReader(bytes.TrimPrefix(data, bomUTF8)))
		r.FieldsPerRecord = -1
		r.Comment = 0
		for {
			rec, err := r.Read()
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				t.Fatal(err)
			}
			line, _ := r.FieldPos(0)
			for j, c := range rec {
				if c == "" {
					continue
				}
				cell, _ := excelize.CoordinatesToCellName(j+1, line)
				var v any = c
				if plainNumber(c) && !(sc.name == "branches" && j == 2 && line == 2) {
					v, _ = parseNumber(c, false)
				}
				if sc.name == "readings" && strings.HasSuffix(c, "%") {
					x, _ := parseNumber(strings.TrimSpace(strings.TrimSuffix(c, "%")), false)
					v = x / 100
					if err := f.SetCellStyle(sc.name, cell, cell, pct); err != nil {
						t.Fatal(err)
					}
				}
				if err := f.SetCellValue(sc.name, cell, v); err != nil {
					t.Fatal(err)
				}
			}
		}
	}
	if err := f.SaveAs("testdata/small.xlsx"); err != nil {
		t.Fatal(err)
	}
}

// TestRoundTrip writes the fixture back as CSV files and as a workbook and
// reads each again.
func TestRoundTrip(t *testing.T) {
	want := readSmall(t)
	t.Run("csv", func(t *testing.T) {
		fsys := fstest.MapFS{}
		if err := WriteDir(want, mapCreate(fsys)); err != nil {
			t.Fatalf("WriteDir: %v", err)
		}
		got, p, err := ReadDir(fsys, ".")
		if err != nil || len(p) > 0 {
			t.Fatalf("ReadDir after WriteDir: %v\n%v", err, p)
		}
		if diff := cmp.Diff(want, got, ignoreLines); diff != "" {
			t.Errorf("round trip (-before +after):\n%s", diff)
		}
	})
	t.Run("xlsx", func(t *testing.T) {
		var buf bytes.Buffer
		if err := WriteWorkbook(want, &buf); err != nil {
			t.Fatalf("WriteWorkbook: %v", err)
		}
		got, p, err := ReadWorkbook(bytes.NewReader(buf.Bytes()), int64(buf.Len()), "out.xlsx")
		if err != nil || len(p) > 0 {
			t.Fatalf("ReadWorkbook after WriteWorkbook: %v\n%v", err, p)
		}
		if diff := cmp.Diff(want, got, ignoreLines); diff != "" {
			t.Errorf("round trip (-before +after):\n%s", diff)
		}
	})
}

// mapCreate returns a create function that writes files into fsys.
func mapCreate(fsys fstest.MapFS) func(string) (io.WriteCloser, error) {
	return func(name string) (io.WriteCloser, error) {
		return &mapFile{fsys: fsys, name: name}, nil
	}
}

type mapFile struct {
	bytes.Buffer
	fsys fstest.MapFS
	name string
}

func (m *mapFile) Close() error {
	m.fsys[m.name] = &fstest.MapFile{Data: m.Bytes()}
	return nil
}

// TestTemplate reads the blank templates back: every column must be known
// and the only problems those of a site with nothing in it yet.
func TestTemplate(t *testing.T) {
	want := []string{
		// The pump sheet with a header and no rows counts as absent.
		"%sbranches%s:1: no branches listed (want one row per branch below the header)",
		"%sreadings%s:1: warning: no readings: nothing to calibrate (want one row per reading below the header)",
	}
	format := func(pre, post string) []string {
		out := make([]string, len(want))
		for i, w := range want {
			out[i] = strings.Replace(strings.Replace(w, "%s", pre, 1), "%s", post, 1)
		}
		return out
	}
	t.Run("csv", func(t *testing.T) {
		fsys := fstest.MapFS{}
		if err := WriteTemplateCSV(mapCreate(fsys)); err != nil {
			t.Fatalf("WriteTemplateCSV: %v", err)
		}
		if len(fsys) != len(sheets) {
			t.Errorf("template has %d files, want %d", len(fsys), len(sheets))
		}
		_, p, _ := ReadDir(fsys, ".")
		if diff := cmp.Diff(format("", ".csv"), problemStrings(p)); diff != "" {
			t.Errorf("template problems (-want +got):\n%s", diff)
		}
		if h := string(fsys["branches.csv"].Data); !strings.HasPrefix(h, "id,parent,design flow [l/s],") || !strings.Contains(h, "\n# unique name") {
			t.Errorf("branches.csv template starts %q", h[:min(len(h), 80)])
		}
	})
	t.Run("xlsx", func(t *testing.T) {
		var buf bytes.Buffer
		if err := WriteTemplateWorkbook(&buf); err != nil {
			t.Fatalf("WriteTemplateWorkbook: %v", err)
		}
		_, p, _ := ReadWorkbook(bytes.NewReader(buf.Bytes()), int64(buf.Len()), "t.xlsx")
		if diff := cmp.Diff(format("t.xlsx[", "]"), problemStrings(p)); diff != "" {
			t.Errorf("template problems (-want +got):\n%s", diff)
		}
	})
}

// TestTopics checks the help: a topic per sheet plus the general ones,
// every column named in its sheet's topic, and the examples together
// forming a valid site.
func TestTopics(t *testing.T) {
	topics := Topics()
	var names []string
	for _, tp := range topics {
		names = append(names, tp.Name)
		if tp.Title == "" || len(tp.Body) < 200 {
			t.Errorf("topic %q: title %q, body of %d bytes", tp.Name, tp.Title, len(tp.Body))
		}
	}
	wantNames := []string{"sheets", "site", "branches", "valves", "pump", "readings", "states", "moves", "targets", "pressure-independent", "controllers", "units", "instruments"}
	if diff := cmp.Diff(wantNames, names); diff != "" {
		t.Errorf("topic names (-want +got):\n%s", diff)
	}
	for i, sc := range sheets {
		body := topics[i+1].Body
		for _, c := range sc.columns {
			if !strings.Contains(body, "  "+headerName(&c)+" ") {
				t.Errorf("topic %q does not describe column %q", sc.name, c.name)
			}
		}
	}
	for _, in := range instruments {
		if body := topics[len(topics)-1].Body; !strings.Contains(body, in.Name) || !strings.Contains(body, in.Source) {
			t.Errorf("instruments topic lacks %q or its source", in.Name)
		}
	}
	fsys := fstest.MapFS{}
	for name, text := range examples {
		fsys[name+".csv"] = &fstest.MapFile{Data: []byte(text)}
	}
	if _, p, err := ReadDir(fsys, "."); err != nil || len(p) > 0 {
		t.Errorf("the help examples do not read cleanly: %v\n%v", err, p)
	}
	// The controllers topic's example, on the rest of the example site.
	for name, text := range controllerExample {
		fsys[name+".csv"] = &fstest.MapFile{Data: []byte(text)}
	}
	s, p, err := ReadDir(fsys, ".")
	if err != nil || len(p) > 0 {
		t.Fatalf("the controllers example does not read cleanly: %v\n%v", err, p)
	}
	if c := s.Branch("R1").Controller; c.SetPoint != 25e3 || c.Kvs != 16 || c.Min != 5e3 || c.Max != 50e3 {
		t.Errorf("R1's controller %+v, want 25 kPa, Kvs 16, 5-50 kPa", c)
	}
}

func TestSummary(t *testing.T) {
	s := readSmall(t)
	want := Summary{
		Branches: 4, Risers: 1, Valves: 4, PumpPoints: 4, Readings: 11,
		States: []StateCount{{"as-found", 8, "", 0}, {"after-change", 3, "set point 55 kPa", 1}},
		Measured: []BranchReading{
			{ID: "AHU-1", Readings: 3, By: []Measure{{Flow, "clamp-on", 2}, {ValveDiff, "manometer", 1}}},
			{ID: "R2", Readings: 1, By: []Measure{{HeaderDiff, "transmitter", 1}}},
			{ID: "R2.1", Readings: 4, By: []Measure{{Flow, "valve-meter", 2}, {ValveDiff, "manometer", 2}}},
			{ID: "R2.2", Readings: 1, By: []Measure{{BranchDiff, "manometer", 1}}},
		},
		SystemDiff: true,
	}
	if diff := cmp.Diff(want, s.Summary()); diff != "" {
		t.Errorf("Summary (-want +got):\n%s", diff)
	}
	// Without the system differentials and the R2 and R2.2 readings.
	var keep []Reading
	for _, r := range s.Readings {
		if r.Where == "AHU-1" || r.Where == "R2.1" {
			keep = append(keep, r)
		}
	}
	s.Readings = keep
	wantMissing := []string{"2 branches have no reading: R2, R2.2", "no pump or header differential in any state"}
	if diff := cmp.Diff(wantMissing, s.Summary().Missing); diff != "" {
		t.Errorf("Summary.Missing (-want +got):\n%s", diff)
	}
}

func TestErrorFormat(t *testing.T) {
	long := strings.Repeat("x", 70)
	cases := []struct {
		name string
		e    Error
		want string
	}{
		{"full", Error{File: "branches.csv", Line: 7, Column: 4, Field: "design flow", Value: "-2", Err: ErrRange, Msg: "must be positive", Want: "a flow above 0"},
			`branches.csv:7:4: field "design flow": value "-2": must be positive (want a flow above 0)`},
		{"file only", Error{File: "readings.csv", Err: ErrMissing, Msg: "sheet is missing"}, "readings.csv: sheet is missing"},
		{"line without column", Error{File: "a.csv", Line: 3, Column: 0, Err: ErrSyntax}, "a.csv:3: malformed text"},
		{"warning", Error{File: "a.csv", Line: 1, Column: 2, Field: "x", Severity: SeverityWarning, Err: ErrUnknown, Msg: "unknown column, ignored"},
			`a.csv:1:2: warning: field "x": unknown column, ignored`},
		{"long value clipped", Error{File: "a.csv", Line: 1, Value: long, Err: ErrSyntax},
			`a.csv:1: value "` + strings.Repeat("x", 60) + `...": malformed text`},
	}
	for _, c := range cases {
		if got := c.e.Error(); got != c.want {
			t.Errorf("%s: Error() = %q, want %q", c.name, got, c.want)
		}
	}
	cause := &units.UnitError{Symbol: "kPa", Want: units.Flow, Have: units.Pressure, Err: units.ErrWrongKind}
	e := &Error{Err: ErrUnit, Cause: cause}
	if !errors.Is(e, ErrUnit) || !errors.Is(e, units.ErrWrongKind) {
		t.Errorf("errors.Is through Error: ErrUnit %v, units.ErrWrongKind %v", errors.Is(e, ErrUnit), errors.Is(e, units.ErrWrongKind))
	}
}

func TestProblemsErr(t *testing.T) {
	warn := &Error{File: "a.csv", Severity: SeverityWarning, Err: ErrUnknown}
	bad := &Error{File: "b.csv", Err: ErrDuplicate}
	if err := (Problems{warn}).Err(); err != nil {
		t.Errorf("Problems{warning}.Err() = %v, want nil", err)
	}
	err := Problems{warn, bad}.Err()
	if err == nil || !errors.Is(err, ErrDuplicate) || errors.Is(err, ErrUnknown) {
		t.Errorf("Problems{warning, error}.Err() = %v; want only the error", err)
	}
	var got *Error
	if !errors.As(err, &got) || got != bad {
		t.Errorf("errors.As found %v, want %v", got, bad)
	}
}

func TestLoad(t *testing.T) {
	dir := t.TempDir()
	want := readSmall(t)
	create := func(name string) (io.WriteCloser, error) { return os.Create(filepath.Join(dir, "annex", name)) }
	if err := os.Mkdir(filepath.Join(dir, "annex"), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := WriteDir(want, create); err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := WriteWorkbook(want, &buf); err != nil {
		t.Fatal(err)
	}
	book := filepath.Join(dir, "annex.xlsx")
	if err := os.WriteFile(book, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, p := range []string{filepath.Join(dir, "annex"), book} {
		got, probs, err := Load(context.Background(), p)
		if err != nil || len(probs) > 0 {
			t.Fatalf("Load(%s): %v\n%v", p, err, probs)
		}
		if diff := cmp.Diff(want, got, ignoreLines); diff != "" {
			t.Errorf("Load(%s) (-want +got):\n%s", p, diff)
		}
		if got.Source.Path != p {
			t.Errorf("Load(%s): source %q", p, got.Source.Path)
		}
	}
	if _, _, err := Load(context.Background(), filepath.Join(dir, "annex", "branches.csv")); err == nil || !strings.Contains(err.Error(), "want a folder of CSV sheets or an .xlsx workbook") {
		t.Errorf("Load(a .csv file) error = %v", err)
	}
	if _, _, err := Load(context.Background(), filepath.Join(dir, "nowhere")); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("Load(missing) error = %v, want not-exist", err)
	}
	// A site name defaults to the folder's.
	os.WriteFile(filepath.Join(dir, "annex", "site.csv"), []byte("fluid,propylene-glycol\nglycol [%],30\nboundary,constant-differential\nset point [kPa],60\nsensor,R2\n"), 0o644)
	got, _, err := Load(context.Background(), filepath.Join(dir, "annex"))
	if err != nil || got.Name != "annex" {
		t.Errorf("Load: name %q, err %v; want the folder name", got.Name, err)
	}
}

func TestReadWorkbookBad(t *testing.T) {
	_, p, err := ReadWorkbook(strings.NewReader("not a zip"), 9, "x.xlsx")
	want := []string{"x.xlsx: not a readable .xlsx workbook (want a workbook saved as .xlsx)"}
	if diff := cmp.Diff(want, problemStrings(p)); diff != "" || !errors.Is(err, ErrSyntax) {
		t.Errorf("ReadWorkbook(garbage): err %v, problems (-want +got):\n%s", err, diff)
	}
	// A workbook with a misnamed tab, an empty tab and a bad cell.
	f := excelize.NewFile()
	defer f.Close()
	f.SetSheetName("Sheet1", "Branches")
	f.SetSheetRow("Branches", "A1", &[]any{"id", "design flow [l/s]"})
	f.SetSheetRow("Branches", "A2", &[]any{"# help row", "ignored"})
	f.SetSheetRow("Branches", "A3", &[]any{"A", 0.5})
	f.SetSheetRow("Branches", "A5", &[]any{"B", "lots"})
	f.NewSheet("reading")
	f.NewSheet("valves")
	var buf bytes.Buffer
	if err := f.Write(&buf); err != nil {
		t.Fatal(err)
	}
	_, p, _ = ReadWorkbook(bytes.NewReader(buf.Bytes()), int64(buf.Len()), "w.xlsx")
	want = []string{
		`w.xlsx[Branches]:5:2: field "design flow": value "lots": not a number (want a number such as 1.5)`,
		`w.xlsx[reading]: warning: unknown sheet, ignored (want "readings")`,
		`w.xlsx[readings]: sheet is missing (want a readings sheet; see flowset help readings)`,
		`w.xlsx[valves]: sheet is empty (want a header row naming the columns)`,
	}
	if diff := cmp.Diff(want, problemStrings(p)); diff != "" {
		t.Errorf("ReadWorkbook problems (-want +got):\n%s", diff)
	}
}

// TestRoundTripMeasured writes a site whose fluid properties are given as
// measured (each viscosity in turn), or an open circuit, and reads it back from CSV files and a
// workbook: the values come back as written, in SI.
func TestRoundTripMeasured(t *testing.T) {
	for _, c := range []struct {
		name          string
		dyn, kin      float64
		fluid         string
		density, temp float64
		lift, outlet  float64
	}{
		{name: "other, dynamic", fluid: OtherFluid, density: 1052.5, dyn: 3.1e-3, kin: nan, temp: 278.15},
		{name: "other, kinematic", fluid: OtherFluid, density: 1052.5, dyn: nan, kin: 2.95e-6, temp: 278.15},
		{name: "water, density only", fluid: "water", density: 998.2071, dyn: nan, kin: nan, temp: 293.15},
		{name: "open circuit", fluid: "water", density: nan, dyn: nan, kin: nan, temp: 301.15, lift: 7.5, outlet: 20e3},
		{name: "open circuit, free discharge", fluid: "water", density: nan, dyn: nan, kin: nan, temp: 301.15, lift: 3.25},
	} {
		t.Run(c.name, func(t *testing.T) {
			want := readSmall(t)
			want.Fluid, want.GlycolPercent, want.Temperature = c.fluid, 0, c.temp
			want.Density, want.Viscosity, want.KinematicViscosity = c.density, c.dyn, c.kin
			want.StaticLift, want.OutletPressure = c.lift, c.outlet
			fsys := fstest.MapFS{}
			if err := WriteDir(want, mapCreate(fsys)); err != nil {
				t.Fatalf("WriteDir: %v", err)
			}
			got, p, err := ReadDir(fsys, ".")
			if err != nil || len(p) > 0 {
				t.Fatalf("ReadDir after WriteDir: %v\n%v\n%s", err, p, fsys["site.csv"].Data)
			}
			if diff := cmp.Diff(want, got, ignoreLines); diff != "" {
				t.Errorf("csv round trip (-before +after):\n%s", diff)
			}
			var buf bytes.Buffer
			if err := WriteWorkbook(want, &buf); err != nil {
				t.Fatalf("WriteWorkbook: %v", err)
			}
			got, p, err = ReadWorkbook(bytes.NewReader(buf.Bytes()), int64(buf.Len()), "out.xlsx")
			if err != nil || len(p) > 0 {
				t.Fatalf("ReadWorkbook after WriteWorkbook: %v\n%v", err, p)
			}
			if diff := cmp.Diff(want, got, ignoreLines); diff != "" {
				t.Errorf("xlsx round trip (-before +after):\n%s", diff)
			}
		})
	}
}

// TestSiteIntroExamples reads every example in the site topic's text (each
// run of indented lines is a site sheet) with the other sheets' examples:
// each must read cleanly and give what its text says.
func TestSiteIntroExamples(t *testing.T) {
	var blocks []string
	var cur []string
	for _, line := range strings.Split(sheetIntro["site"]+"\n", "\n") {
		if strings.HasPrefix(line, "  ") {
			cur = append(cur, strings.TrimSpace(line))
			continue
		}
		if len(cur) > 0 {
			blocks = append(blocks, strings.Join(cur, "\n")+"\n")
			cur = nil
		}
	}
	if len(blocks) < 2 {
		t.Fatalf("site topic has %d examples, want at least 2", len(blocks))
	}
	for i, b := range blocks {
		fsys := fstest.MapFS{}
		for name, text := range examples {
			fsys[name+".csv"] = &fstest.MapFile{Data: []byte(text)}
		}
		// The example's keys with the rest of the help's site sheet.
		sheet := b
		for _, line := range strings.Split(examples["site"], "\n") {
			key, _, _ := strings.Cut(line, ",")
			if key, _, _ = splitUnit(key); line != "" && key != "key" && !strings.Contains(b, key+",") && !strings.Contains(b, key+" [") {
				sheet += line + "\n"
			}
		}
		fsys["site.csv"] = &fstest.MapFile{Data: []byte(sheet)}
		s, p, err := ReadDir(fsys, ".")
		if err != nil || len(p) > 0 {
			t.Errorf("site topic example %d does not read cleanly: %v\n%v\n%s", i+1, err, p, b)
			continue
		}
		if strings.Contains(b, "density") && !(s.Density > 0) {
			t.Errorf("example %d: density not read", i+1)
		}
		if strings.Contains(b, "static lift") && !(s.StaticLift > 7 && s.StaticLift < 8 && s.OutletPressure > 19.9e3 && s.OutletPressure < 20.1e3) {
			t.Errorf("example %d: static lift %g m, outlet pressure %g Pa; want the text's 7.5 m and 20 kPa (24.6 ft, 2.9 psi)", i+1, s.StaticLift, s.OutletPressure)
		}
	}
}

// TestPressureIndependentExample reads the valves topic's example model PI15
// and writes it back: a table of the flow it holds by setting, its hold
// differential in Pa, and a Kv left for the model to derive (NaN).
func TestPressureIndependentExample(t *testing.T) {
	fsys := fstest.MapFS{}
	for name, text := range examples {
		fsys[name+".csv"] = &fstest.MapFile{Data: []byte(text)}
	}
	s, p, err := ReadDir(fsys, ".")
	if err != nil || len(p) > 0 {
		t.Fatalf("examples: %v %v", err, p)
	}
	v := s.Valve("PI15")
	if v == nil || !v.PressureIndependent() || v.Table() {
		t.Fatalf("PI15 = %+v, want a pressure-independent valve", v)
	}
	if diff := cmp.Diff([]float64{0.03e-3, 0.08e-3, 0.15e-3}, v.MaxFlow, cmpopts.EquateApprox(1e-12, 0)); diff != "" {
		t.Errorf("max flow (-want +got):\n%s", diff)
	}
	if v.HoldDiff != 20e3 || !math.IsNaN(v.Kv[0]) || v.Unit != "steps" {
		t.Errorf("hold diff %g Pa, kv %v, unit %q; want 20000 Pa, NaN, steps", v.HoldDiff, v.Kv, v.Unit)
	}
	if v := s.Valve("V15"); v.PressureIndependent() || !math.IsNaN(v.HoldDiff) {
		t.Errorf("V15 = %+v, want a Kv table without a hold diff", v)
	}
	out := fstest.MapFS{}
	if err := WriteDir(s, mapCreate(out)); err != nil {
		t.Fatalf("WriteDir: %v", err)
	}
	got, p, err := ReadDir(out, ".")
	if err != nil || len(p) > 0 {
		t.Fatalf("ReadDir after WriteDir: %v\n%v", err, p)
	}
	if diff := cmp.Diff(s.Valves, got.Valves, sameSite); diff != "" {
		t.Errorf("valves round trip (-before +after):\n%s", diff)
	}
}

// TestRoundTripController writes a site with a differential controller (and
// a reading across its span) and reads it back, as CSV and as a workbook.
func TestRoundTripController(t *testing.T) {
	for _, c := range []struct {
		name string
		ctl  Controller
	}{
		{"with range", Controller{SetPoint: 25e3, Kvs: 16, Min: 5e3, Max: 50e3}},
		{"no range", Controller{SetPoint: 32.5e3, Kvs: 6.3}},
		{"sensing the branches", Controller{SetPoint: 20e3, Kvs: 10, Senses: SensesBranches}},
	} {
		t.Run(c.name, func(t *testing.T) {
			want := readSmall(t)
			want.Branch("R2").Controller = c.ctl
			want.Readings = append(want.Readings, Reading{State: "as-found", Where: "R2", What: ControlledDiff, Value: 24.5e3,
				Setting: nan, Instrument: "manometer", Sigma: 250})
			fsys := fstest.MapFS{}
			if err := WriteDir(want, mapCreate(fsys)); err != nil {
				t.Fatalf("WriteDir: %v", err)
			}
			got, p, err := ReadDir(fsys, ".")
			if err != nil || len(p) > 0 {
				t.Fatalf("ReadDir after WriteDir: %v\n%v", err, p)
			}
			if diff := cmp.Diff(want, got, ignoreLines); diff != "" {
				t.Errorf("round trip (-before +after):\n%s", diff)
			}
			var buf bytes.Buffer
			if err := WriteWorkbook(want, &buf); err != nil {
				t.Fatalf("WriteWorkbook: %v", err)
			}
			got, p, err = ReadWorkbook(bytes.NewReader(buf.Bytes()), int64(buf.Len()), "out.xlsx")
			if err != nil || len(p) > 0 {
				t.Fatalf("ReadWorkbook after WriteWorkbook: %v\n%v", err, p)
			}
			if diff := cmp.Diff(want, got, ignoreLines); diff != "" {
				t.Errorf("workbook round trip (-before +after):\n%s", diff)
			}
		})
	}
}

// TestRoundTripPumps: several pumps (ids, a pump's own speed, the
// arrangement, pumps running in the site and in a state) read back as
// written, in CSV and in a workbook.
func TestRoundTripPumps(t *testing.T) {
	for _, series := range []bool{false, true} {
		want := readSmall(t)
		var pts []PumpPoint
		for _, id := range []string{"P1", "P2"} {
			for _, pt := range want.Pump {
				pt.Pump, pt.Speed, pt.Efficiency = id, nan, nan
				if id == "P2" {
					pt.Speed = 0.9
				} else {
					pt.Efficiency = 0.5 + pt.Flow
				}
				pts = append(pts, pt)
			}
		}
		want.Pump, want.PumpSeries = pts, series
		if !series {
			want.PumpsRunning = 1
			want.States[0].Running = 2
		}
		fsys := fstest.MapFS{}
		if err := WriteDir(want, mapCreate(fsys)); err != nil {
			t.Fatalf("WriteDir: %v", err)
		}
		got, p, err := ReadDir(fsys, ".")
		if err != nil || len(p) > 0 {
			t.Fatalf("ReadDir after WriteDir: %v\n%v\n%s", err, p, fsys["pump.csv"].Data)
		}
		if diff := cmp.Diff(want, got, ignoreLines); diff != "" {
			t.Errorf("series %v: csv round trip (-before +after):\n%s", series, diff)
		}
		if got := got.Pumps(); !slices.Equal(got, []string{"P1", "P2"}) {
			t.Errorf("Pumps() = %q, want P1, P2", got)
		}
		if n, m := got.Running("after-change"), got.Running("as-found"); !series && (n != 2 || m != 1) || series && (n != 2 || m != 2) {
			t.Errorf("series %v: running after-change %d, as-found %d", series, n, m)
		}
		var buf bytes.Buffer
		if err := WriteWorkbook(want, &buf); err != nil {
			t.Fatalf("WriteWorkbook: %v", err)
		}
		got, p, err = ReadWorkbook(bytes.NewReader(buf.Bytes()), int64(buf.Len()), "out.xlsx")
		if err != nil || len(p) > 0 {
			t.Fatalf("ReadWorkbook after WriteWorkbook: %v\n%v", err, p)
		}
		if diff := cmp.Diff(want, got, ignoreLines); diff != "" {
			t.Errorf("series %v: workbook round trip (-before +after):\n%s", series, diff)
		}
	}
}

// TestPumpIntroExample reads the several-pumps example of the pump topic
// (its indented lines) with the other sheets' examples and the site keys
// its text names: three pumps, STBY on its own speed, two running.
func TestPumpIntroExample(t *testing.T) {
	var lines []string
	for _, line := range strings.Split(sheetIntro["pump"], "\n") {
		if strings.HasPrefix(line, "  ") {
			lines = append(lines, strings.TrimSpace(line))
		}
	}
	fsys := fstest.MapFS{}
	for name, text := range examples {
		fsys[name+".csv"] = &fstest.MapFile{Data: []byte(text)}
	}
	fsys["pump.csv"] = &fstest.MapFile{Data: []byte(strings.Join(lines, "\n") + "\n")}
	fsys["site.csv"] = &fstest.MapFile{Data: []byte(examples["site"] + "pump arrangement,parallel\npumps running,2\n")}
	s, p, err := ReadDir(fsys, ".")
	if err != nil || len(p) > 0 {
		t.Fatalf("the pump topic's example does not read cleanly: %v\n%v", err, p)
	}
	if got := s.Pumps(); !slices.Equal(got, []string{"P1", "P2", "STBY"}) || s.PumpSeries || s.Running("as-found") != 2 {
		t.Errorf("pumps %q, series %v, running %d; want P1, P2, STBY in parallel, 2 running", got, s.PumpSeries, s.Running("as-found"))
	}
	for _, pt := range s.Pump {
		if want := pt.Pump == "STBY"; (pt.Speed == 1) != want {
			t.Errorf("%s at line %d: speed %g", pt.Pump, pt.Pos.Line, pt.Speed)
		}
	}
}

// TestPressureIndependentTopic reads the pressure-independent topic's
// example as a valves sheet, with a branch naming its model: it must read
// cleanly as that kind of valve.
func TestPressureIndependentTopic(t *testing.T) {
	var body string
	for _, tp := range Topics() {
		if tp.Name == "pressure-independent" {
			body = tp.Body
		}
	}
	var rows []string
	for _, line := range strings.Split(body, "\n") {
		if strings.HasPrefix(line, "  model,") || strings.HasPrefix(line, "  PI15,") {
			rows = append(rows, strings.TrimSpace(line))
		}
	}
	if len(rows) < 3 {
		t.Fatalf("topic example has %d rows:\n%s", len(rows), body)
	}
	fsys := fstest.MapFS{
		"valves.csv":   {Data: []byte(strings.Join(rows, "\n") + "\n")},
		"branches.csv": {Data: []byte("id,design flow [l/s],pipe bore [mm],pipe length [m],valve,setting\nA,0.1,16,10,PI15,3\n")},
		"readings.csv": {Data: []byte("state,where,quantity,value,unit,instrument\nas-found,A,flow,0.08,l/s,clamp-on\n")},
	}
	s, p, err := ReadDir(fsys, ".")
	if err != nil || len(p) > 0 {
		t.Fatalf("topic example: %v %v", err, p)
	}
	if v := s.Valve("PI15"); v == nil || !v.PressureIndependent() || v.HoldDiff != 20e3 {
		t.Errorf("PI15 = %+v, want a pressure-independent valve holding from 20 kPa", v)
	}
}

// TestRoundTripBypass: a three-port terminal's bypass valve and setting, and
// readings taken in the bypass position, read back as written.
func TestRoundTripBypass(t *testing.T) {
	want := readSmall(t)
	k := slices.IndexFunc(want.Branches, func(b Branch) bool { return b.Valve != "" && !math.IsNaN(b.Setting) })
	b := &want.Branches[k]
	b.BypassValve, b.BypassSetting = b.Valve, b.Setting
	n := 0
	for i := range want.Readings {
		if r := &want.Readings[i]; r.Where == b.ID && r.State == "after-change" {
			r.Bypass = true
			n++
		}
	}
	if n == 0 {
		t.Fatalf("no reading of %s after the change", b.ID)
	}
	fsys := fstest.MapFS{}
	if err := WriteDir(want, mapCreate(fsys)); err != nil {
		t.Fatalf("WriteDir: %v", err)
	}
	got, p, err := ReadDir(fsys, ".")
	if err != nil || len(p) > 0 {
		t.Fatalf("ReadDir after WriteDir: %v\n%v", err, p)
	}
	if diff := cmp.Diff(want, got, ignoreLines); diff != "" {
		t.Errorf("round trip (-before +after):\n%s", diff)
	}
}

// TestThreePortExample reads the three-port example of the branches topic
// (its indented lines) with the other sheets' examples: AHU-3 has its
// bypass valve V25 at 4 turns, and a reading taken through its bypass is
// accepted.
func TestThreePortExample(t *testing.T) {
	var lines []string
	for _, line := range strings.Split(sheetIntro["branches"], "\n") {
		if strings.HasPrefix(line, "  ") {
			lines = append(lines, strings.TrimSpace(line))
		}
	}
	if len(lines) != 2 {
		t.Fatalf("branches topic example: %d lines, want a header and a row", len(lines))
	}
	fsys := fstest.MapFS{}
	for name, text := range examples {
		fsys[name+".csv"] = &fstest.MapFile{Data: []byte(text)}
	}
	fsys["branches.csv"] = &fstest.MapFile{Data: []byte(strings.Join(lines, "\n") + "\n")}
	fsys["readings.csv"] = &fstest.MapFile{Data: []byte("state,where,quantity,value,unit,instrument,position\nas-found,AHU-3,flow,1.1,l/s,clamp-on,\nbypassed,AHU-3,flow,1.3,l/s,clamp-on,bypass\n")}
	delete(fsys, "states.csv")
	delete(fsys, "moves.csv")
	delete(fsys, "targets.csv")
	s, p, err := ReadDir(fsys, ".")
	if err != nil || len(p) > 0 {
		t.Fatalf("the three-port example does not read cleanly: %v\n%v", err, p)
	}
	b := s.Branch("AHU-3")
	if b == nil || b.BypassValve != "V25" || b.BypassSetting != 4 || !s.Readings[1].Bypass || s.Readings[0].Bypass {
		t.Errorf("AHU-3 = %+v, readings %+v", b, s.Readings)
	}
}
