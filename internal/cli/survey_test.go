package cli

import (
	"path/filepath"
	"strconv"
	"testing"
)

// TestSurveyRoute plans the demo from its design alone with a 30-minute
// survey: survey-route.csv must hold the best-ranked readings that fit in
// the time (none left out that would still fit after the ones taken), in
// the plant's order (the pump first, then the branches as the field sheet
// walks them), and its running total must stay within the time.
func TestSurveyRoute(t *testing.T) {
	out := filepath.Join(t.TempDir(), "out")
	if code, _, errs := run(t, "run", surveyDir("demo"), "--design-only", "--survey-minutes", "30", "--out", out); code != ExitOK && code != ExitShort {
		t.Fatalf("run: exit %d: %s", code, errs)
	}
	route := readCSV(t, filepath.Join(out, "survey-route.csv"))
	ranked := readCSV(t, filepath.Join(out, "read-next.csv"))
	sheet := readCSV(t, filepath.Join(out, "field-sheet.csv"))
	if len(route) < 2 {
		t.Fatalf("survey-route.csv has no readings: %v", route)
	}
	stop := map[string]int{"pump": 0}
	for k, r := range sheet[1:] {
		stop[r[1]] = k + 1
	}
	// Which ranked readings fit in 30 minutes, taken in rank order.
	want := map[string]bool{}
	used := 0.0
	for _, r := range ranked[1:] {
		m, err := strconv.ParseFloat(r[6], 64)
		if err != nil {
			t.Fatal(err)
		}
		if used+m <= 30 {
			used += m
			want[r[0]] = true
		}
	}
	last, total := -1, 0.0
	for _, r := range route[1:] {
		if !want[r[8]] {
			t.Errorf("route stop %s (rank %s, %s) is not among the readings that fit", r[0], r[8], r[1])
		}
		delete(want, r[8])
		s, ok := stop[r[1]]
		if !ok {
			t.Errorf("route stop %s at %q: no such place on the field sheet", r[0], r[1])
		}
		if s < last {
			t.Errorf("route stop %s at %s comes after a later place in the walk", r[0], r[1])
		}
		last = s
		m, _ := strconv.ParseFloat(r[6], 64)
		total += m
		if so, _ := strconv.ParseFloat(r[7], 64); so != total {
			t.Errorf("route stop %s: minutes so far %s, want %g", r[0], r[7], total)
		}
	}
	if total > 30 {
		t.Errorf("the route takes %g minutes, more than the 30 allowed", total)
	}
	if len(want) > 0 {
		t.Errorf("readings that fit but are not on the route: ranks %v", want)
	}
}
