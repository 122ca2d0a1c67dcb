package site

import (
	"bytes"
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"unicode"
	"unicode/utf8"

	"flowset/internal/units"
)

// table is one sheet as text: a header row and data rows, with the line (or
// spreadsheet row) each came from. CSV files and workbook tabs both become
// tables, so every later check and message is the same for both.
type table struct {
	file         string // name used in messages
	headerLine   int
	header       []string
	rows         []row
	decimalComma bool // numbers may use a decimal comma (semicolon or tab separated files)
	// columns is where each field of the sheet's schema is, from 1, once
	// the header is bound.
	columns map[string]int
	// commaLine and pointLine are the first lines whose numbers use a
	// decimal comma and a decimal point, in a file that may use either.
	commaLine, pointLine int
}

// convention checks a number of a file that may use a decimal comma
// against the file's earlier numbers. Such files may mix "0,5" and "0.4"
// (both read as decimals), but a separator followed by exactly three
// digits, "1.500" in a file that elsewhere writes "0,5", is as likely a
// thousands separator (one thousand five hundred) as a decimal: it is
// refused rather than guessed.
func (t *table) convention(cell string, line int) *numError {
	if !t.decimalComma {
		return nil
	}
	c := strings.TrimLeft(strings.TrimSpace(cell), "+-")
	sep, other := ",", &t.pointLine
	mine := &t.commaLine
	if strings.Contains(c, ".") {
		sep, other, mine = ".", &t.commaLine, &t.pointLine
	} else if !strings.Contains(c, ",") {
		return nil
	}
	if *mine == 0 {
		*mine = line
	}
	whole, frac, _ := strings.Cut(c, sep)
	if *other == 0 || len(frac) != 3 || len(whole) == 0 || len(whole) > 3 || strings.Trim(whole+frac, "0123456789") != "" {
		return nil
	}
	words := map[string]string{",": "comma", ".": "point"}
	otherSep := map[string]string{",": ".", ".": ","}[sep]
	return &numError{ErrSyntax,
		fmt.Sprintf("decimal %s or thousands separator? line %d writes numbers with a decimal %s", words[sep], *other, words[otherSep]),
		fmt.Sprintf("the number without a thousands separator (%s%s), or with the file's decimal %s", whole, frac, words[otherSep])}
}

// row is one data row. cells holds the text as shown; raw holds the stored
// value where it differs (a workbook's unformatted number), else the same.
type row struct {
	line  int
	cells []string
	raw   []string
}

func (r row) cell(i int) string {
	if i < 0 || i >= len(r.cells) {
		return ""
	}
	return r.cells[i]
}

func (r row) rawCell(i int) string {
	if i < 0 || i >= len(r.raw) {
		return r.cell(i)
	}
	return r.raw[i]
}

// isComment reports whether a row is a comment: its first cell starts with #.
func isComment(cells []string) bool {
	return len(cells) > 0 && strings.HasPrefix(strings.TrimSpace(cells[0]), "#")
}

func isBlank(cells []string) bool {
	for _, c := range cells {
		if strings.TrimSpace(c) != "" {
			return false
		}
	}
	return true
}

var (
	bomUTF8    = []byte{0xEF, 0xBB, 0xBF}
	bomUTF16LE = []byte{0xFF, 0xFE}
	bomUTF16BE = []byte{0xFE, 0xFF}
)

const wantUTF8 = "UTF-8 text: save the sheet as CSV UTF-8"

// decodeCSV reads a CSV file into a table. It accepts a UTF-8 byte order
// mark, comma, semicolon or tab separators (whichever the header line uses
// most, or the one a spreadsheet's "sep=" first line names) and, when the
// separator is not a comma, decimal commas. Lines may end in LF, CRLF or a
// lone CR (old Mac files). Rows whose first cell starts with # and rows
// with nothing in them are skipped. A line longer than MaxLineBytes or a
// cell longer than MaxCellBytes is refused. The error is ctx's, once done.
func decodeCSV(ctx context.Context, file string, data []byte) (*table, Problems, error) {
	fail := func(line int, err error, msg, want string) (*table, Problems, error) {
		return nil, Problems{{File: file, Line: line, Err: err, Msg: msg, Want: want}}, nil
	}
	if bytes.HasPrefix(data, bomUTF16LE) || bytes.HasPrefix(data, bomUTF16BE) {
		return fail(0, ErrSyntax, "file is UTF-16 text", wantUTF8)
	}
	data = bytes.TrimPrefix(data, bomUTF8)
	if bytes.IndexByte(data, '\n') < 0 && bytes.IndexByte(data, '\r') >= 0 {
		// Lines end in a lone CR: as LF, the line numbers stay right.
		data = bytes.ReplaceAll(data, []byte("\r"), []byte("\n"))
	}
	if n, at := longestLine(data); n > MaxLineBytes {
		return fail(at, ErrRange, fmt.Sprintf("line is longer than %d KiB", MaxLineBytes>>10), "lines of at most 1 MiB: one row of the sheet per line")
	}
	sep, given, err := sepLine(data)
	if err != nil {
		return fail(1, ErrSyntax, err.Error(), `"sep=," "sep=;" or a tab after "sep=", or no sep= line`)
	}
	if given {
		// The line becomes a comment, so line numbers stay right.
		data = append([]byte("#"), data[1:]...)
	} else {
		sep = detectSeparator(data)
	}
	r := csv.NewReader(bytes.NewReader(data))
	r.Comma = sep
	r.Comment = '#'
	r.FieldsPerRecord = -1
	r.TrimLeadingSpace = true
	r.ReuseRecord = false

	t := &table{file: file, decimalComma: sep != ','}
	// One row per line at most: sized once, a million rows do not grow
	// the slice by doubling.
	t.rows = make([]row, 0, bytes.Count(data, []byte("\n"))+1)
	var probs Problems
	for n := 0; ; n++ {
		if n%4096 == 0 {
			if err := ctx.Err(); err != nil {
				return nil, nil, err
			}
		}
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			var pe *csv.ParseError
			line := 0
			msg := err.Error()
			if errors.As(err, &pe) {
				line, msg = pe.StartLine, pe.Err.Error()
			}
			probs = append(probs, &Error{File: file, Line: line, Err: ErrSyntax, Msg: "cannot split line: " + msg,
				Want: `cells separated by one separator, with " only around a whole cell`, Cause: err})
			return nil, probs, nil
		}
		line, _ := r.FieldPos(0)
		bad := false
		for i, c := range rec {
			fl, _ := r.FieldPos(i)
			if len(c) > MaxCellBytes {
				probs = append(probs, &Error{File: file, Line: fl, Column: i + 1, Err: ErrRange,
					Msg: fmt.Sprintf("cell is longer than %d characters", MaxCellBytes), Want: "a shorter cell"})
				bad = true
				break
			}
			if !utf8.ValidString(c) {
				probs = append(probs, &Error{File: file, Line: fl, Column: i + 1, Err: ErrSyntax,
					Msg: "invalid UTF-8 text", Want: wantUTF8, Value: strings.ToValidUTF8(c, "?")})
				bad = true
				break
			}
			rec[i] = strings.TrimSpace(c)
		}
		if bad {
			return nil, probs, nil
		}
		if isComment(rec) || isBlank(rec) {
			continue
		}
		if t.header == nil {
			t.header, t.headerLine = rec, line
			continue
		}
		t.rows = append(t.rows, row{line: line, cells: rec, raw: rec})
	}
	if t.header == nil {
		return fail(0, ErrMissing, "file is empty", "a header line naming the columns")
	}
	return t, probs, nil
}

// longestLine returns the length of the longest line of data and its
// number (from 1).
func longestLine(data []byte) (n, line int) {
	for l := 1; len(data) > 0; l++ {
		i := bytes.IndexByte(data, '\n')
		if i < 0 {
			i = len(data)
		}
		if i > n {
			n, line = i, l
		}
		data = data[min(i+1, len(data)):]
	}
	return n, line
}

// sepLine reads a spreadsheet's "sep=X" first line, which names the
// separator: given is false when there is none.
func sepLine(data []byte) (sep rune, given bool, err error) {
	first, _, _ := bytes.Cut(data, []byte("\n"))
	first = bytes.TrimSuffix(first, []byte("\r"))
	if len(first) < 4 || !strings.EqualFold(string(first[:4]), "sep=") {
		return 0, false, nil
	}
	switch v := string(first[4:]); v {
	case ",", ";", "\t":
		return rune(v[0]), true, nil
	default:
		return 0, false, fmt.Errorf("sep= line names the separator %q, which flowset does not read", v)
	}
}

// detectSeparator picks the separator the first non-comment line uses most,
// counting only outside quotes; comma wins ties.
func detectSeparator(data []byte) rune {
	for len(data) > 0 {
		line := data
		if i := bytes.IndexByte(data, '\n'); i >= 0 {
			line, data = data[:i], data[i+1:]
		} else {
			data = nil
		}
		s := strings.TrimSpace(string(line))
		if s == "" || strings.HasPrefix(s, "#") {
			continue
		}
		counts := map[rune]int{}
		quoted := false
		for _, c := range s {
			switch {
			case c == '"':
				quoted = !quoted
			case !quoted && (c == ',' || c == ';' || c == '\t'):
				counts[c]++
			}
		}
		best := ','
		for _, c := range []rune{';', '\t'} {
			if counts[c] > counts[best] {
				best = c
			}
		}
		return best
	}
	return ','
}

// numError describes why a cell is not a usable number.
type numError struct {
	err  error
	msg  string
	want string
}

// parseNumber reads a plain decimal number: optional sign, digits with an
// optional decimal point (or comma when decimalComma), optional exponent.
// Hex floats, digit separators, "inf" and "nan" are refused: they are not
// what anyone types on a survey sheet, and strconv would accept them.
func parseNumber(s string, decimalComma bool) (float64, *numError) {
	t := strings.TrimSpace(s)
	if strings.Contains(t, ",") {
		if !decimalComma {
			return 0, &numError{ErrSyntax, "not a number: a decimal comma needs a semicolon-separated file", "a number with a decimal point, such as 1.5"}
		}
		if strings.Contains(t, ".") || strings.Count(t, ",") > 1 {
			return 0, &numError{ErrSyntax, "not a number: mixes decimal point and comma", "a number such as 1,5 without thousands separators"}
		}
		t = strings.Replace(t, ",", ".", 1)
	}
	switch strings.ToLower(strings.TrimLeft(t, "+-")) {
	case "nan", "inf", "infinity":
		return 0, &numError{ErrRange, "not a finite number", "a finite number"}
	}
	if !plainNumber(t) {
		if unitSuffix(t) {
			return 0, &numError{ErrSyntax, "not a number: units go in the column name", "a bare number; name the unit in the header, e.g. \"design flow [l/s]\""}
		}
		return 0, &numError{ErrSyntax, "not a number", "a number such as 1.5"}
	}
	v, err := strconv.ParseFloat(t, 64)
	if err != nil || math.IsInf(v, 0) {
		return 0, &numError{ErrRange, "number too large", "a finite number"}
	}
	if v != 0 && math.Abs(v) < 0x1p-1022 || v == 0 && strings.ContainsAny(mantissa(t), "123456789") {
		return 0, &numError{ErrRange, "number too small to hold", "0 or a number of sensible size"}
	}
	return v, nil
}

func mantissa(t string) string {
	if i := strings.IndexAny(t, "eE"); i >= 0 {
		return t[:i]
	}
	return t
}

// plainNumber matches [+-]? (d+ (. d*)? | . d+) ([eE] [+-]? d+)?.
func plainNumber(t string) bool {
	i := 0
	if i < len(t) && (t[i] == '+' || t[i] == '-') {
		i++
	}
	digits := 0
	for i < len(t) && t[i] >= '0' && t[i] <= '9' {
		i++
		digits++
	}
	if i < len(t) && t[i] == '.' {
		i++
		for i < len(t) && t[i] >= '0' && t[i] <= '9' {
			i++
			digits++
		}
	}
	if digits == 0 {
		return false
	}
	if i < len(t) && (t[i] == 'e' || t[i] == 'E') {
		i++
		if i < len(t) && (t[i] == '+' || t[i] == '-') {
			i++
		}
		exp := 0
		for i < len(t) && t[i] >= '0' && t[i] <= '9' {
			i++
			exp++
		}
		if exp == 0 {
			return false
		}
	}
	return i == len(t)
}

// unitSuffix reports whether t looks like a number followed by a unit, such
// as "2.5 l/s" or "30kPa".
func unitSuffix(t string) bool {
	i := strings.IndexFunc(t, func(r rune) bool { return unicode.IsLetter(r) || r == '%' || r == '°' })
	if i <= 0 || !plainNumber(strings.TrimSpace(strings.Replace(t[:i], ",", ".", 1))) {
		return false
	}
	_, err := units.Find(t[i:])
	return err == nil
}

// hasControl reports whether s holds a control character.
func hasControl(s string) bool {
	return strings.IndexFunc(s, unicode.IsControl) >= 0
}
