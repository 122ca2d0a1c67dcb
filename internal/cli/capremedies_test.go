package cli

import (
	"fmt"
	"testing"

	"github.com/google/go-cmp/cmp"
)

func TestCapRemedies(t *testing.T) {
	fix := func(i int) string { return fmt.Sprintf("%sfit a smaller valve on B%d", remedyPrefix, i) }
	head := []string{"Short after the plan: B1 and 9 more.", "Why: the pump is short."}
	tail := "Set the valves as below all the same."
	many := append(append([]string(nil), head...), fix(1), fix(2), fix(3), fix(4), tail)
	tests := []struct {
		name  string
		lines []string
		max   int
		want  []string
	}{
		{"no fixes", []string{head[0], tail}, 2, []string{head[0], tail}},
		{"at the cap", many, 4, many},
		{"over the cap", many, 2, append(append([]string(nil), head...), fix(1), fix(2),
			`2 more fixes like these: every one is in plan.json ("remedies") and in the report.`, tail)},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if diff := cmp.Diff(tc.want, capRemedies(tc.lines, tc.max)); diff != "" {
				t.Errorf("capRemedies (-want +got):\n%s", diff)
			}
		})
	}
}

func TestCapWarnings(t *testing.T) {
	w := func(i int) string { return fmt.Sprintf("readings.csv:%d:4: warning: small differential", i) }
	three := []string{w(2), w(3), w(4)}
	tests := []struct {
		name  string
		lines []string
		max   int
		want  []string
	}{
		{"none", nil, 2, nil},
		{"at the cap", three, 3, three},
		{"over the cap", three, 2, []string{w(2), w(3),
			"... and 1 more warnings: 'flowset check' on the site lists every one with its line; the report groups them."}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if diff := cmp.Diff(tc.want, capWarnings(tc.lines, tc.max)); diff != "" {
				t.Errorf("capWarnings (-want +got):\n%s", diff)
			}
			if len(tc.lines) == 3 && tc.lines[2] != w(4) {
				t.Errorf("capWarnings changed its input: %q", tc.lines)
			}
		})
	}
}
