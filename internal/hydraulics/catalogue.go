package hydraulics

import (
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"
)

// Absolute roughness ε of clean pipe by material, m. Sources: commercial
// steel 0.045 mm and drawn copper 1.5 µm from the roughness table after
// Binder (1973) as reproduced by eFunda (White, Fluid Mechanics, Table 6.1,
// gives 0.046 mm for commercial steel); galvanized iron 0.15 mm and cast
// iron 0.26 mm from the same table; plastic (PE, PP, PVC) 7 µm as used in
// CIBSE Guide C (from memory; other tables give 1.5-7 µm). Old or fouled pipe
// is rougher: calibration treats roughness as a fitted parameter.
const (
	RoughnessSteel      = 0.045e-3
	RoughnessGalvanized = 0.15e-3
	RoughnessCastIron   = 0.26e-3
	RoughnessCopper     = 0.0015e-3
	RoughnessPlastic    = 0.007e-3
)

// PipeSize is one size of a pipe standard. Lengths are in m; Bore =
// OutsideDiameter - 2 Wall, from the nominal dimensions (tolerances ignored).
type PipeSize struct {
	Standard        string
	Nominal         string // "DN50", "22x1.0", ...
	OutsideDiameter float64
	Wall            float64
	Bore            float64
	Roughness       float64
}

// Pipe returns a Pipe of this size and the given length.
func (s PipeSize) Pipe(length float64) Pipe {
	return Pipe{Bore: s.Bore, Length: length, Roughness: s.Roughness}
}

// sizeRow is one catalogue line in mm: steel rows carry DN and NPS (in
// inches, 0 when none); tube rows only OD and wall.
type sizeRow struct {
	dn     int
	nps    float64
	npsTxt string
	od     float64
	wall   float64
}

// standardDef is one pipe standard of the catalogue.
type standardDef struct {
	name      string
	title     string
	roughness float64
	byDN      bool // steel: sizes named by DN / NPS; tube: by OD x wall
	rows      []sizeRow
}

// asme lists the ASME B36.10M sizes (DN, NPS, OD in mm) with the given
// walls in mm.
func asme(walls []float64) []sizeRow {
	base := []sizeRow{
		{15, 0.5, "1/2", 21.3, 0}, {20, 0.75, "3/4", 26.7, 0}, {25, 1, "1", 33.4, 0},
		{32, 1.25, "1-1/4", 42.2, 0}, {40, 1.5, "1-1/2", 48.3, 0}, {50, 2, "2", 60.3, 0},
		{65, 2.5, "2-1/2", 73.0, 0}, {80, 3, "3", 88.9, 0}, {90, 3.5, "3-1/2", 101.6, 0},
		{100, 4, "4", 114.3, 0}, {125, 5, "5", 141.3, 0}, {150, 6, "6", 168.3, 0},
		{200, 8, "8", 219.1, 0}, {250, 10, "10", 273.0, 0}, {300, 12, "12", 323.8, 0},
	}
	for i := range base {
		base[i].wall = walls[i]
	}
	return base
}

// en10255 lists EN 10255 sizes with the given walls.
func en10255(walls []float64) []sizeRow {
	base := []sizeRow{
		{15, 0.5, "1/2", 21.3, 0}, {20, 0.75, "3/4", 26.9, 0}, {25, 1, "1", 33.7, 0},
		{32, 1.25, "1-1/4", 42.4, 0}, {40, 1.5, "1-1/2", 48.3, 0}, {50, 2, "2", 60.3, 0},
		{65, 2.5, "2-1/2", 76.1, 0}, {80, 3, "3", 88.9, 0}, {100, 4, "4", 114.3, 0},
		{125, 5, "5", 139.7, 0}, {150, 6, "6", 165.1, 0},
	}
	for i := range base {
		base[i].wall = walls[i]
	}
	return base
}

// tubes lists OD x wall pairs in mm.
func tubes(pairs ...float64) []sizeRow {
	rows := make([]sizeRow, 0, len(pairs)/2)
	for i := 0; i+1 < len(pairs); i += 2 {
		rows = append(rows, sizeRow{od: pairs[i], wall: pairs[i+1]})
	}
	return rows
}

// standardNames lists the catalogue's standards in catalogue order.
func standardNames() []string {
	return []string{"sch40", "sch80", "en10255-m", "en10255-h", "en1057", "pe100-sdr11"}
}

// standardByName builds the one standard of the catalogue with the given
// (normalised) name, so a lookup does not build the others. It is built on
// each call so the package holds no mutable state.
func standardByName(name string) (standardDef, bool) {
	switch name {
	case "sch40":
		// ASME B36.10M Schedule 40, metric columns (references §4.1);
		// bore = OD - 2t in mm as tabulated in B36.10M.
		return standardDef{
			name: "sch40", title: "ASME B36.10M Schedule 40 steel", roughness: RoughnessSteel, byDN: true,
			rows: asme([]float64{2.77, 2.87, 3.38, 3.56, 3.68, 3.91, 5.16, 5.49, 5.74, 6.02, 6.55, 7.11, 8.18, 9.27, 10.31}),
		}, true
	case "sch80":
		// ASME B36.10M Schedule 80 (= XS up to NPS 8), metric columns,
		// from public reproductions of the B36.10M table (inch walls
		// 0.147 ... 0.688).
		return standardDef{
			name: "sch80", title: "ASME B36.10M Schedule 80 steel", roughness: RoughnessSteel, byDN: true,
			rows: asme([]float64{3.73, 3.91, 4.55, 4.85, 5.08, 5.54, 7.01, 7.62, 8.08, 8.56, 9.53, 10.97, 12.70, 15.09, 17.48}),
		}, true
	case "en10255-m":
		// EN 10255 medium series (ex BS 1387 medium), references §4.2.
		return standardDef{
			name: "en10255-m", title: "EN 10255 medium series steel tube", roughness: RoughnessSteel, byDN: true,
			rows: en10255([]float64{2.6, 2.6, 3.2, 3.2, 3.2, 3.6, 3.6, 4.0, 4.5, 5.0, 5.0}),
		}, true
	case "en10255-h":
		// EN 10255 heavy series (ex BS 1387 heavy), references §4.2.
		return standardDef{
			name: "en10255-h", title: "EN 10255 heavy series steel tube", roughness: RoughnessSteel, byDN: true,
			rows: en10255([]float64{3.2, 3.2, 4.0, 4.0, 4.0, 4.5, 4.5, 5.0, 5.4, 5.4, 5.4}),
		}, true
	case "en1057":
		// EN 1057 copper tube: the OD x wall combinations sold for
		// heating in the UK and on the Continent (a UK maker's EN 1057
		// size list and a Greek maker's catalogue; 28x1.0 from memory).
		return standardDef{
			name: "en1057", title: "EN 1057 copper tube", roughness: RoughnessCopper,
			rows: tubes(15, 0.7, 15, 1.0, 22, 0.9, 22, 1.0, 22, 1.2, 28, 0.9, 28, 1.0, 28, 1.2,
				35, 1.2, 35, 1.5, 42, 1.2, 42, 1.5, 54, 1.2, 54, 2.0, 66.7, 1.2, 76.1, 1.5,
				108, 1.5, 133, 1.5, 159, 2.0),
		}, true
	case "pe100-sdr11":
		// EN 12201-2 PE100 SDR 11 (PN 16) minimum walls, from a maker's
		// reproduction of the EN 12201-2 table (32 mm: 3.0, not 32/11).
		return standardDef{
			name: "pe100-sdr11", title: "EN 12201-2 PE100 SDR 11 pipe", roughness: RoughnessPlastic,
			rows: tubes(20, 2.0, 25, 2.3, 32, 3.0, 40, 3.7, 50, 4.6, 63, 5.8, 75, 6.8, 90, 8.2,
				110, 10.0, 125, 11.4, 160, 14.6, 200, 18.2, 225, 20.5, 250, 22.7),
		}, true
	}
	return standardDef{}, false
}

// Standards returns the names LookupPipe accepts, sorted.
func Standards() []string {
	names := standardNames()
	sort.Strings(names)
	return names
}

// StandardRoughness returns the absolute roughness [m] the catalogue gives
// a standard's clean pipe, for a pipe of that standard known by its bore.
func StandardRoughness(standard string) (float64, error) {
	d, err := findStandard(standard)
	if err != nil {
		return 0, err
	}
	return d.roughness, nil
}

// StandardTitle returns the descriptive title of a standard name.
func StandardTitle(standard string) (string, error) {
	d, err := findStandard(standard)
	if err != nil {
		return "", err
	}
	return d.title, nil
}

// Sizes returns every size of a standard, smallest first.
func Sizes(standard string) ([]PipeSize, error) {
	d, err := findStandard(standard)
	if err != nil {
		return nil, err
	}
	sizes := make([]PipeSize, len(d.rows))
	for i, r := range d.rows {
		sizes[i] = d.size(r)
	}
	return sizes, nil
}

func (d standardDef) size(r sizeRow) PipeSize {
	nominal := strconv.FormatFloat(r.od, 'f', -1, 64) + "x" + strconv.FormatFloat(r.wall, 'f', 1, 64)
	if d.byDN {
		nominal = "DN" + strconv.Itoa(r.dn)
	}
	return PipeSize{
		Standard:        d.name,
		Nominal:         nominal,
		OutsideDiameter: r.od / 1000,
		Wall:            r.wall / 1000,
		Bore:            (r.od - 2*r.wall) / 1000,
		Roughness:       d.roughness,
	}
}

// label is how a size is shown in error messages.
func (d standardDef) label(r sizeRow) string {
	if d.byDN {
		return fmt.Sprintf("DN%d (%sin)", r.dn, r.npsTxt)
	}
	return d.size(r).Nominal
}

func (d standardDef) valid() string {
	var s []string
	for _, r := range d.rows {
		s = append(s, d.label(r))
	}
	return strings.Join(s, ", ")
}

// normStandard folds case, spaces and "schedule" so "Sch 40", "SCH40" and
// "schedule 40" name the same standard: lower case, "schedule" as "sch",
// spaces and dots dropped, underscores as hyphens.
func normStandard(s string) string {
	s = strings.ToLower(strings.TrimSpace(s))
	s = strings.ReplaceAll(s, "schedule", "sch")
	if !strings.ContainsAny(s, " _.") {
		return s
	}
	b := make([]byte, 0, len(s))
	for i := range len(s) {
		switch c := s[i]; c {
		case ' ', '.':
		case '_':
			b = append(b, '-')
		default:
			b = append(b, c)
		}
	}
	return string(b)
}

func findStandard(standard string) (standardDef, error) {
	if d, ok := standardByName(normStandard(standard)); ok {
		return d, nil
	}
	hint := ""
	if n := normStandard(standard); strings.Contains(n, "copper") || n == "cu" {
		hint = `; copper tube is "en1057"`
	}
	return standardDef{}, &unknownError{fmt.Sprintf("pipe catalogue: standard %q not known%s (valid: %s; see flowset help pipes)", standard, hint, strings.Join(Standards(), ", "))}
}

// LookupPipe returns a size of a pipe standard (see Standards).
//
// Steel standards (sch40, sch80, en10255-m, en10255-h) accept a DN ("DN50",
// "dn 50"), an NPS or thread size in inches ("2", "2in", `2"`, "NPS 2",
// "1-1/4", "1 1/4", "1.25"), or a bare number that is either a DN or an NPS
// of the table (the two sets do not overlap). Tube standards (en1057,
// pe100-sdr11) accept "ODxWall" in mm ("22x1.0", "22 x 1", "22mm") or the OD
// alone where only one wall is listed for it.
func LookupPipe(standard, size string) (PipeSize, error) {
	d, err := findStandard(standard)
	if err != nil {
		return PipeSize{}, err
	}
	var r sizeRow
	if d.byDN {
		r, err = d.lookupSteel(size)
	} else {
		r, err = d.lookupTube(size)
	}
	if err != nil {
		return PipeSize{}, err
	}
	return d.size(r), nil
}

func (d standardDef) notFound(size, why string) error {
	return &unknownError{fmt.Sprintf("pipe catalogue: %s size %q %s (valid: %s)", d.name, size, why, d.valid())}
}

func (d standardDef) lookupSteel(size string) (sizeRow, error) {
	s := strings.ToLower(strings.TrimSpace(size))
	inches := false
	switch {
	case strings.HasPrefix(s, "dn"):
		n, err := strconv.Atoi(strings.TrimSpace(s[2:]))
		if err != nil {
			return sizeRow{}, d.notFound(size, "is not a DN number")
		}
		for _, r := range d.rows {
			if r.dn == n {
				return r, nil
			}
		}
		return sizeRow{}, d.notFound(size, "is not listed")
	case strings.HasPrefix(s, "nps"):
		s = strings.TrimSpace(s[3:])
		inches = true
	}
	for _, suf := range []string{"inches", "inch", "in", `"`, "''"} {
		if t, ok := strings.CutSuffix(s, suf); ok {
			s = strings.TrimSpace(t)
			inches = true
			break
		}
	}
	v, frac, err := parseInches(s)
	if err != nil {
		return sizeRow{}, d.notFound(size, "is not a size")
	}
	inches = inches || frac
	var match []sizeRow
	for _, r := range d.rows {
		if math.Abs(r.nps-v) < 1e-9 || (!inches && float64(r.dn) == v) {
			match = append(match, r)
		}
	}
	switch len(match) {
	case 0:
		return sizeRow{}, d.notFound(size, "is not listed")
	case 1:
		return match[0], nil
	}
	return sizeRow{}, d.notFound(size, "is ambiguous; write DN or in")
}

// parseInches reads "2", "1.25", "3/4", "1-1/4", "1 1/4"; frac reports a
// fraction or decimal point, which only an inch size has.
func parseInches(s string) (v float64, frac bool, err error) {
	whole, part := "", s
	if i := strings.IndexAny(s, "- "); i > 0 {
		whole, part = s[:i], strings.TrimSpace(s[i+1:])
	}
	if num, den, ok := strings.Cut(part, "/"); ok {
		n, err1 := strconv.Atoi(num)
		m, err2 := strconv.Atoi(den)
		if err1 != nil || err2 != nil || m <= 0 || n <= 0 {
			return 0, false, ErrUnknown
		}
		v = float64(n) / float64(m)
		frac = true
	} else {
		if whole != "" {
			return 0, false, ErrUnknown
		}
		f, err := strconv.ParseFloat(part, 64)
		if err != nil || !(f > 0) || math.IsInf(f, 1) || strings.ContainsAny(part, "eExXpP+_") {
			return 0, false, ErrUnknown
		}
		return f, strings.Contains(part, "."), nil
	}
	if whole != "" {
		w, err := strconv.Atoi(whole)
		if err != nil || w < 0 {
			return 0, false, ErrUnknown
		}
		v += float64(w)
	}
	return v, frac, nil
}

func (d standardDef) lookupTube(size string) (sizeRow, error) {
	s := strings.ToLower(strings.TrimSpace(size))
	s = strings.ReplaceAll(s, "×", "x")
	s = strings.ReplaceAll(s, "mm", "")
	s = strings.ReplaceAll(s, ",", ".")
	odTxt, wallTxt, hasWall := strings.Cut(s, "x")
	od, err := parseMM(odTxt)
	if err != nil {
		return sizeRow{}, d.notFound(size, "is not OD x wall in mm")
	}
	var wall float64
	if hasWall {
		if wall, err = parseMM(wallTxt); err != nil {
			return sizeRow{}, d.notFound(size, "is not OD x wall in mm")
		}
	}
	var match []sizeRow
	for _, r := range d.rows {
		if math.Abs(r.od-od) < 1e-9 && (!hasWall || math.Abs(r.wall-wall) < 1e-9) {
			match = append(match, r)
		}
	}
	switch len(match) {
	case 0:
		return sizeRow{}, d.notFound(size, "is not listed")
	case 1:
		return match[0], nil
	}
	return sizeRow{}, d.notFound(size, "has several walls; write OD x wall")
}

func parseMM(s string) (float64, error) {
	s = strings.TrimSpace(s)
	f, err := strconv.ParseFloat(s, 64)
	if err != nil || !(f > 0) || math.IsInf(f, 1) || strings.ContainsAny(s, "eExXpP+_") {
		return 0, ErrUnknown
	}
	return f, nil
}

// unknownError is a name not found in the catalogue, said in full by its
// message; it wraps ErrUnknown for errors.Is without adding its words.
type unknownError struct{ msg string }

func (e *unknownError) Error() string { return e.msg }
func (e *unknownError) Unwrap() error { return ErrUnknown }
