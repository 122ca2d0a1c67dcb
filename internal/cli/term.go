package cli

import (
	"fmt"
	"io"
	"os"
	"strings"
	"unicode"
	"unicode/utf8"

	"golang.org/x/term"
)

func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	return ok && term.IsTerminal(int(f.Fd()))
}

// unsafeRune reports whether r must not reach a terminal or a text output
// as itself: a control character (which can move the cursor, recolour or
// retitle a terminal, or start a forged line) or an invisible formatting or
// direction-changing character (which can make text look other than it is,
// Unicode Technical Report #36 "Unicode Security Considerations").
func unsafeRune(r rune) bool {
	return unicode.IsControl(r) || unicode.Is(unicode.Cf, r) || r == utf8.RuneError ||
		r == '\u2028' || r == '\u2029'
}

// termSafe returns s with every unsafe rune (see unsafeRune), newlines and
// tabs included, written as a Go escape (\n, \x1b, \u202e), so a path or a
// name from the user prints as one visible line that shows what it holds.
func termSafe(s string) string {
	if strings.IndexFunc(s, unsafeRune) < 0 && utf8.ValidString(s) {
		return s
	}
	var b strings.Builder
	for i, w := 0, 0; i < len(s); i += w {
		r, n := utf8.DecodeRuneInString(s[i:])
		w = n
		switch {
		case r == utf8.RuneError && n == 1:
			fmt.Fprintf(&b, `\x%02x`, s[i])
		case r == '\n':
			b.WriteString(`\n`)
		case r == '\r':
			b.WriteString(`\r`)
		case r == '\t':
			b.WriteString(`\t`)
		case r < 0x80 && unsafeRune(r):
			fmt.Fprintf(&b, `\x%02x`, r)
		case unsafeRune(r):
			fmt.Fprintf(&b, `\u%04x`, r)
		default:
			b.WriteRune(r)
		}
	}
	return b.String()
}

// safeWriter is the last guard before the standard streams: every control
// character other than newline and tab, and every invisible or
// direction-changing character, is escaped as termSafe does. Paths and
// names are made safe where they are printed (so a newline in a name cannot
// forge a line); this catches anything that slipped through.
type safeWriter struct{ w io.Writer }

func (s *safeWriter) Write(p []byte) (int, error) {
	clean := true
	for i, w := 0, 0; i < len(p); i += w {
		r, n := utf8.DecodeRune(p[i:])
		w = n
		if r != '\n' && r != '\t' && unsafeRune(r) {
			clean = false
			break
		}
	}
	if clean {
		return s.w.Write(p)
	}
	var b strings.Builder
	for i, w := 0, 0; i < len(p); i += w {
		r, n := utf8.DecodeRune(p[i:])
		w = n
		if r == '\n' || r == '\t' || !unsafeRune(r) {
			b.Write(p[i : i+n])
			continue
		}
		b.WriteString(termSafe(string(p[i : i+n])))
	}
	if _, err := io.WriteString(s.w, b.String()); err != nil {
		return 0, err
	}
	return len(p), nil
}
