package cli

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestTwoPumpsLikeOne runs the demo site with its pump given as two
// identical pumps in parallel, each with the demo pump's points at half the
// flow. Flows add at equal head (the parallel rule of pump handbooks, from
// memory), so the two together are the demo pump exactly: the fit and the
// plan must give the same settings, flows and speed. Run with one of them
// standing by, the other runs at its own point; the plan says whether one
// pump fewer serves.
func TestTwoPumpsLikeOne(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "site")
	if err := os.CopyFS(dir, os.DirFS(surveyDir("demo"))); err != nil {
		t.Fatal(err)
	}
	pump := "pump,flow [l/s],head [m]\n"
	for _, id := range []string{"P1", "P2"} {
		for _, pt := range [][2]string{{"0", "21.5"}, {"1.5", "20.8"}, {"3", "19"}, {"4", "17.2"}, {"5", "14.8"}} {
			pump += id + "," + pt[0] + "," + pt[1] + "\n"
		}
	}
	if err := os.WriteFile(filepath.Join(dir, "pump.csv"), []byte(pump), 0o644); err != nil {
		t.Fatal(err)
	}
	plan := func(site string) map[string]any {
		t.Helper()
		code, out, errs := run(t, "plan", "--json", site)
		if code != ExitOK {
			t.Fatalf("plan %s: exit %d: %s", site, code, errs)
		}
		var v map[string]any
		if err := json.Unmarshal([]byte(out), &v); err != nil {
			t.Fatal(err)
		}
		return v
	}
	one, two := plan(surveyDir("demo")), plan(dir)
	p1, p2 := one["pump"].(map[string]any), two["pump"].(map[string]any)
	for _, k := range []string{"speed_ratio", "after_differential_pa", "after_flow_m3_s", "electrical_power_after_w"} {
		if a, b := p1[k].(float64), p2[k].(float64); math.Abs(b/a-1) > 1e-6 {
			t.Errorf("%s: %.9g with two pumps, %.9g with one", k, b, a)
		}
	}
	if _, ok := p1["pumps"]; ok {
		t.Errorf("one pump's plan has a pumps section")
	}
	b1, b2 := one["branches"].([]any), two["branches"].([]any)
	if len(b1) != len(b2) || len(b1) == 0 {
		t.Fatalf("%d branches with one pump, %d with two", len(b1), len(b2))
	}
	for i := range b1 {
		x, y := b1[i].(map[string]any), b2[i].(map[string]any)
		if x["new_setting"] != y["new_setting"] || math.Abs(y["predicted_m3_s"].(float64)/x["predicted_m3_s"].(float64)-1) > 1e-6 {
			t.Errorf("branch %v: setting %v, flow %v with two pumps; %v, %v with one", x["branch"], y["new_setting"], y["predicted_m3_s"], x["new_setting"], x["predicted_m3_s"])
		}
	}
	ps := p2["pumps"].(map[string]any)
	duties := ps["duties"].([]any)
	if ps["running"].(float64) != 2 || len(duties) != 2 {
		t.Fatalf("pumps = %v, want two running", ps)
	}
	q := p2["after_flow_m3_s"].(float64)
	for _, d := range duties {
		if f := d.(map[string]any)["flow_m3_s"].(float64); math.Abs(f/(q/2)-1) > 1e-9 {
			t.Errorf("pump %v gives %.9g m3/s, want half of %.9g", d.(map[string]any)["pump"], f, q)
		}
	}
	fewer := ps["one_fewer"].(map[string]any)
	// One pump alone at full speed gives the demo pump's head at twice the
	// flow: whether it serves follows from that.
	serves := fewer["available_differential_pa"].(float64) >= p2["after_differential_pa"].(float64)
	if fewer["serves"].(bool) != serves {
		t.Errorf("one fewer: %v", fewer)
	}
	code, out, errs := run(t, "plan", dir)
	if code != ExitOK || !strings.Contains(out, "P1 and P2 run in parallel") || !strings.Contains(out, "One pump fewer") {
		t.Errorf("plan console: exit %d, %s\n%s", code, errs, out)
	}
	// Duty and standby: P1 alone, the survey read with both running.
	appendLine(t, filepath.Join(dir, "site.csv"), "pumps running,1")
	code, out, errs = run(t, "plan", dir)
	if code != ExitOK && code != ExitShort || !strings.Contains(out, "P1 runs (P2 stands by)") {
		t.Errorf("duty and standby: exit %d, %s\n%s", code, errs, out)
	}
	for _, cmd := range []string{"check", "curves"} {
		if code, _, errs := run(t, cmd, dir); code != ExitOK {
			t.Errorf("%s: exit %d: %s", cmd, code, errs)
		}
	}
}

// TestThreePortSite runs the demo with its first air handler a three-port
// terminal (bypass valve V40 at 4 turns) read through its bypass in the
// survey's second state: check passes, the plan sets the bypass valve (a
// row of its own, and the plan's JSON), and the fit uses the readings of
// both positions.
func TestThreePortSite(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "site")
	if err := os.CopyFS(dir, os.DirFS(surveyDir("demo"))); err != nil {
		t.Fatal(err)
	}
	edit := func(name string, f func(line string, k int) string) {
		t.Helper()
		path := filepath.Join(dir, name)
		b, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		lines := strings.Split(strings.TrimRight(string(b), "\n"), "\n")
		for k := range lines {
			lines[k] = f(lines[k], k)
		}
		if err := os.WriteFile(path, []byte(strings.Join(lines, "\n")+"\n"), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	edit("branches.csv", func(l string, k int) string {
		switch {
		case k == 0:
			return l + ",bypass valve,bypass setting"
		case strings.HasPrefix(l, "AHU-1,"):
			return l + ",V40,4"
		}
		return l + ",,"
	})
	edit("readings.csv", func(l string, k int) string {
		switch {
		case k == 0:
			return l + ",position"
		case strings.HasPrefix(l, "after-change,AHU-1,"):
			return l + ",bypass"
		}
		return l + ","
	})
	if code, out, errs := run(t, "check", dir); code != ExitOK {
		t.Fatalf("check: exit %d: %s\n%s", code, errs, out)
	}
	code, out, errs := run(t, "plan", dir)
	if code != ExitOK && code != ExitShort || !strings.Contains(out, "AHU-1 bypass") || !strings.Contains(out, "(full bypass = full coil flow)") {
		t.Errorf("plan: exit %d, %s\n%s", code, errs, out)
	}
	code, out, errs = run(t, "plan", "--json", dir)
	if code != ExitOK && code != ExitShort {
		t.Fatalf("plan --json: exit %d: %s", code, errs)
	}
	var v map[string]any
	if err := json.Unmarshal([]byte(out), &v); err != nil {
		t.Fatal(err)
	}
	b0 := v["branches"].([]any)[0].(map[string]any)
	by, ok := b0["bypass"].(map[string]any)
	if b0["branch"] != "AHU-1" || !ok || by["valve"] != "V40" || !(by["kv_required"].(float64) > 0) {
		t.Errorf("first branch %v: want AHU-1 with its bypass V40 and a Kv", b0)
	}
	if b1 := v["branches"].([]any)[1].(map[string]any); b1["bypass"] != nil {
		t.Errorf("second branch %v has a bypass", b1["branch"])
	}
}
