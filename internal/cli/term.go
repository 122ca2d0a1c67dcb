package cli

import (
	"io"
	"os"
	"strings"
	"unicode/utf8"

	"golang.org/x/term"

	"flowset/internal/site"
)

func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	return ok && term.IsTerminal(int(f.Fd()))
}

// unsafeRune is site.UnsafeRune.
func unsafeRune(r rune) bool { return site.UnsafeRune(r) }

// termSafe is site.Printable: a path or a name from the user prints as one
// visible line that shows what it holds.
func termSafe(s string) string { return site.Printable(s) }

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
