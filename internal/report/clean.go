package report

import (
	"strings"
	"unicode"
	"unicode/utf8"
)

// zwsp is U+200B ZERO WIDTH SPACE: invisible in charts, yet it splits a
// token in two for every parser that could otherwise act on it.
const zwsp = "\u200B"

// funcMarker is the string go-echarts (opts/js.go) wraps around raw
// JavaScript; its page renderer strips the quotes around anything so marked.
const funcMarker = "__f__"

// Clean makes a user-supplied string harmless for the chart library. Every
// string from the Input that reaches go-echarts (titles, series, axis and
// category names, point names, tooltips) passes through Clean exactly once.
//
// go-echarts writes chart options into a script block without HTML escaping
// and turns text between two funcMarkers into live JavaScript; echarts shows
// tooltips as HTML. Clean therefore:
//   - puts a zero-width space after every '<', so no tag, "</script",
//     "<!--" or "<![CDATA[" can form;
//   - breaks every funcMarker and every "]]>" with a zero-width space;
//   - turns U+2028, U+2029 and other control characters into spaces, since
//     they end lines in older JavaScript parsers and break chart labels;
//   - replaces invalid UTF-8 with U+FFFD.
//
// Clean(Clean(s)) == Clean(s). Text shown outside the charts does not use
// Clean: html/template escapes it.
func Clean(s string) string {
	if !utf8.ValidString(s) {
		s = strings.ToValidUTF8(s, "\uFFFD")
	}
	var b strings.Builder
	b.Grow(len(s) + 8)
	for i, r := range s {
		switch {
		case r == '<':
			b.WriteByte('<')
			if !strings.HasPrefix(s[i+1:], zwsp) {
				b.WriteString(zwsp)
			}
		case r == '\u2028' || r == '\u2029' || unicode.IsControl(r):
			b.WriteByte(' ')
		default:
			b.WriteRune(r)
		}
	}
	out := b.String()
	// One pass leaves a new marker in "__f__f__"; repeat until none is left.
	for strings.Contains(out, funcMarker) {
		out = strings.ReplaceAll(out, funcMarker, "__f"+zwsp+"__")
	}
	return strings.ReplaceAll(out, "]]>", "]]"+zwsp+">")
}

// cleanAll returns Clean of each string.
func cleanAll(ss []string) []string {
	out := make([]string, len(ss))
	for i, s := range ss {
		out[i] = Clean(s)
	}
	return out
}
