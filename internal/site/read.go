package site

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"path"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"syscall"

	"flowset/internal/fluid"
	"flowset/internal/units"
)

// ReadDir reads the site in folder dir of fsys: site.csv, branches.csv,
// valves.csv, pump.csv, readings.csv, states.csv and targets.csv (file names in any
// case). The Problems hold every error and warning found. The error is
// non-nil, and the Site nil, when the folder cannot be read or any problem
// is an error; it is then either an I/O error or Problems.Err().
func ReadDir(fsys fs.FS, dir string) (*Site, Problems, error) {
	return ReadDirContext(context.Background(), fsys, dir)
}

// ReadDirContext is ReadDir that stops, returning ctx's error, once ctx is
// done.
func ReadDirContext(ctx context.Context, fsys fs.FS, dir string) (*Site, Problems, error) {
	name := path.Base(dir)
	if name == "." || name == "/" {
		name = "site"
	}
	return readDir(ctx, fsys, dir, func(f string) string { return path.Join(dir, f) }, Source{Path: dir, Format: "csv"}, name)
}

// Limits on what a site may hold, so that a hostile or mistaken file cannot
// exhaust memory or time: each is far above what a survey needs (a site of
// 10,000 branches with a million readings fits in CSV sheets, with some
// 50,000 readings in a workbook), and each refusal names
// the file and the limit.
const (
	MaxSheetBytes    = 64 << 20 // one CSV sheet
	MaxLineBytes     = 1 << 20  // one line of a CSV sheet
	MaxCellBytes     = 32000    // one cell: below a spreadsheet's 32,767 characters, so a cell written back whole still fits
	MaxWorkbookBytes = 32 << 20 // an .xlsx workbook as stored
	MaxPartBytes     = 16 << 20 // one part of a workbook, unpacked (a tab of about 50,000 rows; reading it takes some 300 MB)
	MaxUnpackedBytes = 48 << 20 // all parts of a workbook, unpacked
	maxParts         = 4096     // parts in a workbook
)

// ErrNotSite is wrapped by Load's error when the path is neither a folder
// nor a workbook file.
var ErrNotSite = errors.New("want a folder of CSV sheets or an .xlsx workbook")

func mib(n int) string { return fmt.Sprintf("%d MiB", n>>20) }

func readDir(ctx context.Context, fsys fs.FS, dir string, label func(string) string, src Source, name string) (*Site, Problems, error) {
	entries, err := fs.ReadDir(fsys, dir)
	if err != nil {
		return nil, nil, fmt.Errorf("read site folder %s: %w", src.Path, err)
	}
	in := input{tables: map[string]*table{}, present: map[string]bool{}, src: src, name: name,
		label: func(sheet string) string { return label(sheet + ".csv") }}
	files := map[string]string{} // lower-case name -> name
	for _, e := range entries {
		if !strings.EqualFold(path.Ext(e.Name()), ".csv") {
			continue
		}
		if e.IsDir() {
			if isSheetName(e.Name()) {
				in.probs.add(&Error{File: label(e.Name()), Err: ErrSyntax, Msg: "is a folder, not a sheet", Want: "a CSV file"})
				in.present[strings.ToLower(strings.TrimSuffix(e.Name(), path.Ext(e.Name())))] = true
			}
			continue
		}
		if prev, dup := files[strings.ToLower(e.Name())]; dup {
			// Names differing only in case: which one is meant cannot be
			// told (and on some systems they are one file).
			in.probs.add(&Error{File: label(e.Name()), Err: ErrDuplicate, Msg: fmt.Sprintf("a second file for the sheet of %s", prev),
				Want: "one file per sheet: remove or rename one of them"})
			continue
		}
		files[strings.ToLower(e.Name())] = e.Name()
	}
	var known []string
	for _, sc := range sheets {
		known = append(known, sc.name+".csv")
		actual, ok := files[sc.name+".csv"]
		if !ok {
			continue
		}
		delete(files, sc.name+".csv")
		if err := ctx.Err(); err != nil {
			return nil, nil, err
		}
		in.present[sc.name] = true
		data, prob, err := readSheet(fsys, path.Join(dir, actual), label(actual))
		if err != nil {
			return nil, nil, err
		}
		if prob != nil {
			in.probs.add(prob)
			continue
		}
		t, p, err := decodeCSV(ctx, label(actual), data)
		if err != nil {
			return nil, nil, err
		}
		in.probs = append(in.probs, p...)
		in.tables[sc.name] = t
	}
	for _, lower := range sortedKeys(files) {
		f := files[lower]
		want := "one of: " + strings.Join(known, ", ")
		if s := suggest(f, known); s != "" {
			want = fmt.Sprintf("%q", s)
		}
		in.probs.add(&Error{File: label(f), Severity: SeverityWarning, Err: ErrUnknown, Msg: "unknown sheet, ignored", Want: want})
	}
	return in.finish(ctx)
}

// isSheetName reports whether file is one of the sheets' CSV names.
func isSheetName(file string) bool {
	for _, sc := range sheets {
		if strings.EqualFold(file, sc.name+".csv") {
			return true
		}
	}
	return false
}

// readSheet reads one CSV sheet, refusing (as a problem) anything but a
// regular file of at most MaxSheetBytes: a pipe would block for ever and
// a device read without end. The error is for an I/O failure.
func readSheet(fsys fs.FS, name, label string) ([]byte, *Error, error) {
	notFile := func(fi fs.FileInfo) *Error {
		what := "not a regular file"
		switch m := fi.Mode(); {
		case m.IsDir():
			what = "a folder"
		case m&fs.ModeNamedPipe != 0:
			what = "a named pipe"
		case m&fs.ModeSocket != 0:
			what = "a socket"
		case m&fs.ModeDevice != 0:
			what = "a device"
		}
		return &Error{File: label, Err: ErrSyntax, Msg: "is " + what + ", not a sheet, so it is not read", Want: "a CSV file"}
	}
	tooBig := &Error{File: label, Err: ErrRange, Msg: "file is larger than " + mib(MaxSheetBytes),
		Want: "a sheet of at most " + mib(MaxSheetBytes) + "; split the survey into several sites"}
	fi, err := fs.Stat(fsys, name)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			// A symbolic link to nothing.
			return nil, &Error{File: label, Err: ErrMissing, Msg: "cannot be opened: it is a link to nothing", Want: "a CSV file"}, nil
		}
		if errors.Is(err, syscall.ELOOP) {
			return nil, &Error{File: label, Err: ErrMissing, Msg: "cannot be opened: it is a link in a loop of links", Want: "a CSV file"}, nil
		}
		return nil, nil, fmt.Errorf("read %s: %w", label, err)
	}
	if !fi.Mode().IsRegular() {
		return nil, notFile(fi), nil
	}
	if fi.Size() > MaxSheetBytes {
		return nil, tooBig, nil
	}
	f, err := fsys.Open(name)
	if err != nil {
		return nil, nil, fmt.Errorf("read %s: %w", label, err)
	}
	defer f.Close()
	if fi, err := f.Stat(); err != nil {
		return nil, nil, fmt.Errorf("read %s: %w", label, err)
	} else if !fi.Mode().IsRegular() {
		return nil, notFile(fi), nil // replaced since the first look
	}
	data, err := io.ReadAll(io.LimitReader(f, MaxSheetBytes+1))
	if err != nil {
		return nil, nil, fmt.Errorf("read %s: %w", label, err)
	}
	if len(data) > MaxSheetBytes {
		return nil, tooBig, nil
	}
	return data, nil, nil
}

// Load reads a site from path: a folder of CSV files, or an .xlsx
// workbook. It is the only function of the package that uses the
// operating system's files. It stops, returning ctx's error, once ctx is
// done.
func Load(ctx context.Context, p string) (*Site, Problems, error) {
	fi, err := os.Stat(p)
	if err != nil {
		return nil, nil, fmt.Errorf("load site: %w", err)
	}
	if fi.IsDir() {
		name := filepath.Base(filepath.Clean(p))
		if abs, err := filepath.Abs(p); err == nil {
			name = filepath.Base(abs)
		}
		return readDir(ctx, os.DirFS(p), ".", func(f string) string { return filepath.Join(p, f) }, Source{Path: p, Format: "csv"}, Printable(name))
	}
	if !strings.EqualFold(filepath.Ext(p), ".xlsx") {
		return nil, nil, fmt.Errorf("load site %s: %w", Printable(p), ErrNotSite)
	}
	if !fi.Mode().IsRegular() {
		return nil, nil, fmt.Errorf("load site %s: not a regular file: %w", Printable(p), ErrNotSite)
	}
	if fi.Size() > MaxWorkbookBytes {
		probs := Problems{{File: p, Err: ErrRange, Msg: "workbook is larger than " + mib(MaxWorkbookBytes), Want: "a workbook of at most " + mib(MaxWorkbookBytes)}}
		return nil, probs, probs.Err()
	}
	f, err := os.Open(p)
	if err != nil {
		return nil, nil, fmt.Errorf("load site: %w", err)
	}
	defer f.Close()
	if fi, err = f.Stat(); err != nil {
		return nil, nil, fmt.Errorf("load site: %w", err)
	} else if !fi.Mode().IsRegular() || fi.Size() > MaxWorkbookBytes {
		return nil, nil, fmt.Errorf("load site %s: changed while being read", p)
	}
	return ReadWorkbookContext(ctx, f, fi.Size(), p)
}

// input is the sheets of a site as tables, whatever they were read from.
type input struct {
	tables  map[string]*table // nil for a sheet present but unreadable
	present map[string]bool
	label   func(sheet string) string
	src     Source
	name    string
	probs   Problems
}

func (in *input) finish(ctx context.Context) (*Site, Problems, error) {
	if err := ctx.Err(); err != nil {
		return nil, nil, err
	}
	s := in.build(ctx)
	if err := ctx.Err(); err != nil {
		return nil, nil, err
	}
	probs := in.probs
	probs.Sort()
	if err := probs.Err(); err != nil {
		return nil, probs, err
	}
	return s, probs, nil
}

// build turns the tables into a Site and checks references between sheets.
func (in *input) build(ctx context.Context) *Site {
	s := &Site{
		Name:               in.name,
		Fluid:              defaultFluid,
		Temperature:        defaultTemperature,
		Density:            nan,
		Viscosity:          nan,
		KinematicViscosity: nan,
		Hours:              defaultHours,
		EnergyPrice:        nan,
		PumpEfficiency:     defaultPumpEfficiency,
		MotorEfficiency:    defaultMotorEfficiency,
		ToleranceLow:       defaultToleranceLow,
		ToleranceHigh:      defaultToleranceHigh,
		Boundary:           Boundary{Kind: MeasuredDiff, Speed: 1, MaxSpeed: 1, SetPoint: nan, Sensor: defaultSensor},
		Source:             in.src,
	}
	if in.present[pumpColumns.name] {
		s.Boundary.Kind = PumpCurve
	}
	for _, sc := range []*schema{&branchColumns, &readingColumns} {
		if !in.present[sc.name] {
			in.probs.add(&Error{File: in.label(sc.name), Err: ErrMissing, Msg: "sheet is missing",
				Want: fmt.Sprintf("a %s sheet; see flowset help %s", sc.name, sc.name)})
		}
	}
	p := &in.probs
	var keys map[string]cellRef
	if t := in.tables[siteKeys.name]; t != nil {
		keys = readSiteSheet(t, s, p)
	}
	valves := valveCheck{present: in.present[valveColumns.name], usable: true}
	if t := in.tables[valveColumns.name]; t != nil {
		s.Valves, valves.bad, valves.usable = readValves(t, p)
	} else if valves.present {
		valves.usable = false
	}
	var brRefs []branchRefs
	if t := in.tables[branchColumns.name]; t != nil {
		s.Branches, brRefs = readBranches(t, p)
		checkBranches(s, brRefs, valves, p)
	}
	if ctx.Err() != nil {
		return s // finish returns ctx's error
	}
	if t := in.tables[pumpColumns.name]; t != nil {
		s.Pump = readPump(t, p)
	}
	if ctx.Err() != nil {
		return s // finish returns ctx's error
	}
	var labels map[string]bool // every state the readings sheet names; nil when it cannot be read
	if t := in.tables[readingColumns.name]; t != nil {
		s.Readings, labels = readReadings(t, s, len(s.Branches) > 0, valves, p)
	}
	if t := in.tables[stateColumns.name]; t != nil {
		s.States = readStates(t, s, labels, p)
	}
	if t := in.tables[moveColumns.name]; t != nil {
		s.Moves = readMoves(t, s, labels, valves, p)
	}
	if ctx.Err() != nil {
		return s // finish returns ctx's error
	}
	if t := in.tables[targetColumns.name]; t != nil {
		s.Targets = readTargets(t, s, len(s.Branches) > 0, p)
	}
	if ctx.Err() != nil {
		return s // finish returns ctx's error
	}
	checkSite(s, keys, in, brRefs)
	for _, t := range in.tables {
		if t != nil && t.columns != nil {
			if s.Source.Columns == nil {
				s.Source.Columns = map[string]map[string]int{}
			}
			s.Source.Columns[t.file] = t.columns
		}
	}
	return s
}

// readSiteSheet reads the key,value rows of the site sheet into s and
// returns where each key was given.
func readSiteSheet(t *table, s *Site, p *Problems) map[string]cellRef {
	given := map[string]cellRef{}
	rows := t.rows
	valueCol := 1
	if name, _, _ := splitUnit(t.header[0]); normWord(name) != "key" {
		// No header line: the first line is already a key.
		rows = append([]row{{line: t.headerLine, cells: t.header, raw: t.header}}, rows...)
	} else {
		for i, h := range t.header[1:] {
			switch normWord(h) {
			case "value":
				valueCol = i + 1
			case "note", "":
			default:
				p.add(&Error{File: t.file, Line: t.headerLine, Column: i + 2, Field: h, Severity: SeverityWarning,
					Err: ErrUnknown, Msg: "unknown column, ignored", Want: "key, value and note columns"})
			}
		}
	}
	set := map[string]float64{}
	words := map[string]string{}
	for _, r := range rows {
		key, unit, bracket := splitUnit(r.cell(0))
		kref := cellRef{file: t.file, line: r.line, col: 1, field: key}
		if ne := checkName(key); ne != nil {
			kref.value = r.cell(0)
			p.add(kref.problem(SeverityError, ne.err, ne.msg, ne.want))
			continue
		}
		c, _ := siteKeys.find(key)
		if c == nil {
			want := "one of: " + strings.Join(siteKeys.names(), ", ")
			if sg := suggest(key, siteKeys.names()); sg != "" {
				want = fmt.Sprintf("%q", sg)
			}
			p.add(kref.problem(SeverityWarning, ErrUnknown, "unknown key, ignored", want))
			continue
		}
		kref.field = c.name
		if prev, dup := given[c.name]; dup {
			p.add(kref.problem(SeverityError, ErrDuplicate, "key given twice", fmt.Sprintf("one %q line; the first is line %d", c.name, prev.line)))
			continue
		}
		vref := cellRef{file: t.file, line: r.line, col: valueCol + 1, field: c.name, value: r.cell(valueCol)}
		given[c.name] = vref
		u, ne, cause := resolveUnit(c, unit, bracket)
		if ne != nil {
			kref.value = unit
			e := kref.problem(SeverityError, ne.err, ne.msg, ne.want)
			e.Cause = cause
			p.add(e)
			continue
		}
		switch c.typ {
		case numCol:
			v, ne := parseNum(c, u, false, r.rawCell(valueCol), t.decimalComma)
			if ne != nil {
				p.add(vref.problem(SeverityError, ne.err, ne.msg, ne.want))
				continue
			}
			if !math.IsNaN(v) {
				set[c.name] = v
			}
		case wordCol:
			w, ne := parseWord(c.words, r.cell(valueCol))
			if ne != nil {
				p.add(vref.problem(SeverityError, ne.err, ne.msg, ne.want))
				continue
			}
			words[c.name] = w
		default:
			if ne := checkText(r.cell(valueCol)); ne != nil {
				p.add(vref.problem(SeverityError, ne.err, ne.msg, ne.want))
				continue
			}
			words[c.name] = r.cell(valueCol)
		}
	}
	num := func(name string, dst *float64) {
		if v, ok := set[name]; ok {
			*dst = v
		}
	}
	num("temperature", &s.Temperature)
	num("density", &s.Density)
	num("viscosity", &s.Viscosity)
	num("kinematic viscosity", &s.KinematicViscosity)
	num("speed", &s.Boundary.Speed)
	num("max speed", &s.Boundary.MaxSpeed)
	num("set point", &s.Boundary.SetPoint)
	num("static lift", &s.StaticLift)
	num("outlet pressure", &s.OutletPressure)
	num("hours", &s.Hours)
	num("energy price", &s.EnergyPrice)
	num("pump efficiency", &s.PumpEfficiency)
	num("motor efficiency", &s.MotorEfficiency)
	num("tolerance low", &s.ToleranceLow)
	num("tolerance high", &s.ToleranceHigh)
	if v, ok := set["glycol"]; ok {
		s.GlycolPercent = v * 100
	}
	if w := words["name"]; w != "" {
		s.Name = w
	}
	if w := words["fluid"]; w != "" {
		s.Fluid = w
	}
	if w := words["header"]; w != "" {
		s.Header = Arrangement(slices.Index(arrangementWords, w))
	}
	if w := words["boundary"]; w != "" {
		s.Boundary.Kind = BoundaryKind(slices.Index(boundaryWords, w))
	}
	if w := words["sensor"]; w != "" {
		s.Boundary.Sensor = w
		if strings.EqualFold(w, AtPump) {
			s.Boundary.Sensor = AtPump
		}
	}
	s.Currency = words["currency"]
	s.Units = words["units"]
	s.PumpSeries = words["pump arrangement"] == "series"
	if v, ok := set["pumps running"]; ok {
		if n, good := wholeCount(given["pumps running"], v, p); good {
			s.PumpsRunning = n
		}
	}
	return given
}

// wholeCount returns v as a count of pumps, reporting a fraction at ref.
func wholeCount(ref cellRef, v float64, p *Problems) (int, bool) {
	if v != math.Trunc(v) {
		p.add(ref.problem(SeverityError, ErrRange, "not a whole number of pumps", "a count such as 1 or 2"))
		return 0, false
	}
	return int(v), true
}

// branchRefs keeps where a branch's references were written.
type branchRefs struct {
	id, parent, valve, setting, supply, controller cellRef
	bypass, bypassSetting                          cellRef
}

func readBranches(t *table, p *Problems) ([]Branch, []branchRefs) {
	sr := bind(t, &branchColumns, p)
	var out []Branch
	var refs []branchRefs
	// idLine is where an id was first given, keyed by idKey.
	type idLine struct {
		id   string
		line int
	}
	first := map[string]idLine{}
	for _, r := range t.rows {
		ok := true
		b := Branch{Pos: Pos{File: t.file, Line: r.line}}
		idOK := true
		b.ID = sr.text(r, "id", &idOK)
		b.Parent = sr.text(r, "parent", &ok)
		b.DesignFlow = sr.need(r, "design flow", &ok)
		b.PipeStandard = sr.text(r, "pipe standard", &ok)
		b.PipeSize = sr.text(r, "pipe size", &ok)
		var boreOK, hboreOK bool
		b.PipeBore, boreOK = sr.num(r, "pipe bore")
		b.PipeLength = sr.numOr(r, "pipe length", 0, &ok)
		b.Roughness, _ = sr.num(r, "roughness")
		b.FittingsK = sr.numOr(r, "fittings k", 0, &ok)
		b.TerminalDrop = sr.numOr(r, "terminal drop", 0, &ok)
		b.TerminalFlow, _ = sr.num(r, "terminal flow")
		b.Valve = sr.text(r, "valve", &ok)
		b.Setting, _ = sr.num(r, "setting")
		b.ControlKvs = sr.numOr(r, "control kvs", 0, &ok)
		b.Controller.SetPoint = sr.numOr(r, "controller set point", 0, &ok)
		b.Controller.Kvs = sr.numOr(r, "controller kvs", 0, &ok)
		b.Controller.Min = sr.numOr(r, "controller min", 0, &ok)
		b.Controller.Max = sr.numOr(r, "controller max", 0, &ok)
		b.Controller.Senses = sr.word(r, "controller senses", &ok)
		b.BypassValve = sr.text(r, "bypass valve", &ok)
		b.BypassSetting, _ = sr.num(r, "bypass setting")
		b.SupplyLength = sr.numOr(r, "supply length", 0, &ok)
		b.ReturnLength = sr.numOr(r, "return length", 0, &ok)
		b.HeaderStandard = sr.text(r, "header standard", &ok)
		b.HeaderSize = sr.text(r, "header size", &ok)
		b.HeaderBore, hboreOK = sr.num(r, "header bore")
		b.HeaderK = sr.numOr(r, "header k", 0, &ok)
		b.HeaderRoughness, _ = sr.num(r, "header roughness")
		b.SupplyK = sr.numOr(r, "supply k", 0, &ok)
		b.ReturnK = sr.numOr(r, "return k", 0, &ok)
		b.ReturnStandard = sr.text(r, "return standard", &ok)
		b.ReturnSize = sr.text(r, "return size", &ok)
		var rboreOK bool
		b.ReturnBore, rboreOK = sr.num(r, "return bore")
		b.ReturnRoughness, _ = sr.num(r, "return roughness")
		b.Note = sr.text(r, "note", &ok)
		ref := branchRefs{id: sr.ref(r, "id"), parent: sr.ref(r, "parent"), valve: sr.ref(r, "valve"),
			setting: sr.ref(r, "setting"), supply: sr.ref(r, "supply length"), controller: sr.ref(r, "controller set point"),
			bypass: sr.ref(r, "bypass valve"), bypassSetting: sr.ref(r, "bypass setting")}
		switch {
		case !sr.has("id") || !idOK:
			continue
		case b.ID == "":
			p.add(ref.id.problem(SeverityError, ErrMissing, "blank", "a unique branch id"))
			continue
		case strings.EqualFold(b.ID, AtPump) || strings.EqualFold(b.ID, AtHeader):
			p.add(ref.id.problem(SeverityError, ErrRange, "pump and header are reserved names", "another branch id"))
			continue
		}
		if prev, dup := first[idKey(b.ID)]; dup {
			if prev.id == b.ID {
				p.add(ref.id.problem(SeverityError, ErrDuplicate, "branch id given twice", fmt.Sprintf("a unique id; the first is on line %d", prev.line)))
			} else {
				msg, want := sameIDMsg("branch id", b.ID, prev.id, prev.line)
				p.add(ref.id.problem(SeverityError, ErrDuplicate, msg, want))
			}
			continue
		}
		first[idKey(b.ID)] = idLine{b.ID, r.line}
		if b.PipeLength > 0 && boreOK && math.IsNaN(b.PipeBore) && (b.PipeStandard == "" || b.PipeSize == "") {
			p.add(sr.ref(r, "pipe size").problem(SeverityError, ErrMissing, "pipe length given without the pipe's size",
				"a pipe standard and size, or a pipe bore"))
			ok = false
		}
		if hboreOK && rboreOK {
			ownReturn := b.ReturnStandard != "" || b.ReturnSize != "" || !math.IsNaN(b.ReturnBore)
			supplyBare := b.SupplyLength > 0 && !b.SupplyLeg().Sized()
			returnBare := b.ReturnLength > 0 && !b.ReturnLeg().Sized()
			switch {
			case supplyBare || returnBare && !ownReturn:
				p.add(sr.ref(r, "header size").problem(SeverityError, ErrMissing, "header length given without the header's size",
					"a header standard and size, or a header bore"))
				ok = false
			case returnBare && b.ReturnSize != "":
				p.add(sr.ref(r, "return size").problem(SeverityError, ErrMissing, "return size given without a pipe standard",
					"a return or header standard to look the size up in, or a return bore"))
				ok = false
			case returnBare:
				p.add(sr.ref(r, "return size").problem(SeverityError, ErrMissing, "return length given without the return leg's size",
					"a return size with a header or return standard, or a return bore"))
				ok = false
			}
		}
		if !math.IsNaN(b.Setting) && b.Valve == "" {
			p.add(ref.setting.problem(SeverityError, ErrMissing, "setting given for a branch without a valve",
				"a valve model in the valve column, or no setting"))
			ok = false
		}
		checkController(sr, r, &b, p)
		_ = ok // the branch is kept so references to it still resolve
		out = append(out, b)
		refs = append(refs, ref)
	}
	if sr.has("id") && sr.has("design flow") && len(t.rows) == 0 {
		p.add(&Error{File: t.file, Line: t.headerLine, Err: ErrMissing, Msg: "no branches listed", Want: "one row per branch below the header"})
	}
	return out, refs
}

// checkController checks a branch's controller columns against each other;
// checkBranches checks that it sits on a riser.
func checkController(sr *sheetReader, r row, b *Branch, p *Problems) {
	c := b.Controller
	given := c.Kvs > 0 || c.Min > 0 || c.Max > 0 || c.Senses != ""
	switch {
	case !c.Has() && given:
		p.add(sr.ref(r, "controller set point").problem(SeverityError, ErrMissing, "controller columns given without its set point",
			"the differential the controller holds, or none of the controller columns"))
	case c.Has() && !(c.Kvs > 0):
		p.add(sr.ref(r, "controller kvs").problem(SeverityError, ErrMissing, "differential controller without its valve's Kvs",
			"the Kvs of the controller's valve wide open (or a controller cvs column)"))
	case c.Has() && c.Min > 0 && c.Max > 0 && !(c.Min < c.Max):
		p.add(sr.ref(r, "controller max").problem(SeverityError, ErrRange, "controller max not above controller min",
			"the highest set point the controller can be given, above its lowest"))
	case c.Has() && (c.Min > 0 && c.SetPoint < c.Min || c.Max > 0 && c.SetPoint > c.Max):
		lo, hi := c.Range()
		p.add(sr.ref(r, "controller set point").problem(SeverityError, ErrRange, "set point outside the controller's range",
			fmt.Sprintf("a set point from %s to %s kPa, or the range as found on the controller", fmtNum(lo/1e3), fmtNum(hi/1e3))))
	}
}

// valveCheck tells how far the valves sheet can be trusted for checks.
type valveCheck struct {
	present bool            // the sheet exists
	usable  bool            // its columns could be read
	bad     map[string]bool // models whose definition has an error
}

// check reports whether settings of model name can be checked.
func (vc valveCheck) check(name string) bool { return vc.usable && !vc.bad[name] }

// checkBranches checks parents, loops among parents and valve references.
func checkBranches(s *Site, refs []branchRefs, valves valveCheck, p *Problems) {
	ids := make([]string, len(s.Branches))
	index := map[string]int{}
	for i, b := range s.Branches {
		ids[i] = b.ID
		index[b.ID] = i
	}
	parentOK := make([]bool, len(s.Branches))
	for i, b := range s.Branches {
		if b.Parent == "" {
			continue
		}
		if _, ok := index[b.Parent]; !ok {
			p.add(refs[i].parent.problem(SeverityError, ErrReference, "no branch has this id",
				refWant("the id of the riser in this sheet, or blank", b.Parent, ids)))
			continue
		}
		parentOK[i] = true
	}
	// Each branch has at most one parent, so following parents from any
	// branch either reaches the headers or runs into a loop.
	state := make([]int, len(s.Branches)) // 0 new, 1 on the current path, 2 done
	for start := range s.Branches {
		var path []int
		i := start
		for state[i] == 0 {
			state[i] = 1
			path = append(path, i)
			if !parentOK[i] {
				break
			}
			i = index[s.Branches[i].Parent]
		}
		if state[i] == 1 && parentOK[path[len(path)-1]] {
			k := slices.Index(path, i)
			loop := path[k:]
			first := slices.Min(loop)
			names := []string{}
			// Name the loop from its first row so the message is the same
			// whichever branch the search started from.
			j := first
			for range loop {
				names = append(names, s.Branches[j].ID)
				j = index[s.Branches[j].Parent]
			}
			names = append(names, s.Branches[first].ID)
			msg := "branches in a loop: " + strings.Join(names, " -> ")
			if len(loop) == 1 {
				msg = "branch hangs from itself"
			}
			p.add(refs[first].parent.problem(SeverityError, ErrReference, msg, "a chain of parents that ends at a branch on the main headers"))
		}
		for _, j := range path {
			state[j] = 2
		}
	}
	hasChild := make([]bool, len(s.Branches))
	for i, b := range s.Branches {
		if parentOK[i] {
			hasChild[index[b.Parent]] = true
		}
	}
	for i, b := range s.Branches {
		if b.Controller.Has() && !hasChild[i] {
			p.add(refs[i].controller.problem(SeverityError, ErrReference, "a differential controller on a branch that no branch hangs from",
				"a controller only on a riser or branch group (branches naming it as their parent), or no set point"))
		}
	}
	var names []string
	for _, v := range s.Valves {
		names = append(names, v.Name)
	}
	// model returns the valve model a branch names, or says at ref that no
	// such model is defined.
	model := func(name string, ref cellRef) *ValveModel {
		v := s.Valve(name)
		if v == nil {
			want := refWant("a model defined in the valves sheet", name, names)
			if !valves.present {
				want = "a valves sheet defining this model"
			}
			p.add(ref.problem(SeverityError, ErrReference, "valve model not defined", want))
		}
		return v
	}
	for i, b := range s.Branches {
		if b.BypassValve == "" {
			if !math.IsNaN(b.BypassSetting) && b.BypassSetting != 0 {
				p.add(refs[i].bypassSetting.problem(SeverityError, ErrMissing, "a bypass setting without a bypass valve", "a bypass valve model, or no bypass setting"))
			}
			continue
		}
		if len(hasChildOf(s, i)) > 0 {
			p.add(refs[i].bypass.problem(SeverityError, ErrRange, "a bypass on a riser", "a three-port bypass only on a terminal branch"))
			continue
		}
		if valves.present && !valves.usable {
			continue
		}
		v := model(b.BypassValve, refs[i].bypass)
		if v == nil {
			continue
		}
		if v.PressureIndependent() {
			p.add(refs[i].bypass.problem(SeverityError, ErrRange, "a pressure-independent valve in a bypass", "a regulating valve with a Kv table or characteristic"))
			continue
		}
		if !valves.check(v.Name) {
			continue
		}
		if e := checkSetting(v, b.BypassSetting, refs[i].bypassSetting); e != nil {
			p.add(e)
		}
	}
	for i, b := range s.Branches {
		if b.Valve == "" || valves.present && !valves.usable {
			continue
		}
		v := model(b.Valve, refs[i].valve)
		if v == nil {
			continue
		}
		if !valves.check(v.Name) {
			continue
		}
		if e := checkSetting(v, b.Setting, refs[i].setting); e != nil {
			p.add(e)
		}
	}
}

// checkSetting checks that a setting lies within the valve's range.
func checkSetting(v *ValveModel, setting float64, ref cellRef) *Error {
	if math.IsNaN(setting) {
		return nil
	}
	lo, hi := v.Range()
	if setting >= lo && setting <= hi {
		return nil
	}
	return ref.problem(SeverityError, ErrRange, fmt.Sprintf("outside the range of valve %q", v.Name),
		fmt.Sprintf("a setting from %s to %s %s", fmtNum(lo), fmtNum(hi), v.Unit))
}

func fmtNum(x float64) string { return strconv.FormatFloat(x, 'g', 6, 64) }

// readValves returns the valve models and the names of those whose
// definition has an error; usable is false when the sheet's columns are.
func readValves(t *table, p *Problems) (models []ValveModel, bad map[string]bool, usable bool) {
	sr := bind(t, &valveColumns, p)
	bad = map[string]bool{}
	if !sr.has("model") || len(sr.broken) > 0 {
		return nil, bad, false
	}
	type attr struct {
		v    float64
		w    string
		line int
	}
	type build struct {
		m        ValveModel
		attrs    map[string]attr
		setRefs  []cellRef
		kvRefs   []cellRef
		mfRefs   []cellRef
		kvRows   int // rows of setting and kv without max flow
		charRef  cellRef
		modelRef cellRef
		bad      bool
	}
	var order []string
	byName := map[string]*build{}
	folded := map[string]*build{} // by idKey
	for _, r := range t.rows {
		ok := true
		name := sr.text(r, "model", &ok)
		mref := sr.ref(r, "model")
		if name == "" {
			if ok {
				p.add(mref.problem(SeverityError, ErrMissing, "blank", "the valve model this row belongs to"))
			}
			continue
		}
		b := byName[name]
		if b == nil {
			if other, ok := folded[idKey(name)]; ok {
				msg, want := sameIDMsg("valve model", name, other.m.Name, other.m.Pos.Line)
				p.add(mref.problem(SeverityError, ErrDuplicate, msg, want))
				continue
			}
			b = &build{m: ValveModel{Name: name, Pos: Pos{File: t.file, Line: r.line}, Kvs: nan, Rangeability: nan, Step: nan, MinDiff: nan},
				attrs: map[string]attr{}, modelRef: mref}
			b.m.HoldDiff = nan
			byName[name] = b
			folded[idKey(name)] = b
			order = append(order, name)
		}
		// Model-wide attributes may sit on any row of the model, once.
		same := func(col string, a attr) {
			if prev, seen := b.attrs[col]; seen {
				if prev.v != a.v && !(math.IsNaN(prev.v) && math.IsNaN(a.v)) || prev.w != a.w {
					p.add(sr.ref(r, col).problem(SeverityError, ErrDuplicate, fmt.Sprintf("differs from line %d for the same model", prev.line),
						"one value per model"))
					b.bad = true
				}
				return
			}
			b.attrs[col] = a
		}
		if w := sr.word(r, "setting unit", &ok); w != "" {
			same("setting unit", attr{w: w, line: r.line})
		}
		for _, col := range []string{"step", "min diff", "kvs", "rangeability", "hold diff"} {
			if v, good := sr.num(r, col); !good {
				b.bad = true
			} else if !math.IsNaN(v) {
				same(col, attr{v: v, line: r.line})
			}
		}
		if w := sr.word(r, "characteristic", &ok); w != "" {
			same("characteristic", attr{w: w, line: r.line})
			b.charRef = sr.ref(r, "characteristic")
		}
		set, good1 := sr.num(r, "setting")
		kv, good2 := sr.num(r, "kv")
		mf, good3 := sr.num(r, "max flow")
		if !ok || !good1 || !good2 || !good3 {
			b.bad = true
			continue
		}
		switch {
		case !math.IsNaN(mf) && math.IsNaN(set):
			p.add(sr.ref(r, "setting").problem(SeverityError, ErrMissing, "max flow without a setting", "the setting this max flow belongs to"))
			b.bad = true
		case !math.IsNaN(mf):
			// A pressure-independent valve's row: the kv, when given,
			// is the valve's below its hold differential.
			b.m.Settings = append(b.m.Settings, set)
			b.m.Kv = append(b.m.Kv, kv)
			b.m.MaxFlow = append(b.m.MaxFlow, mf)
			b.setRefs = append(b.setRefs, sr.ref(r, "setting"))
			b.kvRefs = append(b.kvRefs, sr.ref(r, "kv"))
			b.mfRefs = append(b.mfRefs, sr.ref(r, "max flow"))
		case math.IsNaN(set) && math.IsNaN(kv):
		case math.IsNaN(kv):
			p.add(sr.ref(r, "kv").problem(SeverityError, ErrMissing, "setting without a kv", "the kv at that setting"))
			b.bad = true
		case math.IsNaN(set):
			p.add(sr.ref(r, "setting").problem(SeverityError, ErrMissing, "kv without a setting", "the setting this kv belongs to"))
			b.bad = true
		default:
			b.m.Settings = append(b.m.Settings, set)
			b.m.Kv = append(b.m.Kv, kv)
			b.setRefs = append(b.setRefs, sr.ref(r, "setting"))
			b.kvRefs = append(b.kvRefs, sr.ref(r, "kv"))
			b.kvRows++
		}
	}
	for _, name := range order {
		b := byName[name]
		m := &b.m
		m.Unit = b.attrs["setting unit"].w
		m.Characteristic = b.attrs["characteristic"].w
		get := func(col string, def float64) float64 {
			if a, ok := b.attrs[col]; ok {
				return a.v
			}
			return def
		}
		m.MinDiff = get("min diff", defaultMinDiff)
		m.HoldDiff = get("hold diff", nan)
		switch {
		case b.bad:
			// Already reported; the model is kept so references resolve.
		case len(m.MaxFlow) > 0:
			if !checkFlowTable(m, b.kvRows, b.setRefs, b.kvRefs, b.mfRefs, b.modelRef,
				func(col string) bool { _, ok := b.attrs[col]; return ok }, p) {
				b.bad = true
			}
		case !math.IsNaN(m.HoldDiff):
			p.add(b.modelRef.problem(SeverityError, ErrMissing, "hold diff given for a valve without max flow rows",
				"setting and max flow rows for a pressure-independent valve, or no hold diff"))
			b.bad = true
		case m.Characteristic != "" && len(m.Settings) > 0:
			p.add(b.charRef.problem(SeverityError, ErrDuplicate, "model has both a kv table and a characteristic",
				"either setting and kv rows or one characteristic"))
			b.bad = true
		case m.Characteristic != "":
			if m.Unit == "" {
				m.Unit = "%"
			}
			if m.Unit != "%" {
				p.add(b.charRef.problem(SeverityError, ErrRange, "a characteristic takes its setting as % of travel", "setting unit %"))
				b.bad = true
			}
			m.Kvs = get("kvs", nan)
			m.Rangeability = get("rangeability", defaultRangeability)
			if math.IsNaN(m.Kvs) {
				p.add(b.charRef.problem(SeverityError, ErrMissing, "characteristic without kvs", "the valve's kvs"))
				b.bad = true
			}
		default:
			if m.Unit == "" {
				m.Unit = "turns"
			}
			if _, ok := b.attrs["kvs"]; ok {
				p.add(b.modelRef.problem(SeverityError, ErrMissing, "kvs given without a characteristic",
					"a characteristic (linear, equal-percentage or quick-opening) with the kvs"))
				b.bad = true
			}
			m.Kvs = get("kvs", nan)
			m.Rangeability = get("rangeability", nan)
			if !b.bad && !checkTable(m, b.setRefs, b.kvRefs, b.modelRef, p) {
				b.bad = true
			}
		}
		if m.Unit == "" {
			m.Unit = "turns"
		}
		m.Step = get("step", defaultStep(m.Unit))
		if b.bad {
			bad[name] = true
		}
		models = append(models, *m)
	}
	return models, bad, true
}

// checkFlowTable checks a pressure-independent valve's table: no Kv rows
// or characteristic beside it, a hold differential, two points at least,
// settings rising down the sheet and the flow held rising with them, and any
// Kv given above 0.
func checkFlowTable(m *ValveModel, kvRows int, setRefs, kvRefs, mfRefs []cellRef, modelRef cellRef, given func(col string) bool, p *Problems) bool {
	ok := true
	if kvRows > 0 {
		p.add(modelRef.problem(SeverityError, ErrDuplicate, "model has rows with a max flow and rows without",
			"a max flow on every setting row of a pressure-independent valve"))
		return false
	}
	if m.Characteristic != "" {
		p.add(modelRef.problem(SeverityError, ErrDuplicate, "model has both max flow rows and a characteristic",
			"either setting and max flow rows or one characteristic"))
		ok = false
	}
	for _, col := range []string{"kvs", "rangeability"} {
		if given(col) {
			p.add(modelRef.problem(SeverityError, ErrDuplicate, col+" given for a pressure-independent valve",
				"setting, max flow and hold diff (kv optional on each row)"))
			ok = false
		}
	}
	if math.IsNaN(m.HoldDiff) {
		p.add(modelRef.problem(SeverityError, ErrMissing, "pressure-independent valve without a hold diff",
			"the least differential across it at which it holds its flow, e.g. 20 kPa"))
		ok = false
	}
	if len(m.Settings) < 2 {
		p.add(modelRef.problem(SeverityError, ErrMissing, "max flow table has one point", "at least two settings with their max flow"))
		return false
	}
	for i, kv := range m.Kv {
		if kv == 0 {
			p.add(kvRefs[i].problem(SeverityError, ErrRange, "kv 0 is a shut valve, which cannot be modelled", "a kv above 0, or blank"))
			ok = false
		}
	}
	for i := 1; i < len(m.Settings); i++ {
		if m.Settings[i] <= m.Settings[i-1] {
			p.add(setRefs[i].problem(SeverityError, ErrRange, "settings must rise down the table",
				fmt.Sprintf("a setting above %s (line %d)", fmtNum(m.Settings[i-1]), setRefs[i-1].line)))
			ok = false
			continue
		}
		if m.MaxFlow[i] <= m.MaxFlow[i-1] {
			p.add(mfRefs[i].problem(SeverityError, ErrRange, "max flow does not rise with the setting",
				fmt.Sprintf("a max flow above line %d's", mfRefs[i-1].line)))
			ok = false
		}
	}
	if m.Unit == "%" && m.Settings[len(m.Settings)-1] > 100 {
		p.add(setRefs[len(setRefs)-1].problem(SeverityError, ErrRange, "setting above 100 %", "a setting from 0 to 100 %"))
		ok = false
	}
	if ok && !math.IsNaN(m.HoldDiff) {
		// The Kv below the hold differential must not fall as the
		// setting rises: a blank is the Kv that passes the row's flow at
		// the hold differential (IEC 60534-2-1 with water at its
		// reference density: Kv = Q √(1 bar / Δp), Q in m3/h).
		prev, prevLine := 0.0, 0
		for i, kv := range m.Kv {
			given := !math.IsNaN(kv)
			if !given {
				kv = m.MaxFlow[i] * 3600 * math.Sqrt(1e5/m.HoldDiff)
			}
			if kv < prev*(1-1e-9) {
				ref, what := kvRefs[i], "kv falls as the setting rises"
				if !given {
					ref, what = mfRefs[i], fmt.Sprintf("the Kv this max flow gives at the hold diff (%s) is below line %d's kv", fmtNum(kv), prevLine)
				}
				p.add(ref.problem(SeverityError, ErrRange, what, fmt.Sprintf("a kv of at least %s (line %d), or kv blank on every row", fmtNum(prev), prevLine)))
				ok = false
				break
			}
			prev, prevLine = kv, setRefs[i].line
		}
	}
	return ok
}

// checkTable checks a valve's Kv table: two points at least, settings
// rising down the sheet, Kv rising with setting.
func checkTable(m *ValveModel, setRefs, kvRefs []cellRef, modelRef cellRef, p *Problems) bool {
	switch len(m.Settings) {
	case 0:
		p.add(modelRef.problem(SeverityError, ErrMissing, "valve has no kv table and no characteristic",
			"setting and kv rows, or a characteristic with kvs"))
		return false
	case 1:
		p.add(modelRef.problem(SeverityError, ErrMissing, "kv table has one point",
			"at least two settings with their kv"))
		return false
	}
	ok := true
	for i, kv := range m.Kv {
		// A shut position passes no water at any differential: the
		// network model has no finite resistance for it.
		if kv == 0 {
			p.add(kvRefs[i].problem(SeverityError, ErrRange, "kv 0 is a shut valve, which cannot be modelled",
				"a kv above 0: start the table at the first setting that passes water"))
			ok = false
		}
	}
	for i := 1; i < len(m.Settings); i++ {
		if m.Settings[i] <= m.Settings[i-1] {
			p.add(setRefs[i].problem(SeverityError, ErrRange, "settings must rise down the table",
				fmt.Sprintf("a setting above %s (line %d)", fmtNum(m.Settings[i-1]), setRefs[i-1].line)))
			ok = false
			continue
		}
		switch {
		case m.Kv[i] < m.Kv[i-1]:
			p.add(kvRefs[i].problem(SeverityError, ErrRange, "kv falls as the setting rises",
				fmt.Sprintf("a kv of at least %s (line %d)", fmtNum(m.Kv[i-1]), kvRefs[i-1].line)))
			ok = false
		case m.Kv[i] == m.Kv[i-1]:
			p.add(kvRefs[i].problem(SeverityWarning, ErrRange, "kv the same as at the setting before",
				"a kv that rises with the setting; settings in between cannot be told apart"))
		}
	}
	if m.Unit == "%" && m.Settings[len(m.Settings)-1] > 100 {
		ref := setRefs[len(setRefs)-1]
		p.add(ref.problem(SeverityError, ErrRange, "setting above 100 %", "a setting from 0 to 100 %"))
		ok = false
	}
	return ok
}

func readPump(t *table, p *Problems) []PumpPoint {
	sr := bind(t, &pumpColumns, p)
	if !sr.has("flow") || !sr.has("head") {
		return nil
	}
	if len(t.rows) == 0 {
		// A header with no rows, as 'flowset template' writes it, is a
		// pump sheet not filled in: the site has no pump curve.
		return nil
	}
	var out []PumpPoint
	// Per pump id (folded as ids are): its first row, its last point and
	// its own speed, for the checks between rows of one pump.
	type pumpSeen struct {
		id        string
		line, n   int
		last      PumpPoint
		speed     float64
		speedLine int
	}
	seen := map[string]*pumpSeen{}
	var order []string
	firstNamed := 0 // 0 no row yet, 1 rows without ids, 2 rows with ids
	for _, r := range t.rows {
		ok := true
		pt := PumpPoint{Pos: Pos{File: t.file, Line: r.line}, Speed: nan, Efficiency: nan}
		idOK := true
		pt.Pump = sr.text(r, "pump", &idOK)
		pt.Flow = sr.need(r, "flow", &ok)
		pt.Head = sr.need(r, "head", &ok)
		var speedOK bool
		pt.Speed, speedOK = sr.num(r, "speed")
		var effOK bool
		pt.Efficiency, effOK = sr.num(r, "efficiency")
		sr.text(r, "note", &ok)
		if !ok || !idOK || !speedOK || !effOK {
			continue
		}
		// The first usable row says whether the pumps are named.
		if firstNamed == 0 {
			firstNamed = 1
			if pt.Pump != "" {
				firstNamed = 2
			}
		}
		if named := pt.Pump != ""; named != (firstNamed == 2) {
			ref := sr.ref(r, "pump")
			if named {
				p.add(ref.problem(SeverityError, ErrMissing, "a pump id where earlier rows have none",
					"an id on every row (several pumps), or on none (one pump)"))
			} else {
				p.add(ref.problem(SeverityError, ErrMissing, "blank", "the id of the pump this point belongs to; other rows name their pump"))
			}
			continue
		}
		if strings.EqualFold(pt.Pump, AtPump) || strings.EqualFold(pt.Pump, AtHeader) {
			p.add(sr.ref(r, "pump").problem(SeverityError, ErrRange, "pump and header are reserved names", "another pump id, e.g. P1"))
			continue
		}
		key := idKey(pt.Pump)
		ps, found := seen[key]
		if !found {
			ps = &pumpSeen{id: pt.Pump, line: r.line, speed: nan}
			seen[key] = ps
			order = append(order, key)
		} else if ps.id != pt.Pump {
			msg, want := sameIDMsg("pump id", pt.Pump, ps.id, ps.line)
			p.add(sr.ref(r, "pump").problem(SeverityError, ErrDuplicate, msg, want))
			continue
		}
		if !math.IsNaN(pt.Speed) {
			if !math.IsNaN(ps.speed) && ps.speed != pt.Speed {
				p.add(sr.ref(r, "speed").problem(SeverityError, ErrRange, "a second speed for this pump",
					fmt.Sprintf("the speed given on line %d, %s, or blank", ps.speedLine, fmtNum(ps.speed))))
				continue
			}
			ps.speed, ps.speedLine = pt.Speed, r.line
		}
		if ps.n > 0 {
			prev := ps.last
			if pt.Flow <= prev.Flow {
				p.add(sr.ref(r, "flow").problem(SeverityError, ErrRange, "flows must rise down the curve",
					fmt.Sprintf("a flow above line %d's", prev.Pos.Line)))
				continue
			}
			if pt.Head > prev.Head {
				p.add(sr.ref(r, "head").problem(SeverityWarning, ErrRange, "head rises with flow",
					fmt.Sprintf("a head at or below line %d's, unless the curve really droops", prev.Pos.Line)))
			}
		}
		ps.n++
		ps.last = pt
		out = append(out, pt)
	}
	// A pump's speed given on one of its rows holds for all of them.
	for i := range out {
		if ps := seen[idKey(out[i].Pump)]; ps != nil {
			out[i].Speed = ps.speed
		}
	}
	// The model fits a quadratic head curve, which takes three points.
	if len(sr.broken) == 0 {
		if len(order) == 0 {
			order = []string{""}
			seen[""] = &pumpSeen{}
		}
		for _, key := range order {
			ps := seen[key]
			if ps.n >= 3 {
				continue
			}
			msg := "pump curve has no usable points"
			switch ps.n {
			case 1:
				msg = "pump curve has only one usable point"
			case 2:
				msg = "pump curve has only two usable points"
			}
			if ps.id != "" {
				msg = fmt.Sprintf("pump %s: %s", Printable(ps.id), msg)
			}
			p.add(&Error{File: t.file, Line: t.headerLine, Err: ErrMissing, Msg: msg,
				Want: "at least three flow and head points, for the quadratic fit of the curve"})
		}
	}
	return out
}

// readReadings returns the readings and the label of every state a row
// names, whether or not the row could be read, for the states sheet to
// refer to.
func readReadings(t *table, s *Site, haveBranches bool, valves valveCheck, p *Problems) ([]Reading, map[string]bool) {
	sr := bind(t, &readingColumns, p)
	if !sr.has("where") || !sr.has("quantity") || !sr.has("value") || sr.broken["state"] {
		return nil, nil
	}
	labels := map[string]bool{}
	ids := make([]string, len(s.Branches))
	byID := make(map[string]*Branch, len(s.Branches))
	for i := range s.Branches {
		ids[i] = s.Branches[i].ID
		byID[ids[i]] = &s.Branches[i]
	}
	out := make([]Reading, 0, len(t.rows))
	type moved struct {
		setting float64
		line    int
	}
	settings := map[[2]string]moved{} // state, branch -> the setting first given
	type position struct {
		bypass bool
		line   int
	}
	positions := map[[2]string]position{} // state, three-port branch -> its position first given
	// The ids of several pumps, folded as ids are, which a reading may
	// name for one pump's differential, flow or speed.
	pumpIDs := map[string]string{}
	if ps := s.Pumps(); len(ps) > 1 {
		for _, id := range ps {
			pumpIDs[idKey(id)] = id
		}
	}
	for _, r := range t.rows {
		ok := true
		rd := Reading{Pos: Pos{File: t.file, Line: r.line}, Setting: nan, Sigma: nan}
		rd.State = strings.ToLower(sr.text(r, "state", &ok))
		if rd.State == "" {
			rd.State = defaultState
		}
		if ok {
			labels[rd.State] = true
		}
		rd.Where = sr.text(r, "where", &ok)
		if w := sr.word(r, "quantity", &ok); w != "" {
			rd.What = Quantity(slices.Index(quantityWords, w))
		}
		rd.Instrument = sr.word(r, "instrument", &ok)
		rd.Bypass = sr.word(r, "position", &ok) == "bypass"
		rd.Time = sr.text(r, "time", &ok)
		rd.Note = sr.text(r, "note", &ok)
		set, good := sr.num(r, "setting")
		rd.Setting = set
		if !ok || !good {
			continue
		}
		wref, qref := sr.ref(r, "where"), sr.ref(r, "quantity")
		if rd.What == 0 {
			p.add(qref.problem(SeverityError, ErrMissing, "blank", "one of: "+strings.Join(quantityWords[1:], ", ")))
			continue
		}
		// Where the reading was taken, and whether that suits the quantity.
		var br *Branch
		atPump := false
		switch {
		case rd.Where == "":
			p.add(wref.problem(SeverityError, ErrMissing, "blank", "a branch id, pump or header"))
			continue
		case strings.EqualFold(rd.Where, AtPump):
			rd.Where = AtPump
		case strings.EqualFold(rd.Where, AtHeader):
			rd.Where = AtHeader
		case byID[rd.Where] == nil && pumpIDs[idKey(rd.Where)] != "":
			// One pump of several, by its id on the pump sheet.
			rd.Where, atPump = pumpIDs[idKey(rd.Where)], true
		default:
			br = byID[rd.Where]
			if br == nil {
				if haveBranches {
					p.add(wref.problem(SeverityError, ErrReference, "no branch has this id",
						refWant("a branch id from the branches sheet, pump or header", rd.Where, ids)))
				}
				continue
			}
		}
		if want := placeWant(rd.What, rd.Where, br != nil, atPump); want != "" {
			p.add(wref.problem(SeverityError, ErrRange, fmt.Sprintf("%s is not read here", rd.What), want))
			continue
		}
		if rd.What == ControlledDiff && !br.Controller.Has() {
			p.add(wref.problem(SeverityError, ErrReference, fmt.Sprintf("branch %q has no differential controller", br.ID),
				"a riser with a controller set point in the branches sheet"))
			continue
		}
		if !readingValue(sr, r, &rd, s.Boundary.MaxSpeed, p) {
			continue
		}
		// Valve-related checks.
		var valve *ValveModel
		if br != nil && br.Valve != "" {
			valve = s.Valve(br.Valve)
		}
		needValve := rd.What == ValveDiff || rd.Instrument == "valve-meter" || !math.IsNaN(rd.Setting)
		if needValve && br == nil && !math.IsNaN(rd.Setting) {
			p.add(sr.ref(r, "setting").problem(SeverityError, ErrRange, "a setting belongs to a branch's valve", "no setting at the pump or header"))
			continue
		}
		if needValve && br != nil && br.Valve == "" {
			p.add(wref.problem(SeverityError, ErrReference, fmt.Sprintf("branch %q has no valve", br.ID),
				"a valve model for this branch in the branches sheet"))
			continue
		}
		if valve != nil && valves.check(valve.Name) {
			if e := checkSetting(valve, rd.Setting, sr.ref(r, "setting")); e != nil {
				p.add(e)
				continue
			}
			if rd.Instrument == "valve-meter" && !valve.Table() {
				p.add(sr.ref(r, "instrument").problem(SeverityError, ErrRange, fmt.Sprintf("valve %q has no kv table to read flow from", valve.Name),
					"a valve with a kv table, or another instrument"))
				continue
			}
		}
		if rd.Bypass && (br == nil || br.BypassValve == "") {
			want := "a branch with a bypass valve (branches sheet), or coil"
			if br == nil {
				want = "coil or blank: a position belongs to a branch's three-port valve"
			}
			p.add(sr.ref(r, "position").problem(SeverityError, ErrRange, "no bypass here", want))
			continue
		}
		if br != nil && br.BypassValve != "" {
			k := [2]string{rd.State, rd.Where}
			if m, seen := positions[k]; seen && m.bypass != rd.Bypass {
				p.add(sr.ref(r, "position").problem(SeverityError, ErrRange,
					fmt.Sprintf("differs from the position on line %d in the same state", m.line),
					"one position of the three-port valve per state (blank is coil); give each change its own state"))
				continue
			} else if !seen {
				positions[k] = position{rd.Bypass, r.line}
			}
		}
		if !math.IsNaN(rd.Setting) {
			k := [2]string{rd.State, rd.Where}
			if m, seen := settings[k]; seen && m.setting != rd.Setting {
				p.add(sr.ref(r, "setting").problem(SeverityError, ErrRange,
					fmt.Sprintf("differs from the setting on line %d in the same state", m.line),
					"one setting per valve in a state; give each change its own state"))
				continue
			} else if !seen {
				settings[k] = moved{rd.Setting, r.line}
			}
		}
		out = append(out, rd)
	}
	if len(out) == 0 && len(t.rows) == 0 {
		p.add(&Error{File: t.file, Line: t.headerLine, Severity: SeverityWarning, Err: ErrMissing,
			Msg: "no readings: nothing to calibrate", Want: "one row per reading below the header"})
	}
	checkAgreement(out, p)
	return out, labels
}

// readStates reads the states sheet: each listed survey state's pump speed
// or set point. labels are the states the readings name (nil when the
// readings sheet cannot be read: references are then not checked).
func readStates(t *table, s *Site, labels map[string]bool, p *Problems) []StateSetting {
	sr := bind(t, &stateColumns, p)
	if !sr.has("state") {
		return nil
	}
	known := sortedKeys(labels)
	b := s.Boundary
	first := map[string]int{}
	out := []StateSetting{}
	for _, r := range t.rows {
		ok := true
		st := StateSetting{Pos: Pos{File: t.file, Line: r.line}}
		st.Label = strings.ToLower(sr.text(r, "state", &ok))
		sp, good1 := sr.num(r, "speed")
		set, good2 := sr.num(r, "set point")
		st.Speed, st.SetPoint = sp, set
		running, good3 := sr.num(r, "pumps running")
		if good3 && !math.IsNaN(running) {
			st.Running, good3 = wholeCount(sr.ref(r, "pumps running"), running, p)
		}
		st.Note = sr.text(r, "note", &ok)
		ref := sr.ref(r, "state")
		if !ok || !good1 || !good2 || !good3 || !stateNamed(ref, st.Label, labels, known, p) {
			continue
		}
		if line, dup := first[st.Label]; dup {
			p.add(ref.problem(SeverityError, ErrDuplicate, "state given twice", fmt.Sprintf("one row per state; the first is on line %d", line)))
			continue
		}
		first[st.Label] = r.line
		if !math.IsNaN(st.Speed) {
			switch {
			case b.Kind != PumpCurve:
				p.add(sr.ref(r, "speed").problem(SeverityWarning, ErrRange, fmt.Sprintf("speed ignored with boundary %s", b.Kind),
					"boundary pump; a drive holding a set point finds its own speed"))
				st.Speed = nan
			case st.Speed > b.MaxSpeed:
				p.add(sr.ref(r, "speed").problem(SeverityError, ErrRange, "above max speed",
					fmt.Sprintf("a speed up to the max speed, %s", fmtNum(b.MaxSpeed))))
				continue
			}
		}
		if st.Running > 0 && !checkRunning(s, st.Running, sr.ref(r, "pumps running"), p) {
			continue
		}
		if !math.IsNaN(st.SetPoint) && b.Kind != ConstantDiff {
			p.add(sr.ref(r, "set point").problem(SeverityWarning, ErrRange, fmt.Sprintf("set point ignored with boundary %s", b.Kind),
				"boundary constant-differential"))
			st.SetPoint = nan
		}
		out = append(out, st)
	}
	return out
}

// stateNamed reports whether label (at ref) names a survey state of the
// readings sheet, adding the problem where it does not. labels are the
// states the readings name, known the same sorted (nil labels: the readings
// sheet cannot be read, and only a blank label is refused).
func stateNamed(ref cellRef, label string, labels map[string]bool, known []string, p *Problems) bool {
	switch {
	case label == "":
		p.add(ref.problem(SeverityError, ErrMissing, "blank", "a survey state label from the readings sheet"))
		return false
	case labels != nil && !labels[label]:
		want := "a state label from the readings sheet, which names none"
		if len(known) > 0 {
			want = refWant("a state label from the readings sheet: "+strings.Join(known, ", "), label, known)
		}
		p.add(ref.problem(SeverityError, ErrReference, "no reading is in this state", want))
		return false
	}
	return true
}

// readMoves reads the moves sheet: a valve's setting in a survey state where
// no reading of that state records one. labels are the states the readings
// name (nil when the readings sheet cannot be read: states are then not
// checked).
func readMoves(t *table, s *Site, labels map[string]bool, valves valveCheck, p *Problems) []Move {
	sr := bind(t, &moveColumns, p)
	out := []Move{}
	if !sr.has("state") || !sr.has("branch") || !sr.has("setting") {
		return out
	}
	known := sortedKeys(labels)
	ids := make([]string, len(s.Branches))
	byID := make(map[string]*Branch, len(s.Branches))
	for i := range s.Branches {
		ids[i] = s.Branches[i].ID
		byID[ids[i]] = &s.Branches[i]
	}
	// The settings the readings record, state and branch -> line.
	read := map[[2]string]Reading{}
	for _, r := range s.Readings {
		if !math.IsNaN(r.Setting) {
			read[[2]string{r.State, r.Where}] = r
		}
	}
	first := map[[2]string]int{}
	for _, r := range t.rows {
		ok := true
		mv := Move{Pos: Pos{File: t.file, Line: r.line}}
		mv.State = strings.ToLower(sr.text(r, "state", &ok))
		mv.Branch = sr.text(r, "branch", &ok)
		mv.Setting = sr.need(r, "setting", &ok)
		mv.Note = sr.text(r, "note", &ok)
		sref, bref := sr.ref(r, "state"), sr.ref(r, "branch")
		switch {
		case !ok || !stateNamed(sref, mv.State, labels, known, p):
			continue
		case mv.Branch == "":
			p.add(bref.problem(SeverityError, ErrMissing, "blank", "a branch id"))
			continue
		}
		br := byID[mv.Branch]
		switch {
		case br == nil:
			if len(s.Branches) > 0 {
				p.add(bref.problem(SeverityError, ErrReference, "no branch has this id", refWant("a branch id from the branches sheet", mv.Branch, ids)))
			}
			continue
		case br.Valve == "":
			p.add(bref.problem(SeverityError, ErrReference, fmt.Sprintf("branch %q has no valve", br.ID),
				"a valve model for this branch in the branches sheet"))
			continue
		}
		if v := s.Valve(br.Valve); v != nil && valves.check(v.Name) {
			if e := checkSetting(v, mv.Setting, sr.ref(r, "setting")); e != nil {
				p.add(e)
				continue
			}
		}
		k := [2]string{mv.State, mv.Branch}
		if line, dup := first[k]; dup {
			p.add(bref.problem(SeverityError, ErrDuplicate, "moved twice in one state", fmt.Sprintf("one setting per valve in a state; the first is on line %d", line)))
			continue
		}
		if rd, both := read[k]; both && rd.Setting != mv.Setting {
			p.add(sr.ref(r, "setting").problem(SeverityError, ErrRange,
				fmt.Sprintf("differs from the setting %s read in the same state (%s)", fmtNum(rd.Setting), rd.Pos),
				"one setting per valve in a state; give each change its own state"))
			continue
		}
		first[k] = r.line
		out = append(out, mv)
	}
	return out
}

// hasChildOf returns the indices of the branches hanging from branch i.
func hasChildOf(s *Site, i int) []int {
	var out []int
	for j, b := range s.Branches {
		if b.Parent != "" && b.Parent == s.Branches[i].ID {
			out = append(out, j)
		}
	}
	return out
}

// checkRunning checks a number of pumps running against the pump sheet,
// reporting at ref what is wrong.
func checkRunning(s *Site, n int, ref cellRef, p *Problems) bool {
	ids := s.Pumps()
	switch {
	case len(ids) == 0:
		p.add(ref.problem(SeverityWarning, ErrRange, "pumps running ignored: there is no pump sheet", "a pump sheet with a curve per pump"))
	case n > len(ids):
		p.add(ref.problem(SeverityError, ErrRange, fmt.Sprintf("more pumps than the pump sheet's %d", len(ids)),
			fmt.Sprintf("a count from 1 to %d", len(ids))))
		return false
	case s.PumpSeries && n < len(ids):
		p.add(ref.problem(SeverityError, ErrRange, "pumps in series all run",
			fmt.Sprintf("%d, or pump arrangement parallel (a pump standing by in series still passes the flow)", len(ids))))
		return false
	}
	return true
}

// placeWant returns what a reading of q should name as its place, or ""
// when where suits q.
func placeWant(q Quantity, where string, branch, onePump bool) string {
	switch q {
	case Flow, ValveDiff, BranchDiff, ControlledDiff:
		if !branch {
			return "a branch id"
		}
	case HeaderDiff:
		if !branch && where != AtHeader {
			return "a branch id (at its take-off) or header"
		}
	case PumpDiff, Speed:
		if where != AtPump && !onePump {
			return "pump, or the id of one of several pumps"
		}
	case TotalFlow:
		if branch {
			return "pump or header, or the id of one of several pumps"
		}
	}
	return ""
}

// readingValue reads the value, unit, instrument and uncertainty of a
// reading row into rd. maxSpeed is the drive's highest speed ratio, which a
// speed reading may pass only by its display's noise.
func readingValue(sr *sheetReader, r row, rd *Reading, maxSpeed float64, p *Problems) bool {
	if sr.broken["uncertainty"] || sr.broken["unit"] {
		return false // reported on the header line
	}
	// A differential near zero read by a gauge may come out a little below
	// it: such a reading is kept as read (see negativeDiff), so the value
	// is bounded below only by the plausible range here.
	kind, def := units.Pressure, "kPa"
	limit := &column{name: "value", typ: numCol, kind: units.Pressure, what: "pressure difference", lo: -maxPressure, hi: maxPressure}
	if rd.What == Speed {
		// A drive shows its speed as % of rated or as a ratio.
		kind, def = units.Dimensionless, "1"
		limit = &column{name: "value", typ: numCol, kind: units.Dimensionless, what: "speed ratio", lo: 0, hi: 2,
			want: "a ratio to rated speed from 0 to 2; give unit % for a percentage"}
	}
	if rd.What.IsFlow() {
		kind, def = units.Flow, "l/s"
		limit = &column{name: "value", typ: numCol, kind: units.Flow, what: "flow", lo: 0, hi: maxFlow}
	}
	// The row's unit: the unit cell, else the unit named on the value
	// column, else the default for the quantity.
	u, err := units.Lookup(kind, def)
	uref := sr.ref(r, "unit")
	if hu, ok := sr.units["value"]; ok {
		u, err = units.Lookup(kind, hu.Symbol)
		uref = sr.ref(r, "value")
		uref.value = hu.Symbol
		uref.line = sr.t.headerLine
	}
	if i, ok := sr.idx["unit"]; ok && r.cell(i) != "" {
		u, err = units.Lookup(kind, r.cell(i))
		uref = sr.ref(r, "unit")
	}
	if err != nil {
		msg := err.Error()
		if errors.Is(err, units.ErrUnknownUnit) {
			msg = "unknown unit"
		}
		e := uref.problem(SeverityError, ErrUnit, msg, fmt.Sprintf("%s for a %s reading", unitWant(kind), rd.What))
		e.Cause = err
		p.add(e)
		return false
	}
	vref := sr.ref(r, "value")
	v, ne := parseNum(limit, u, false, r.rawCell(sr.idx["value"]), sr.t.decimalComma)
	if ne == nil && math.IsNaN(v) {
		ne = &numError{ErrMissing, "blank", "the reading"}
	}
	if ne != nil {
		p.add(vref.problem(SeverityError, ne.err, ne.msg, ne.want))
		return false
	}
	rd.Value = v

	var in *Instrument
	if rd.Instrument != "" {
		in = findInstrument(rd.Instrument)
		if !in.reads(rd.What) {
			var can []string
			for _, x := range instruments {
				if x.reads(rd.What) {
					can = append(can, x.Name)
				}
			}
			p.add(sr.ref(r, "instrument").problem(SeverityError, ErrRange, fmt.Sprintf("a %s does not read %s", in.Name, rd.What),
				"one of: "+strings.Join(can, ", ")))
			return false
		}
	}
	sigma, ok := readingSigma(sr, r, rd, in, u, limit.hi, p)
	if !ok {
		return false
	}
	rd.Sigma = sigma
	// Twice the expanded uncertainty at k = 2: a reading this far past a
	// bound is a slip, not noise. Common practice, no source.
	slack := 2 * defaultCoverage * sigma
	show := func(x float64) string {
		s := strconv.FormatFloat(u.FromSI(x), 'g', 3, 64)
		if u.Symbol != "" && u.Symbol != "1" {
			s += " " + u.Symbol
		}
		return s
	}
	switch {
	case v < 0 && -v > slack:
		p.add(vref.problem(SeverityError, ErrRange, "negative beyond its uncertainty",
			fmt.Sprintf("a pressure difference of 0 or more; a reading near zero is taken as read down to -%s, twice its expanded uncertainty", show(slack))))
		return false
	case v < 0:
		p.add(vref.problem(SeverityWarning, ErrRange, "negative, but within its uncertainty of zero: kept as read",
			"nothing to change if the instrument showed it; the fit compares it as read"))
	case rd.What == Speed && v > maxSpeed+slack:
		p.add(vref.problem(SeverityError, ErrRange, fmt.Sprintf("above the drive's max speed %s by more than the display's uncertainty", show(maxSpeed)),
			fmt.Sprintf("a speed up to %s (max speed plus twice the reading's expanded uncertainty); check the max speed in the site sheet, and give unit %% for a percentage", show(maxSpeed+slack))))
		return false
	}
	return true
}

// readingSigma returns the standard uncertainty of a reading: its stated
// uncertainty over its coverage factor, else its instrument's default. A
// stated uncertainty of zero (no reading is exact) takes the instrument's
// default, with a warning. u is the row's unit, hi the largest value of the
// quantity.
func readingSigma(sr *sheetReader, r row, rd *Reading, in *Instrument, u units.Unit, hi float64, p *Problems) (float64, bool) {
	ok := true
	k := sr.numOr(r, "k", defaultCoverage, &ok)
	if !ok {
		return 0, false
	}
	v := rd.Value
	uc := ""
	if i, ok := sr.idx["uncertainty"]; ok {
		uc = r.rawCell(i)
	}
	if uc == "" {
		if in == nil {
			ref := sr.ref(r, "instrument")
			ref.field = "instrument"
			p.add(ref.problem(SeverityError, ErrMissing, "no instrument and no uncertainty", "an instrument kind or an uncertainty"))
			return 0, false
		}
		if sr.has("k") && !math.IsNaN(mustNum(sr, r, "k")) {
			p.add(sr.ref(r, "k").problem(SeverityWarning, ErrRange, "coverage factor without an uncertainty, ignored", "an uncertainty with it"))
		}
		return in.DefaultSigma(rd.What, v), true
	}
	uref := sr.ref(r, "uncertainty")
	_, pct := sr.units["uncertainty"]
	text := strings.TrimSpace(uc)
	if t, ok := strings.CutSuffix(text, "%"); ok {
		text, pct = strings.TrimSpace(t), true
	}
	x, ne := parseNumber(text, sr.t.decimalComma)
	if ne != nil {
		if ne.err == ErrSyntax {
			ne.want = "a percentage such as 5 %, or a number in the row's unit"
		}
		p.add(uref.problem(SeverityError, ne.err, ne.msg, ne.want))
		return 0, false
	}
	var U float64
	zeroMsg, zeroWant, zeroWhy := "must be positive", "an uncertainty above 0", "zero uncertainty"
	if pct {
		if x != 0 && x < 1e-6 || x > 100 {
			p.add(uref.problem(SeverityError, ErrRange, "relative uncertainty out of range", "a percentage above 0 and up to 100"))
			return 0, false
		}
		U = x / 100 * math.Abs(v)
		if x > 0 {
			zeroMsg, zeroWant = "a percentage of a zero reading is zero", "an absolute uncertainty in the row's unit"
			zeroWhy = zeroMsg
		}
	} else {
		U = u.ToSI(x)
		if U < 0 || math.IsInf(U, 0) {
			p.add(uref.problem(SeverityError, ErrRange, "must be positive", "an uncertainty above 0"))
			return 0, false
		}
	}
	if U == 0 {
		// A technician who writes 0 means the instrument's resolution, not
		// an exact reading; a zero weight would be infinite.
		var d float64
		if in != nil {
			d = in.DefaultSigma(rd.What, v)
		}
		if !(d > 0) {
			p.add(uref.problem(SeverityError, ErrRange, zeroMsg, zeroWant+", or an instrument kind whose default applies"))
			return 0, false
		}
		show := strconv.FormatFloat(u.FromSI(d*defaultCoverage), 'g', 3, 64)
		if u.Symbol != "" && u.Symbol != "1" {
			show += " " + u.Symbol
		}
		p.add(uref.problem(SeverityWarning, ErrRange,
			fmt.Sprintf("%s: replaced by the %s default, ±%s at k = 2", zeroWhy, in.Name, show),
			"the reading's uncertainty: no reading is exact"))
		return d, true
	}
	sigma := U / k
	switch {
	case sigma > hi:
		p.add(uref.problem(SeverityError, ErrRange, "too large", "an uncertainty no larger than the largest reading"))
		return 0, false
	case sigma < minMagnitude:
		p.add(uref.problem(SeverityError, ErrRange, "too small", "an uncertainty of sensible size"))
		return 0, false
	}
	return sigma, true
}

func mustNum(sr *sheetReader, r row, name string) float64 {
	v, _ := sr.num(r, name)
	return v
}

// checkAgreement warns about readings of the same quantity at the same
// place, state and setting that differ by more than three combined
// standard uncertainties: one of them is likely mis-typed or mis-read.
//
// Each reading is compared with every earlier reading of its group while
// the group is small (up to agreeAll), which is every survey anyone takes;
// beyond that, with the earlier readings of lowest and highest value and
// of smallest uncertainty only, which keeps the check linear in the number
// of readings (a million readings of one flow would otherwise take hours)
// and still catches a reading that stands apart from the rest.
func checkAgreement(rs []Reading, p *Problems) {
	type key struct {
		state, where string
		what         Quantity
		setting      float64
	}
	// group is the earlier readings of one key: all of them while few,
	// and the three that stand for the rest.
	type group struct {
		all             []int
		many            bool
		lo, hi, precise int
	}
	const agreeAll = 16
	groups := map[key]*group{}
	for i, r := range rs {
		k := key{r.State, r.Where, r.What, r.Setting}
		if math.IsNaN(r.Setting) {
			k.setting = -1 // NaN keys never match; no setting is -1 here
		}
		g := groups[k]
		if g == nil {
			g = &group{lo: i, hi: i, precise: i}
			groups[k] = g
		} else {
			cand := g.all
			if g.many {
				cand = []int{g.lo, g.hi, g.precise}
				slices.Sort(cand)
				cand = slices.Compact(cand)
			}
			for _, j := range cand {
				o := rs[j]
				if math.Abs(r.Value-o.Value) > 3*math.Hypot(r.Sigma, o.Sigma) {
					u := displayUnit(r.What)
					p.add(&Error{File: r.Pos.File, Line: r.Pos.Line, Field: "value", Value: units.Format(r.Value, u, -1),
						Severity: SeverityWarning, Err: ErrRange,
						Msg:  fmt.Sprintf("disagrees with line %d (%s) by more than 3 standard uncertainties", o.Pos.Line, units.Format(o.Value, u, -1)),
						Want: "readings of one quantity in one state that agree within their uncertainties"})
					break
				}
			}
		}
		if r.Value < rs[g.lo].Value {
			g.lo = i
		}
		if r.Value > rs[g.hi].Value {
			g.hi = i
		}
		if r.Sigma < rs[g.precise].Sigma {
			g.precise = i
		}
		switch {
		case g.many:
		case len(g.all) < agreeAll:
			g.all = append(g.all, i)
		default:
			g.many, g.all = true, nil // the three stand for them from now on
		}
	}
}

func displayUnit(q Quantity) units.Unit {
	if q == Speed {
		u, _ := units.Lookup(units.Dimensionless, "")
		return u
	}
	if q.IsFlow() {
		u, _ := units.Lookup(units.Flow, "l/s")
		return u
	}
	u, _ := units.Lookup(units.Pressure, "kPa")
	return u
}

func readTargets(t *table, s *Site, haveBranches bool, p *Problems) map[string]float64 {
	sr := bind(t, &targetColumns, p)
	out := map[string]float64{}
	if !sr.has("branch") || !sr.has("target flow") {
		return out
	}
	ids := make([]string, len(s.Branches))
	known := make(map[string]bool, len(s.Branches))
	for i, b := range s.Branches {
		ids[i] = b.ID
		known[b.ID] = true
	}
	lines := map[string]int{}
	for _, r := range t.rows {
		ok := true
		id := sr.text(r, "branch", &ok)
		q := sr.need(r, "target flow", &ok)
		sr.text(r, "note", &ok)
		ref := sr.ref(r, "branch")
		switch {
		case !ok:
			continue
		case id == "":
			p.add(ref.problem(SeverityError, ErrMissing, "blank", "a branch id"))
			continue
		case haveBranches && !known[id]:
			p.add(ref.problem(SeverityError, ErrReference, "no branch has this id", refWant("a branch id from the branches sheet", id, ids)))
			continue
		}
		if line, dup := lines[id]; dup {
			p.add(ref.problem(SeverityError, ErrDuplicate, "target given twice", fmt.Sprintf("one target per branch; the first is on line %d", line)))
			continue
		}
		lines[id] = r.line
		out[id] = q
	}
	return out
}

// checkSite checks the site sheet's values against each other and the
// other sheets.
func checkSite(s *Site, keys map[string]cellRef, in *input, brRefs []branchRefs) {
	p := &in.probs
	at := func(key string) cellRef {
		if r, ok := keys[key]; ok {
			return r
		}
		return cellRef{file: in.label(siteKeys.name), field: key}
	}
	_, glycolGiven := keys["glycol"]
	measured := checkMeasured(s, keys, at, p)
	switch {
	case s.Fluid == OtherFluid:
		if s.GlycolPercent > 0 {
			p.add(at("glycol").problem(SeverityError, ErrRange, "fluid other takes no glycol", "0, or fluid ethylene-glycol or propylene-glycol"))
		}
	case s.Fluid == "water" && s.GlycolPercent > 0:
		p.add(at("glycol").problem(SeverityError, ErrRange, "water takes no glycol", "0, or fluid ethylene-glycol or propylene-glycol"))
	case s.Fluid != "water" && !glycolGiven:
		ref := at("fluid")
		ref.field = "glycol"
		ref.value = ""
		p.add(ref.problem(SeverityError, ErrMissing, "glycol concentration is missing", "a glycol [%] line, e.g. 30"))
	case s.Fluid != "water" && s.GlycolPercent == 0:
		p.add(at("glycol").problem(SeverityError, ErrRange, "must be positive for a glycol", "a concentration above 0 %"))
	case !measured:
		checkFluid(s, at, p)
	}
	b := &s.Boundary
	if b.Speed > b.MaxSpeed {
		p.add(at("speed").problem(SeverityError, ErrRange, "above max speed", fmt.Sprintf("a speed up to the max speed, %s", fmtNum(b.MaxSpeed))))
	}
	switch b.Kind {
	case PumpCurve:
		if !in.present[pumpColumns.name] {
			ref := at("boundary")
			p.add(ref.problem(SeverityError, ErrMissing, "pump boundary without a pump curve", "a pump sheet with flow and head, or another boundary"))
		}
	case ConstantDiff:
		if math.IsNaN(b.SetPoint) {
			ref := at("boundary")
			ref.field = "set point"
			ref.value = ""
			p.add(ref.problem(SeverityError, ErrMissing, "constant-differential boundary without a set point", "a set point [kPa] line"))
		}
	}
	if b.Kind != ConstantDiff && !math.IsNaN(b.SetPoint) {
		p.add(at("set point").problem(SeverityWarning, ErrRange, fmt.Sprintf("set point ignored with boundary %s", b.Kind), "boundary constant-differential"))
	}
	if b.Sensor != AtPump && in.tables[branchColumns.name] != nil && s.Branch(b.Sensor) == nil {
		ids := make([]string, len(s.Branches))
		for i, br := range s.Branches {
			ids[i] = br.ID
		}
		p.add(at("sensor").problem(SeverityError, ErrReference, "no branch has this id", refWant("pump or a branch id", b.Sensor, ids)))
	}
	if s.PumpsRunning > 0 && !checkRunning(s, s.PumpsRunning, at("pumps running"), p) {
		s.PumpsRunning = 0
	}
	if s.PumpSeries && len(s.Pumps()) < 2 {
		p.add(at("pump arrangement").problem(SeverityWarning, ErrRange, "pump arrangement ignored: the pump sheet has one pump",
			"pump ids on the pump sheet, one per pump"))
	}
	if len(s.Pumps()) == 1 {
		for i := range s.Pump {
			if pt := &s.Pump[i]; pt.Speed > 0 {
				ref := cellRef{file: pt.Pos.File, line: pt.Pos.Line, field: "speed", value: fmtNum(pt.Speed)}
				if t := in.tables[pumpColumns.name]; t != nil {
					ref.col = t.columns["speed"]
				}
				p.add(ref.problem(SeverityWarning, ErrRange, "speed ignored: the one pump runs at the site's speed",
					"a speed key in the site sheet (or a speed per state); a pump's own speed is for one of several pumps"))
				for j := range s.Pump {
					s.Pump[j].Speed = nan
				}
				break
			}
		}
	}
	for _, pt := range s.Pump {
		if pt.Pump != "" && s.Branch(pt.Pump) != nil {
			ref := cellRef{file: pt.Pos.File, line: pt.Pos.Line, field: "pump", value: pt.Pump}
			if t := in.tables[pumpColumns.name]; t != nil {
				ref.col = t.columns["pump"]
			}
			p.add(ref.problem(SeverityError, ErrDuplicate, "a branch has this id", "a pump id no branch uses, so readings can name it"))
			break
		}
	}
	if s.Header == NoHeaderLoss {
		for i, br := range s.Branches {
			if br.SupplyLength+br.ReturnLength > 0 {
				p.add(brRefs[i].supply.problem(SeverityWarning, ErrRange, "header lengths ignored: the site's header is none",
					"header direct-return or reverse-return in the site sheet"))
				break
			}
		}
	}
}

// checkMeasured checks the fluid properties given as measured and reports
// whether they are complete (a density and one viscosity), so that the
// property tables are not needed.
func checkMeasured(s *Site, keys map[string]cellRef, at func(string) cellRef, p *Problems) bool {
	if s.Viscosity > 0 && s.KinematicViscosity > 0 {
		p.add(at("kinematic viscosity").problem(SeverityError, ErrDuplicate, "viscosity given twice",
			fmt.Sprintf("either viscosity or kinematic viscosity; viscosity is line %d", keys["viscosity"].line)))
	}
	complete := s.Density > 0 && (s.Viscosity > 0 || s.KinematicViscosity > 0)
	// blank reports a key not given, or given with a blank value; a value
	// that was refused has its own problem already.
	blank := func(key string) bool {
		r, ok := keys[key]
		return !ok || strings.TrimSpace(r.value) == ""
	}
	if s.Fluid == OtherFluid && !complete {
		missing, want := "", ""
		switch {
		case !(s.Density > 0) && blank("density"):
			missing, want = "density", "a density [kg/m3] line"
		case !(s.Viscosity > 0 || s.KinematicViscosity > 0) && blank("viscosity") && blank("kinematic viscosity"):
			missing, want = "viscosity", "a viscosity [mPa s] or kinematic viscosity [mm2/s] line"
		default:
			return false
		}
		ref := at("fluid")
		ref.field = missing
		ref.value = ""
		p.add(ref.problem(SeverityError, ErrMissing, "fluid other needs its density and viscosity", want))
	}
	return complete
}

// checkFluid asks the fluid package whether its property tables cover the
// site's fluid, concentration and temperature, so that a gap is reported
// at the line of the site sheet that causes it.
func checkFluid(s *Site, at func(string) cellRef, p *Problems) {
	kind, err := fluid.ParseKind(s.Fluid)
	if err != nil {
		return // the reader only accepts the fluids the package knows
	}
	spec := fluid.Spec{Kind: kind, Percent: s.GlycolPercent}
	if err := spec.Validate(); err != nil {
		e := at("glycol").problem(SeverityError, ErrRange, "outside the fluid property tables",
			fmt.Sprintf("%g to %g %% by volume", fluid.MinGlycolPercent, fluid.MaxGlycolPercent))
		e.Cause = err
		p.add(e)
		return
	}
	if _, err := spec.At(s.Temperature); err != nil {
		e := at("temperature").problem(SeverityError, ErrRange, "outside the fluid property tables", err.Error())
		e.Cause = err
		p.add(e)
	}
}
