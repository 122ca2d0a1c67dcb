package site

import (
	"cmp"
	"errors"
	"fmt"
	"slices"
	"strconv"
	"strings"
	"unicode"
	"unicode/utf8"
)

// The causes an Error wraps; test with errors.Is.
var (
	ErrSyntax    = errors.New("malformed text")         // text that is not what the field takes
	ErrUnit      = errors.New("unit does not fit")      // a unit of the wrong kind or an unknown one
	ErrRange     = errors.New("value out of range")     // a number or word outside what is allowed
	ErrMissing   = errors.New("missing")                // a file, column or value that is required
	ErrDuplicate = errors.New("duplicate")              // a name given twice
	ErrUnknown   = errors.New("unknown name")           // a column, key, file or word not known
	ErrReference = errors.New("reference to a missing") // a name that refers to nothing
)

// Severity tells whether a problem stops the site from being used.
type Severity int

// The severities.
const (
	SeverityError   Severity = iota // the site cannot be used until it is fixed
	SeverityWarning                 // the site is used, but something looks wrong
)

// String returns "error" or "warning".
func (s Severity) String() string {
	if s == SeverityWarning {
		return "warning"
	}
	return "error"
}

// Error is one problem in a site's sheets. Line and Column count from 1 (a
// CSV line or a spreadsheet row; a column number); 0 means not applicable.
type Error struct {
	File     string
	Line     int
	Column   int
	Field    string // the column or key, without its unit
	Value    string // the text of the cell
	Severity Severity
	Err      error  // one of ErrSyntax, ErrUnit, ErrRange, ErrMissing, ErrDuplicate, ErrUnknown, ErrReference
	Msg      string // what is wrong, in words; Err's text when empty
	Want     string // what was expected
	// Cause is the lower-level error behind Err, if any (for example a
	// units error wrapping units.ErrWrongKind).
	Cause error
}

// maxValueShown limits how much of a cell an error message quotes.
const maxValueShown = 60

// Error formats the problem as
// file:line:column: [warning: ]field "f": value "v": message (want ...),
// leaving out the parts that are empty.
func (e *Error) Error() string {
	var b strings.Builder
	b.WriteString(Printable(e.File))
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
		if e.Column > 0 {
			fmt.Fprintf(&b, ":%d", e.Column)
		}
	}
	if b.Len() > 0 {
		b.WriteString(": ")
	}
	if e.Severity == SeverityWarning {
		b.WriteString("warning: ")
	}
	if e.Field != "" {
		fmt.Fprintf(&b, "field %q: ", e.Field)
	}
	if e.Value != "" {
		v := e.Value
		if r := []rune(v); len(r) > maxValueShown {
			v = string(r[:maxValueShown]) + "..."
		}
		fmt.Fprintf(&b, "value %q: ", v)
	}
	msg := e.Msg
	if msg == "" && e.Err != nil {
		msg = e.Err.Error()
	}
	b.WriteString(msg)
	if e.Want != "" {
		fmt.Fprintf(&b, " (want %s)", e.Want)
	}
	return b.String()
}

// Unwrap returns the cause and the lower-level error, so errors.Is finds both.
func (e *Error) Unwrap() []error {
	var out []error
	if e.Err != nil {
		out = append(out, e.Err)
	}
	if e.Cause != nil {
		out = append(out, e.Cause)
	}
	return out
}

// Problems is every problem found in a site, errors and warnings, sorted by
// file, line and column.
type Problems []*Error

// Err returns nil when p holds no errors (warnings alone do not count), and
// otherwise the errors of p as an error.
func (p Problems) Err() error {
	errs := p.Errors()
	if len(errs) == 0 {
		return nil
	}
	return errs
}

// Errors returns the problems of error severity.
func (p Problems) Errors() Problems { return p.filter(SeverityError) }

// Warnings returns the problems of warning severity.
func (p Problems) Warnings() Problems { return p.filter(SeverityWarning) }

func (p Problems) filter(s Severity) Problems {
	var out Problems
	for _, e := range p {
		if e.Severity == s {
			out = append(out, e)
		}
	}
	return out
}

// Error lists the problems one to a line.
func (p Problems) Error() string {
	lines := make([]string, len(p))
	for i, e := range p {
		lines[i] = e.Error()
	}
	return strings.Join(lines, "\n")
}

// Unwrap returns the problems as errors, so errors.Is and errors.As look
// through all of them.
func (p Problems) Unwrap() []error {
	out := make([]error, len(p))
	for i, e := range p {
		out[i] = e
	}
	return out
}

// Sort orders the problems by file, line and column, keeping the order of
// problems at one place.
func (p Problems) Sort() {
	slices.SortStableFunc(p, func(a, b *Error) int {
		return cmp.Or(cmp.Compare(a.File, b.File), cmp.Compare(a.Line, b.Line), cmp.Compare(a.Column, b.Column))
	})
}

// UnsafeRune reports whether r must not reach a terminal or an output as
// itself: a control character (it can move the cursor, recolour a terminal
// or start a forged line), an invisible formatting or direction-changing
// character (it can make text look other than it is; Unicode Technical
// Report #36, "Unicode Security Considerations"), or a line or paragraph
// separator.
func UnsafeRune(r rune) bool {
	return unicode.IsControl(r) || unicode.Is(unicode.Cf, r) || r == '\u2028' || r == '\u2029' || r == utf8.RuneError
}

// Printable returns s with each unsafe rune (see UnsafeRune), newlines and
// tabs included, written as a Go escape (\n, \x1b, \u202e), so that a file
// path or name shows on one line what it really holds. Everything printed
// or written that comes from a path or an id passes through it.
func Printable(s string) string {
	if strings.IndexFunc(s, UnsafeRune) < 0 {
		return s
	}
	var b strings.Builder
	for i, w := 0, 0; i < len(s); i += w {
		r, n := utf8.DecodeRuneInString(s[i:])
		w = n
		switch {
		case r == utf8.RuneError && n == 1:
			fmt.Fprintf(&b, `\x%02x`, s[i])
		case !UnsafeRune(r):
			b.WriteRune(r)
		case r < 0x80:
			q := strconv.QuoteRune(r)
			b.WriteString(q[1 : len(q)-1])
		default:
			fmt.Fprintf(&b, `\u%04x`, r)
		}
	}
	return b.String()
}
