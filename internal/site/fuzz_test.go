package site

import (
	"bytes"
	"errors"
	"math"
	"os"
	"path/filepath"
	"slices"
	"testing"
	"testing/fstest"

	"github.com/google/go-cmp/cmp"
)

// The fuzz targets read whole sites, a few hundred executions a second
// with coverage on; the default minimisation of each new input (up to a
// minute) then looks like a stall. Fuzz with a short minimisation time:
//
//	go test ./internal/site -run '^$' -fuzz FuzzRoundTrip -fuzztime 60s -fuzzminimizetime 2s

// smallFiles returns the fixture's files.
func smallFiles(tb testing.TB) map[string][]byte {
	tb.Helper()
	out := map[string][]byte{}
	for _, sc := range sheets {
		data, err := os.ReadFile(filepath.Join("testdata/small", sc.name+".csv"))
		if err != nil {
			tb.Fatal(err)
		}
		out[sc.name+".csv"] = data
	}
	return out
}

var causes = []error{ErrSyntax, ErrUnit, ErrRange, ErrMissing, ErrDuplicate, ErrUnknown, ErrReference}

// checkResult checks what every read must give, whatever the input: an
// error exactly when a problem is an error, a site exactly when there is
// none, problems that name a file and wrap a known cause, and a site with
// no infinite numbers, NaN only where documented, and references that
// resolve.
func checkResult(t *testing.T, s *Site, p Problems, err error) {
	t.Helper()
	hasErr := len(p.Errors()) > 0
	if hasErr != (err != nil) || (err == nil) != (s != nil) {
		t.Fatalf("%d error problems, err %v, site nil %v", len(p.Errors()), err, s == nil)
	}
	for _, e := range p {
		known := false
		for _, c := range causes {
			known = known || errors.Is(e, c)
		}
		if e.File == "" || !known || e.Error() == "" {
			t.Errorf("problem %q: file %q, cause %v", e.Error(), e.File, e.Err)
		}
	}
	if s == nil {
		return
	}
	finite := func(what string, v float64, nanOK bool) {
		if math.IsInf(v, 0) || math.IsNaN(v) && !nanOK {
			t.Errorf("%s = %g", what, v)
		}
	}
	finite("temperature", s.Temperature, false)
	finite("glycol", s.GlycolPercent, false)
	finite("speed", s.Boundary.Speed, false)
	finite("set point", s.Boundary.SetPoint, true)
	finite("energy price", s.EnergyPrice, true)
	ids := map[string]bool{}
	for _, b := range s.Branches {
		if b.ID == "" || ids[b.ID] {
			t.Errorf("branch id %q empty or repeated", b.ID)
		}
		ids[b.ID] = true
		finite(b.ID+" design flow", b.DesignFlow, false)
		finite(b.ID+" pipe length", b.PipeLength, false)
		finite(b.ID+" pipe bore", b.PipeBore, true)
		finite(b.ID+" setting", b.Setting, true)
		if !(b.DesignFlow > 0) {
			t.Errorf("branch %q design flow %g", b.ID, b.DesignFlow)
		}
	}
	for _, b := range s.Branches {
		if b.Parent != "" && !ids[b.Parent] {
			t.Errorf("branch %q hangs from unknown %q", b.ID, b.Parent)
		}
		if b.Valve != "" && s.Valve(b.Valve) == nil {
			t.Errorf("branch %q names unknown valve %q", b.ID, b.Valve)
		}
	}
	for _, v := range s.Valves {
		if v.Table() && len(v.Settings) < 2 {
			t.Errorf("valve %q has %d points", v.Name, len(v.Settings))
		}
		for i := 1; i < len(v.Settings); i++ {
			if v.Settings[i] <= v.Settings[i-1] || v.Kv[i] < v.Kv[i-1] {
				t.Errorf("valve %q table not rising at %d", v.Name, i)
			}
		}
	}
	labels := map[string]bool{}
	for _, r := range s.Readings {
		labels[r.State] = true
	}
	for _, st := range s.States {
		finite(st.Label+" speed", st.Speed, true)
		finite(st.Label+" set point", st.SetPoint, true)
		if !labels[st.Label] {
			t.Errorf("%v: state %q has no readings", st.Pos, st.Label)
		}
		if st.Speed > s.Boundary.MaxSpeed || st.Speed <= 0 || st.SetPoint <= 0 {
			t.Errorf("%v: state %q speed %g set point %g", st.Pos, st.Label, st.Speed, st.SetPoint)
		}
	}
	for _, b := range s.Branches {
		for _, l := range []Leg{b.SupplyLeg(), b.ReturnLeg()} {
			if l.Length > 0 && !l.Sized() {
				t.Errorf("branch %q: a header leg of %g m with no bore or size", b.ID, l.Length)
			}
		}
	}
	for _, r := range s.Readings {
		finite("reading value", r.Value, false)
		if r.Value < 0 && (r.What.IsFlow() || r.What == Speed || -r.Value > 4*r.Sigma*(1+1e-9)) {
			t.Errorf("%v: negative %v reading %g with sigma %g", r.Pos, r.What, r.Value, r.Sigma)
		}
		if r.What == Speed && r.Value > s.Boundary.MaxSpeed+4*r.Sigma*(1+1e-9) {
			t.Errorf("%v: speed %g above max %g", r.Pos, r.Value, s.Boundary.MaxSpeed)
		}
		if !(r.Sigma > 0) || math.IsInf(r.Sigma, 0) {
			t.Errorf("%v: sigma %g", r.Pos, r.Sigma)
		}
		if r.Where != AtPump && r.Where != AtHeader && !ids[r.Where] && !slices.Contains(s.Pumps(), r.Where) {
			t.Errorf("%v: reading at unknown %q", r.Pos, r.Where)
		}
		if r.What < Flow || r.What > Speed {
			t.Errorf("%v: quantity %d", r.Pos, r.What)
		}
	}
	for _, mv := range s.Moves {
		finite("move setting", mv.Setting, false)
		if mv.State == "" || !ids[mv.Branch] {
			t.Errorf("%v: move of %q in state %q", mv.Pos, mv.Branch, mv.State)
		}
	}
}

// fuzzSheet fuzzes one sheet of the fixture, the others left as they are.
func fuzzSheet(f *testing.F, name string) {
	files := smallFiles(f)
	f.Add(files[name])
	if b, ok := base[name]; ok {
		f.Add([]byte(b))
	}
	f.Add([]byte(examples[name[:len(name)-len(".csv")]]))
	for _, c := range badCases {
		if b, ok := c.files[name]; ok && b != del {
			f.Add([]byte(b))
		}
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		fsys := fstest.MapFS{}
		for k, v := range files {
			fsys[k] = &fstest.MapFile{Data: v}
		}
		fsys[name] = &fstest.MapFile{Data: data}
		s, p, err := ReadDir(fsys, ".")
		checkResult(t, s, p, err)
	})
}

func FuzzSiteSheet(f *testing.F)     { fuzzSheet(f, "site.csv") }
func FuzzBranchesSheet(f *testing.F) { fuzzSheet(f, "branches.csv") }
func FuzzValvesSheet(f *testing.F)   { fuzzSheet(f, "valves.csv") }
func FuzzPumpSheet(f *testing.F)     { fuzzSheet(f, "pump.csv") }
func FuzzReadingsSheet(f *testing.F) { fuzzSheet(f, "readings.csv") }
func FuzzStatesSheet(f *testing.F)   { fuzzSheet(f, "states.csv") }
func FuzzMovesSheet(f *testing.F)    { fuzzSheet(f, "moves.csv") }
func FuzzTargetsSheet(f *testing.F)  { fuzzSheet(f, "targets.csv") }

// FuzzRoundTrip reads a site, writes it back and reads it again: the
// second read must succeed and give the same site.
func FuzzRoundTrip(f *testing.F) {
	small := smallFiles(f)
	f.Add(small["site.csv"], small["branches.csv"], small["valves.csv"], small["readings.csv"], small["states.csv"], small["moves.csv"])
	f.Add([]byte(""), []byte(base["branches.csv"]), []byte(base["valves.csv"]), []byte(base["readings.csv"]), []byte(""), []byte(""))
	f.Add([]byte(examples["site"]), []byte(examples["branches"]), []byte(examples["valves"]), []byte(examples["readings"]), []byte(examples["states"]), []byte(examples["moves"]))
	for _, c := range badCases {
		f.Add([]byte(c.files["site.csv"]), []byte(c.files["branches.csv"]), []byte(c.files["valves.csv"]), []byte(c.files["readings.csv"]), []byte(c.files["states.csv"]), []byte(c.files["moves.csv"]))
	}
	f.Fuzz(func(t *testing.T, site, branches, valves, readings, states, moves []byte) {
		fsys := fstest.MapFS{
			"branches.csv": {Data: branches},
			"readings.csv": {Data: readings},
			"pump.csv":     {Data: small["pump.csv"]},
		}
		if len(site) > 0 {
			fsys["site.csv"] = &fstest.MapFile{Data: site}
		}
		if len(states) > 0 {
			fsys["states.csv"] = &fstest.MapFile{Data: states}
		}
		if len(moves) > 0 {
			fsys["moves.csv"] = &fstest.MapFile{Data: moves}
		}
		if len(valves) > 0 {
			fsys["valves.csv"] = &fstest.MapFile{Data: valves}
		}
		s1, p, err := ReadDir(fsys, ".")
		checkResult(t, s1, p, err)
		if err != nil {
			return
		}
		out := fstest.MapFS{}
		if err := WriteDir(s1, mapCreate(out)); err != nil {
			t.Fatalf("WriteDir: %v", err)
		}
		s2, p2, err := ReadDir(out, ".")
		if err != nil {
			t.Fatalf("reading back what was written: %v\nwritten branches:\n%s", p2.Errors(), out["branches.csv"].Data)
		}
		if diff := cmp.Diff(s1, s2, ignoreLines); diff != "" {
			t.Fatalf("round trip (-first +second):\n%s", diff)
		}
	})
}

// FuzzWorkbook feeds arbitrary bytes to the workbook reader, seeded with the
// fixture workbook: it must report, not panic.
func FuzzWorkbook(f *testing.F) {
	data, err := os.ReadFile("testdata/small.xlsx")
	if err != nil {
		f.Fatal(err)
	}
	f.Add(data)
	var buf bytes.Buffer
	if err := WriteTemplateWorkbook(&buf); err != nil {
		f.Fatal(err)
	}
	f.Add(buf.Bytes())
	f.Fuzz(func(t *testing.T, b []byte) {
		s, p, err := ReadWorkbook(bytes.NewReader(b), int64(len(b)), "f.xlsx")
		checkResult(t, s, p, err)
	})
}
