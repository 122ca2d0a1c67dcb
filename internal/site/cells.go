package site

import (
	"golang.org/x/text/unicode/norm"
	"unicode"
	"unicode/utf8"

	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"

	"flowset/internal/units"
)

// cellRef is where a value came from, for messages.
type cellRef struct {
	file  string
	line  int
	col   int
	field string
	value string
}

func (c cellRef) problem(sev Severity, cause error, msg, want string) *Error {
	return &Error{File: c.file, Line: c.line, Column: c.col, Field: c.field, Value: c.value,
		Severity: sev, Err: cause, Msg: msg, Want: want}
}

func (p *Problems) add(e *Error) { *p = append(*p, e) }

// unitExamples names common units of each kind for messages.
var unitExamples = map[units.Kind]string{
	units.Flow:               "l/s, m3/h, l/h or gpm",
	units.Pressure:           "kPa, Pa, bar, mbar, mH2O or psi",
	units.Length:             "m, mm, ft or in",
	units.Temperature:        "degC, degF or K",
	units.Head:               "m or ft of the pumped fluid",
	units.Dimensionless:      "% or none",
	units.Density:            "kg/m3, g/cm3 or lb/ft3",
	units.Viscosity:          "mPa s, cP or Pa s",
	units.KinematicViscosity: "mm2/s, cSt, m2/s or ft2/s",
}

func unitWant(k units.Kind) string {
	return fmt.Sprintf("a %s unit: %s", k, unitExamples[k])
}

// splitUnit splits "design flow [l/s]" into "design flow" and "l/s". Round
// brackets are accepted too. bracket reports whether a bracket was present.
func splitUnit(h string) (name, unit string, bracket bool) {
	h = strings.TrimSpace(h)
	for _, p := range [][2]string{{"[", "]"}, {"(", ")"}} {
		if strings.HasSuffix(h, p[1]) {
			if i := strings.LastIndex(h, p[0]); i >= 0 {
				return strings.TrimSpace(h[:i]), strings.TrimSpace(h[i+1 : len(h)-1]), true
			}
		}
	}
	return h, "", false
}

// unclosedBracket reports whether h opens a unit bracket it does not
// close, with the bracket and its closing partner.
func unclosedBracket(h string) (open, close string, ok bool) {
	for _, p := range [][2]string{{"[", "]"}, {"(", ")"}} {
		if i := strings.LastIndex(h, p[0]); i >= 0 && !strings.Contains(h[i:], p[1]) {
			return p[0], p[1], true
		}
	}
	return "", "", false
}

// find returns the column of a schema named name, and whether name is the
// column's US Cv variant.
func (s *schema) find(name string) (c *column, cv bool) {
	n := normWord(name)
	for i := range s.columns {
		c := &s.columns[i]
		if normWord(c.name) == n {
			return c, false
		}
		for _, a := range c.aliases {
			if normWord(a) == n {
				return c, false
			}
		}
		if c.cv != "" && normWord(c.cv) == n {
			return c, true
		}
	}
	return nil, false
}

func (s *schema) names() []string {
	out := make([]string, len(s.columns))
	for i, c := range s.columns {
		out[i] = c.name
	}
	return out
}

// resolveUnit checks the unit written in a column name against the column.
// It returns the unit to convert with, or a problem.
func resolveUnit(c *column, unit string, bracket bool) (units.Unit, *numError, error) {
	if c.typ != numCol || c.kind == 0 {
		if bracket {
			want := "no unit in the column name"
			if c.cv != "" {
				want = fmt.Sprintf("no unit: %s is in m3/h at 1 bar; a %q column takes US Cv", c.name, c.cv)
			}
			return units.Unit{}, &numError{ErrUnit, "column takes no unit", want}, nil
		}
		return units.Unit{}, nil, nil
	}
	sym := c.unit
	if bracket {
		sym = unit
	}
	u, err := units.Lookup(c.kind, sym)
	if err != nil {
		want := unitWant(c.kind)
		if c.kind == units.Head {
			want += "; convert a pressure to head with the fluid's density"
		}
		msg := err.Error()
		if errors.Is(err, units.ErrUnknownUnit) {
			msg = "unknown unit"
		}
		return units.Unit{}, &numError{ErrUnit, msg, want}, err
	}
	return u, nil, nil
}

// parseNum reads the SI value of a numeric cell: NaN for a blank cell.
func parseNum(c *column, u units.Unit, cv bool, raw string, decimalComma bool) (float64, *numError) {
	if strings.TrimSpace(raw) == "" {
		return nan, nil
	}
	// A fraction may be written as a percentage in the cell, "85 %",
	// whatever the column name says.
	if t, ok := strings.CutSuffix(strings.TrimSpace(raw), "%"); ok && c.kind == units.Dimensionless {
		raw = t
		u, _ = units.Lookup(units.Dimensionless, "%")
	}
	v, ne := parseNumber(raw, decimalComma)
	if ne != nil {
		return nan, ne
	}
	si := v
	if c.kind != 0 {
		si = u.ToSI(v)
	}
	if cv {
		si *= KvPerCv
	}
	if math.IsInf(si, 0) || math.IsNaN(si) {
		return nan, &numError{ErrRange, "number too large", "a finite number"}
	}
	if si != 0 && math.Abs(si) < minMagnitude {
		return nan, &numError{ErrRange, "too small", "0 or a number of sensible size"}
	}
	return si, checkRange(c, u, cv, si)
}

// checkRange tests si against the column's bounds and words the problem in
// the unit the sheet used.
func checkRange(c *column, u units.Unit, cv bool, si float64) *numError {
	// A hair of slack keeps a value at a bound inside it after a
	// conversion to another unit and back.
	lo, hi := c.lo-boundSlack*math.Abs(c.lo), c.hi+boundSlack*math.Abs(c.hi)
	if si >= lo && si <= hi {
		return nil
	}
	show := func(x float64) string {
		if c.kind != 0 {
			x = u.FromSI(x)
		}
		if cv {
			x /= KvPerCv
		}
		s := strconv.FormatFloat(x, 'g', 6, 64)
		if c.kind != 0 && u.Symbol != "" {
			s += " " + u.Symbol
		}
		return s
	}
	what := article(c.what)
	ne := &numError{err: ErrRange}
	switch {
	case si <= 0 && lo > 0 && c.kind != units.Temperature:
		ne.msg, ne.want = "must be positive", what+" above 0"
	case si < 0 && c.lo == 0:
		ne.msg, ne.want = "must not be negative", what+" of 0 or more"
	case si < lo:
		ne.msg, ne.want = "too small", fmt.Sprintf("%s from %s to %s", what, show(c.lo), show(c.hi))
	case c.lo == 0:
		ne.msg, ne.want = "too large", fmt.Sprintf("%s up to %s", what, show(c.hi))
	default:
		ne.msg, ne.want = "too large", fmt.Sprintf("%s from %s to %s", what, show(c.lo), show(c.hi))
	}
	if c.want != "" {
		ne.want = c.want
	}
	return ne
}

func article(noun string) string {
	if noun != "" && strings.ContainsRune("aeiouAEIOU", rune(noun[0])) {
		return "an " + noun
	}
	return "a " + noun
}

// parseWord matches a keyword cell against the column's words, ignoring
// case and treating spaces, hyphens and underscores alike.
func parseWord(words []string, text string) (string, *numError) {
	if text == "" {
		return "", nil
	}
	for _, w := range words {
		if strings.EqualFold(w, text) {
			return w, nil // the usual case, without allocating
		}
	}
	n := normWord(text)
	for _, w := range words {
		if normWord(w) == n {
			return w, nil
		}
	}
	return "", &numError{ErrUnknown, "unknown word", "one of: " + strings.Join(words, ", ")}
}

// checkText refuses control characters (line breaks, tabs) in names.
func checkText(text string) *numError {
	if hasControl(text) {
		return &numError{ErrSyntax, "holds a line break or control character", "text on one line"}
	}
	if at, r, ok := invisibleAt(text); ok {
		return &numError{ErrSyntax, fmt.Sprintf("holds the invisible character %s at character %d", runeName(r), at),
			"visible characters only: retype the text"}
	}
	return nil
}

// invisibleAt returns the first invisible formatting or direction-changing
// character of s (Unicode category Cf: zero-width spaces and joiners,
// direction marks, embeddings, overrides and isolates, the soft hyphen;
// and the line and paragraph separators) with its position in characters
// from 1. Such characters make two names that look alike differ, or make a
// name look other than it is (Unicode Technical Report #36).
func invisibleAt(s string) (at int, r rune, ok bool) {
	n := 0
	for _, c := range s {
		n++
		if unicode.Is(unicode.Cf, c) || c == '\u2028' || c == '\u2029' {
			return n, c, true
		}
	}
	return 0, 0, false
}

// runeNames names the invisible characters most often met in pasted text.
var runeNames = map[rune]string{
	0x00AD: "soft hyphen", 0x061C: "Arabic letter mark", 0x180E: "Mongolian vowel separator",
	0x200B: "zero width space", 0x200C: "zero width non-joiner", 0x200D: "zero width joiner",
	0x200E: "left-to-right mark", 0x200F: "right-to-left mark",
	0x2028: "line separator", 0x2029: "paragraph separator",
	0x202A: "left-to-right embedding", 0x202B: "right-to-left embedding", 0x202C: "pop directional formatting",
	0x202D: "left-to-right override", 0x202E: "right-to-left override",
	0x2060: "word joiner", 0x2066: "left-to-right isolate", 0x2067: "right-to-left isolate",
	0x2068: "first strong isolate", 0x2069: "pop directional isolate", 0xFEFF: "zero width no-break space",
}

// runeName writes r as U+XXXX with its name where known.
func runeName(r rune) string {
	if n, ok := runeNames[r]; ok {
		return fmt.Sprintf("U+%04X (%s)", r, n)
	}
	return fmt.Sprintf("U+%04X (a formatting character)", r)
}

// idKey is the form in which names are compared for duplicates: two ids
// that differ only in letter case, or only in Unicode normalisation (an
// accented letter typed as one character or as a letter and a combining
// accent; a ligature or a full-width letter against plain letters; NFKC,
// Unicode Standard Annex #15), look the same to the people on site and
// are refused as the same id.
func idKey(s string) string { return strings.ToLower(strings.ToUpper(norm.NFKC.String(s))) }

// sameIDMsg says how what, named id, clashes with prev given on line: in
// letter case, or in characters that look alike (both then spelt out in
// ASCII, since on screen they look the same).
func sameIDMsg(what, id, prev string, line int) (msg, want string) {
	if strings.EqualFold(id, prev) {
		return fmt.Sprintf("%s differs from %q on line %d only in letter case", what, prev, line),
			"names that differ in more than letter case"
	}
	return fmt.Sprintf("%s %+q looks the same as %+q on line %d but is written with other characters", what, id, prev, line),
		"names that differ visibly; retype one of them"
}

// MaxNameChars bounds a name a row starts with (a branch id, a valve
// model, a key): every output then holds it whole, in a workbook cell and
// in every message that quotes it.
const MaxNameChars = 256

// checkName is checkText for the name a row starts with when written
// back: it may not start with #, which would make the row a comment, and
// it may not be longer than MaxNameChars.
func checkName(text string) *numError {
	if n := utf8.RuneCountInString(text); n > MaxNameChars {
		return &numError{ErrRange, fmt.Sprintf("name is %d characters long", n), fmt.Sprintf("a name of at most %d characters", MaxNameChars)}
	}
	if strings.HasPrefix(text, "#") {
		return &numError{ErrSyntax, "starts with #", "a name that does not start with #, which marks a comment"}
	}
	return checkText(text)
}

// sheetReader reads the cells of one columnar sheet by column name.
type sheetReader struct {
	t     *table
	sc    *schema
	idx   map[string]int
	units map[string]units.Unit
	cv    map[string]bool
	// broken holds columns named in the header but unusable (a unit that
	// does not fit, a second copy); their cells are not read, and their
	// absence is not reported again.
	broken map[string]bool
	probs  *Problems
}

// bind matches a table's header against a schema, reporting blank,
// duplicate, unknown and missing columns and units that do not fit.
func bind(t *table, sc *schema, probs *Problems) *sheetReader {
	sr := &sheetReader{t: t, sc: sc, idx: map[string]int{}, units: map[string]units.Unit{}, cv: map[string]bool{}, broken: map[string]bool{}, probs: probs}
	width := len(t.header)
	for _, r := range t.rows {
		width = max(width, len(r.cells))
	}
	for i := 0; i < width; i++ {
		h := ""
		if i < len(t.header) {
			h = t.header[i]
		}
		ref := cellRef{file: t.file, line: t.headerLine, col: i + 1, value: h}
		if strings.TrimSpace(h) == "" {
			for _, r := range t.rows {
				if v := r.cell(i); v != "" {
					probs.add(ref.problem(SeverityError, ErrMissing, "blank column name",
						fmt.Sprintf("a name for the column that holds %q on line %d", clip(v), r.line)))
					break
				}
			}
			continue
		}
		name, unit, bracket := splitUnit(h)
		c, cv := sc.find(name)
		if c == nil {
			if open, close, ok := unclosedBracket(name); ok {
				if oc, _ := sc.find(strings.TrimSpace(name[:strings.IndexAny(name, "[(")])); oc != nil {
					ref.field = oc.name
					probs.add(ref.problem(SeverityError, ErrSyntax, fmt.Sprintf("unit bracket %s is not closed", open),
						fmt.Sprintf("%q", strings.TrimSpace(h)+close)))
					sr.broken[oc.name] = true
					continue
				}
			}
			want := "one of: " + strings.Join(sc.names(), ", ")
			if s := suggest(name, sc.names()); s != "" {
				want = fmt.Sprintf("%q", s)
			}
			ref.field = name
			ref.value = ""
			probs.add(ref.problem(SeverityWarning, ErrUnknown, "unknown column, ignored", want))
			continue
		}
		ref.field, ref.value = c.name, ""
		if j, dup := sr.idx[c.name]; dup {
			want := fmt.Sprintf("one %q column; the first is column %d", c.name, j+1)
			if c.cv != "" {
				ref.field = normWord(name)
				want = fmt.Sprintf("one %q or %q column; the first is column %d", c.name, c.cv, j+1)
			}
			probs.add(ref.problem(SeverityError, ErrDuplicate, "column given twice", want))
			continue
		}
		if sc == &readingColumns && c.name == "value" {
			if bracket {
				u, err := units.Find(unit)
				if err != nil || (u.Kind != units.Flow && u.Kind != units.Pressure) {
					ref.value = unit
					msg := "not a flow or pressure unit"
					if err != nil {
						msg = err.Error()
					}
					probs.add(&Error{File: t.file, Line: t.headerLine, Column: i + 1, Field: c.name, Value: unit,
						Err: ErrUnit, Msg: msg, Want: "a flow or pressure unit, or units in the unit column", Cause: err})
					sr.broken[c.name] = true
					continue
				} else {
					sr.units[c.name] = u
				}
			}
			sr.idx[c.name] = i
			continue
		}
		if sc == &readingColumns && c.name == "uncertainty" {
			if bracket && unit != "%" {
				ref.value = unit
				probs.add(ref.problem(SeverityError, ErrUnit, "uncertainty takes % or the row's unit",
					`"uncertainty [%]", or "uncertainty" with values in the row's unit`))
				sr.broken[c.name] = true
				continue
			}
			if bracket {
				sr.units[c.name] = units.Unit{Symbol: "%"}
			}
			sr.idx[c.name] = i
			continue
		}
		u, ne, cause := resolveUnit(c, unit, bracket)
		if ne != nil {
			ref.value = unit
			e := ref.problem(SeverityError, ne.err, ne.msg, ne.want)
			e.Cause = cause
			probs.add(e)
			sr.broken[c.name] = true
			continue
		}
		sr.idx[c.name] = i
		sr.units[c.name] = u
		sr.cv[c.name] = cv
	}
	for _, c := range sc.columns {
		if _, ok := sr.idx[c.name]; c.required && !ok && !sr.broken[c.name] {
			probs.add(&Error{File: t.file, Line: t.headerLine, Field: c.name, Err: ErrMissing,
				Msg: "column is missing", Want: fmt.Sprintf("a column named %q", c.name)})
		}
	}
	t.columns = make(map[string]int, len(sr.idx))
	for name, i := range sr.idx {
		t.columns[name] = i + 1
	}
	return sr
}

func clip(s string) string {
	if r := []rune(s); len(r) > 20 {
		return string(r[:20]) + "..."
	}
	return s
}

func (sr *sheetReader) has(name string) bool {
	_, ok := sr.idx[name]
	return ok
}

// ref returns the location of column name in row r.
func (sr *sheetReader) ref(r row, name string) cellRef {
	ref := cellRef{file: sr.t.file, line: r.line, field: name}
	if i, ok := sr.idx[name]; ok {
		ref.col = i + 1
		ref.value = r.cell(i)
	}
	return ref
}

func (sr *sheetReader) fail(r row, name string, ne *numError) {
	sr.probs.add(sr.ref(r, name).problem(SeverityError, ne.err, ne.msg, ne.want))
}

// num returns the SI value in column name of row r: NaN when the column is
// absent or the cell blank. ok is false when the cell was bad (reported).
func (sr *sheetReader) num(r row, name string) (v float64, ok bool) {
	i, has := sr.idx[name]
	if !has {
		return nan, true
	}
	v, ne := parseNum(sr.sc.column(name), sr.units[name], sr.cv[name], r.rawCell(i), sr.t.decimalComma)
	if ne != nil {
		sr.fail(r, name, ne)
		return nan, false
	}
	if ne := sr.t.convention(r.rawCell(i), r.line); ne != nil {
		sr.fail(r, name, ne)
		return nan, false
	}
	return v, true
}

// numOr is num with a default for a blank cell.
func (sr *sheetReader) numOr(r row, name string, def float64, ok *bool) float64 {
	v, good := sr.num(r, name)
	if !good {
		*ok = false
	}
	if math.IsNaN(v) {
		return def
	}
	return v
}

// need is num for a value that must be given.
func (sr *sheetReader) need(r row, name string, ok *bool) float64 {
	v, good := sr.num(r, name)
	if !good {
		*ok = false
		return v
	}
	if math.IsNaN(v) && sr.has(name) {
		sr.probs.add(sr.ref(r, name).problem(SeverityError, ErrMissing, "blank", "a "+name))
		*ok = false
	}
	return v
}

// text returns the trimmed text in column name of row r.
func (sr *sheetReader) text(r row, name string, ok *bool) string {
	i, has := sr.idx[name]
	if !has {
		return ""
	}
	s := r.cell(i)
	check := checkText
	if name == sr.sc.columns[0].name {
		check = checkName
	}
	if name == "note" {
		// A note is free text: a line break or an invisible character in
		// it is kept out of the outputs, not refused.
		return strings.Map(func(r rune) rune {
			if UnsafeRune(r) {
				return ' '
			}
			return r
		}, s)
	}
	if ne := check(s); ne != nil {
		sr.fail(r, name, ne)
		*ok = false
		return ""
	}
	return s
}

// word returns the keyword in column name of row r, "" when blank.
func (sr *sheetReader) word(r row, name string, ok *bool) string {
	i, has := sr.idx[name]
	if !has {
		return ""
	}
	w, ne := parseWord(sr.sc.column(name).words, r.cell(i))
	if ne != nil {
		sr.fail(r, name, ne)
		*ok = false
	}
	return w
}

// suggest returns the candidate closest to s when it is close enough to be
// a likely slip: the same ignoring case, or at most two edits away.
func suggest(s string, candidates []string) string {
	best, bestD := "", 3
	for _, c := range candidates {
		if strings.EqualFold(c, s) {
			return c
		}
		if len(s) < 3 {
			continue
		}
		if d := editDistance(strings.ToLower(s), strings.ToLower(c)); d < bestD {
			best, bestD = c, d
		}
	}
	return best
}

// editDistance is the Levenshtein distance between a and b, in runes.
func editDistance(a, b string) int {
	ra, rb := []rune(a), []rune(b)
	prev := make([]int, len(rb)+1)
	cur := make([]int, len(rb)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(ra); i++ {
		cur[0] = i
		for j := 1; j <= len(rb); j++ {
			cost := 1
			if ra[i-1] == rb[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev, cur = cur, prev
	}
	return prev[len(rb)]
}

// refWant words what a reference should name, with a likely correction.
func refWant(what string, name string, candidates []string) string {
	if s := suggest(name, candidates); s != "" {
		return fmt.Sprintf("%s; did you mean %q", what, s)
	}
	return what
}

func sortedKeys[V any](m map[string]V) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	slices.Sort(out)
	return out
}
