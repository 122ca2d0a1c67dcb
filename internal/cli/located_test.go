package cli

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestProblemsLocated gives sites whose problems are found past the sheet
// readers (by the model) or come with warnings: every problem must be
// listed in the one pass, at its file and line, with numbers as people
// write them and the path said once.
func TestProblemsLocated(t *testing.T) {
	for _, c := range []struct {
		name string
		file string // replaced in the demo site
		text string
		edit func(string) string // or an edit of the demo's file
		want []string
		not  []string
	}{
		{name: "pump curve rising with flow", file: "pump.csv", text: "flow [l/s],head [m]\n0,5\n3,6\n6,7\n8,8\n",
			want: []string{`pump.csv:5:2: field "head": fitted head rises with flow (468 m per m3/s) at the highest flow 0.008 m3/s`,
				`pump.csv:3:2: warning: field "head": value "6": head rises with flow`}},
		{name: "flows beyond the pump", file: "pump.csv", text: "flow [l/s],head [m]\n0,1\n0.1,0.9\n0.2,0.5\n",
			want: []string{`readings.csv:3:4: field "value": value "9.46 l/s": flow above the 0.275 l/s the pump can give at its highest speed`}},
		{name: "water below its table", file: "site.csv", edit: func(s string) string {
			return strings.Replace(s, "temperature [degC],70", "temperature [degC],-20", 1)
		}, want: []string{`site.csv:5:2: field "temperature": value "-20": outside the fluid property tables (want water: temperature 253.15 K`},
			not: []string{"253.1499"}},
		{name: "unit bracket not closed, with a warning", file: "branches.csv", edit: func(s string) string {
			return strings.Replace(strings.Replace(s, "design flow [l/s]", "design flow [l/s", 1), "roughness [mm]", "roughnes [mm]", 1)
		}, want: []string{`branches.csv:1:3: field "design flow": value "design flow [l/s": unit bracket [ is not closed`,
			`branches.csv:1:8: warning: field "roughnes": unknown column, ignored (want "roughness")`},
			not: []string{"column is missing"}},
	} {
		t.Run(c.name, func(t *testing.T) {
			dir := mkdir(t, filepath.Join(t.TempDir(), "site"))
			copySite(t, "demo", dir)
			p := filepath.Join(dir, c.file)
			text := c.text
			if c.edit != nil {
				b, err := os.ReadFile(p)
				if err != nil {
					t.Fatal(err)
				}
				text = c.edit(string(b))
			}
			mustWrite(t, p, text)
			code, out, errs := run(t, "check", dir)
			said := out + errs
			if code != ExitData {
				t.Errorf("check: exit %d, want 1", code)
			}
			for _, w := range c.want {
				if !strings.Contains(said, w) {
					t.Errorf("check does not say %q:\n%s", w, said)
				}
			}
			for _, w := range c.not {
				if strings.Contains(said, w) {
					t.Errorf("check says %q:\n%s", w, said)
				}
			}
			for _, line := range strings.Split(said, "\n") {
				if strings.Count(line, dir) > 1 {
					t.Errorf("the path is said twice in %q", line)
				}
			}
		})
	}
}
