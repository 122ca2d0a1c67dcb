package report

import (
	"fmt"
	"regexp"
	"strings"
	"testing"
	"unicode/utf8"
)

func TestClean(t *testing.T) {
	const z = "\u200B"
	tests := []struct {
		name, in, want string
	}{
		{"plain text unchanged", "H2-01 classroom wing", "H2-01 classroom wing"},
		{"empty", "", ""},
		{"units and symbols unchanged", "Δp, kPa; 70 °C; 0.5 l/s ± 5 %", "Δp, kPa; 70 °C; 0.5 l/s ± 5 %"},
		{"quotes and backslashes unchanged", `a "b" 'c' \d`, `a "b" 'c' \d`},
		{"closing script tag", "</script><script>alert(1)</script>", "<" + z + "/script><" + z + "script>alert(1)<" + z + "/script>"},
		{"comment opener", "<!--<script>", "<" + z + "!--<" + z + "script>"},
		{"image tag", "<img src=x onerror=alert(1)>", "<" + z + "img src=x onerror=alert(1)>"},
		{"less-than in text", "q < 0.5", "q <" + z + " 0.5"},
		{"raw JS marker", "__f__alert(1)__f__", "__f" + z + "__alert(1)__f" + z + "__"},
		{"overlapping markers", "__f__f__", "__f" + z + "__f" + z + "__"},
		{"marker with quotes", `"__f__alert(1)__f__"`, `"__f` + z + `__alert(1)__f` + z + `__"`},
		{"underscores that are no marker", "a__b f__ __ f", "a__b f__ __ f"},
		{"CDATA end", "]]>", "]]" + z + ">"},
		{"line separators", "a\u2028b\u2029c", "a b c"},
		{"control characters", "a\nb\tc\x00d\x7f", "a b c d "},
		{"invalid UTF-8", "a\xffb", "a\uFFFDb"},
		{"already clean zero-width after less-than", "<" + z + "b", "<" + z + "b"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := Clean(tc.in); got != tc.want {
				t.Errorf("Clean(%q) = %q, want %q", tc.in, got, tc.want)
			}
		})
	}
}

// tagStart matches what an HTML tokenizer would read as the start of a tag,
// comment, doctype or processing instruction.
var tagStart = regexp.MustCompile(`<[A-Za-z/!?]`)

// checkClean fails when s, an output of Clean, still holds anything that
// Clean promises to remove.
func checkClean(t *testing.T, in, s string) {
	t.Helper()
	switch {
	case !utf8.ValidString(s):
		t.Errorf("Clean(%q) = %q: invalid UTF-8", in, s)
	case tagStart.MatchString(s):
		t.Errorf("Clean(%q) = %q: holds a tag start", in, s)
	case strings.Contains(s, funcMarker):
		t.Errorf("Clean(%q) = %q: holds the raw-JS marker", in, s)
	case strings.Contains(s, "]]>"):
		t.Errorf("Clean(%q) = %q: holds a CDATA end", in, s)
	case strings.ContainsAny(s, "\u2028\u2029\n\r\x00"):
		t.Errorf("Clean(%q) = %q: holds a line break or NUL", in, s)
	}
	if again := Clean(s); again != s {
		t.Errorf("Clean is not idempotent on %q: %q then %q", in, s, again)
	}
}

func FuzzClean(f *testing.F) {
	for _, s := range hostile {
		f.Add(s)
	}
	f.Add("__f__f__f__")
	f.Add("<\u200B\u200B<")
	f.Add("]]]>>")
	f.Fuzz(func(t *testing.T, s string) {
		checkClean(t, s, Clean(s))
	})
}

func ExampleClean() {
	s := Clean("</script><script>alert(1)</script>")
	fmt.Println(strings.ReplaceAll(s, "\u200B", "[zwsp]"))
	// Output: <[zwsp]/script><[zwsp]script>alert(1)<[zwsp]/script>
}
