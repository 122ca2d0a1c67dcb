package cli

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestTrimDemo plans the demo, then trims it taking its second survey state
// as the one read after setting (its valves at the plan's settings wherever
// its readings record none), and checks what trim writes and says.
func TestTrimDemo(t *testing.T) {
	dir := t.TempDir()
	plan := filepath.Join(dir, "plan")
	if code, _, stderr := run(t, "plan", surveyDir("demo"), "--out", plan, "--quiet"); code != 0 {
		t.Fatalf("plan: exit %d: %s", code, stderr)
	}
	out := filepath.Join(dir, "trim")
	code, stdout, stderr := run(t, "trim", surveyDir("demo"), "--plan", filepath.Join(plan, "plan.json"), "--out", out)
	if code != 0 && code != 5 {
		t.Fatalf("trim: exit %d: %s", code, stderr)
	}
	for _, want := range []string{"Trim after setting", "proven in tolerance", "Pump"} {
		if !strings.Contains(stdout, want) {
			t.Errorf("console lacks %q:\n%s", want, stdout)
		}
	}
	b, err := os.ReadFile(filepath.Join(out, "trim.json"))
	if err != nil {
		t.Fatal(err)
	}
	var tj struct {
		State    string `json:"as_left_state"`
		Branches []struct {
			ID      string   `json:"branch"`
			Left    *float64 `json:"as_left_setting"`
			New     *float64 `json:"new_setting"`
			Trimmed bool     `json:"trimmed"`
			Verdict string   `json:"verdict"`
		} `json:"branches"`
	}
	if err := json.Unmarshal(b, &tj); err != nil {
		t.Fatal(err)
	}
	if tj.State != "after-change" || len(tj.Branches) == 0 {
		t.Fatalf("trim.json: state %q, %d branches", tj.State, len(tj.Branches))
	}
	for _, br := range tj.Branches {
		if br.Left != nil && br.New != nil && (*br.Left != *br.New) != br.Trimmed {
			t.Errorf("%s: trimmed %v, setting %v -> %v", br.ID, br.Trimmed, *br.Left, *br.New)
		}
		if br.Verdict == "" {
			t.Errorf("%s: no verdict", br.ID)
		}
	}
	if _, err := os.Stat(filepath.Join(out, "trim.csv")); err != nil {
		t.Error(err)
	}
}

func TestTrimRefused(t *testing.T) {
	dir := t.TempDir()
	plan := filepath.Join(dir, "plan")
	if code, _, stderr := run(t, "plan", surveyDir("demo"), "--out", plan, "--quiet"); code != 0 {
		t.Fatalf("plan: exit %d: %s", code, stderr)
	}
	other := filepath.Join(dir, "other.json")
	if err := os.WriteFile(other, []byte(`{"branches":[{"branch":"NOPE","new_setting":1}],"pump":{}}`), 0o644); err != nil {
		t.Fatal(err)
	}
	broken := filepath.Join(dir, "broken.json")
	if err := os.WriteFile(broken, []byte(`{"branches":[`), 0o644); err != nil {
		t.Fatal(err)
	}
	pj := filepath.Join(plan, "plan.json")
	for _, tc := range []struct {
		name string
		args []string
		code int
		want string
	}{
		{"no plan", []string{"trim", surveyDir("demo")}, 2, "--plan is required"},
		{"plan missing", []string{"trim", surveyDir("demo"), "--plan", filepath.Join(dir, "none.json")}, 2, "no such file"},
		{"plan of another site", []string{"trim", surveyDir("demo"), "--plan", other}, 1, `value "NOPE": no such branch`},
		{"plan not JSON", []string{"trim", surveyDir("demo"), "--plan", broken}, 1, "broken.json"},
		{"unknown state", []string{"trim", surveyDir("demo"), "--plan", pj, "--state", "later"}, 2, `--state "later": no such survey state`},
		{"the as-found state", []string{"trim", surveyDir("demo"), "--plan", pj, "--state", "as-found"}, 2, "is the as-found state"},
		{"one state only", []string{"trim", surveyDir("plantroom"), "--plan", pj}, 1, "state(s)"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			code, _, stderr := run(t, tc.args...)
			if code != tc.code || !strings.Contains(stderr, tc.want) {
				t.Errorf("exit %d, stderr %q; want exit %d and %q", code, stderr, tc.code, tc.want)
			}
		})
	}
}
