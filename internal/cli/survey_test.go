package cli

import (
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"flowset/internal/site"
)

// TestSurveyRoute plans the demo from its design alone with a survey of 30
// minutes, of 4 readings, and of both: survey-route.csv must hold the
// best-ranked readings that fit in the time and number (none left out that
// would still fit after the ones taken), in the plant's order (the pump
// first, then the branches as the field sheet walks them), and its running
// total must stay within the time.
func TestSurveyRoute(t *testing.T) {
	for _, tc := range []struct {
		name    string
		minutes float64
		most    int
	}{
		{"30 minutes", 30, 0},
		{"4 readings", 0, 4},
		{"60 minutes and 5 readings", 60, 5},
	} {
		t.Run(tc.name, func(t *testing.T) { surveyRoute(t, tc.minutes, tc.most) })
	}
}

func surveyRoute(t *testing.T, minutes float64, most int) {
	out := filepath.Join(t.TempDir(), "out")
	args := []string{"run", surveyDir("demo"), "--design-only", "--out", out}
	if minutes > 0 {
		args = append(args, "--survey-minutes", strconv.FormatFloat(minutes, 'g', -1, 64))
	}
	if most > 0 {
		args = append(args, "--survey-readings", strconv.Itoa(most))
	}
	if code, _, errs := run(t, args...); code != ExitOK && code != ExitShort {
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
	// Which ranked readings fit in the time and number, taken in rank order.
	want := map[string]bool{}
	used := 0.0
	for _, r := range ranked[1:] {
		m, err := strconv.ParseFloat(r[6], 64)
		if err != nil {
			t.Fatal(err)
		}
		if most > 0 && len(want) == most {
			break
		}
		if minutes == 0 || used+m <= minutes {
			used += m
			want[r[0]] = true
		}
	}
	if most > 0 && len(route)-1 != min(most, len(ranked)-1) {
		t.Errorf("the route has %d readings, want %d", len(route)-1, most)
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
	if minutes > 0 && total > minutes {
		t.Errorf("the route takes %g minutes, more than the %g allowed", total, minutes)
	}
	if len(want) > 0 {
		t.Errorf("readings that fit but are not on the route: ranks %v", want)
	}
}

// TestPumpReadingUnits plans a survey before the visit on a small invented
// site twice: with the pump on its curve, the pump's ranked reading expects
// its differential (in the differential unit, near what the curve gives at
// the design duty); with a held differential (the set point fixes the
// pump's differential), it expects the total flow, in the flow unit, near
// the design total. It once printed the total flow as a differential
// ("0.0 to 0.0 kPa"). The invented site's own numbers are the reference.
func TestPumpReadingUnits(t *testing.T) {
	for _, tc := range []struct {
		name           string
		held           bool
		unit, jsonUnit string
		lo, hi         float64 // the expectation's range, display units
	}{
		// The edge site's pump gives 6-7.5 m (59-74 kPa) between 1 and 2 l/s.
		{"pump curve", false, "kPa", "Pa", 40, 80},
		// Design total 1.8 l/s; the set point is 60 kPa.
		{"held differential", true, "l/s", "m3/s", 1, 4},
	} {
		t.Run(tc.name, func(t *testing.T) {
			s := edgeSite()
			s.Readings = nil
			if tc.held {
				s.Boundary = site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 60e3, Sensor: site.AtPump}
			}
			dir := writeSite(t, s)
			out := filepath.Join(t.TempDir(), "out")
			if code, _, errs := run(t, "run", dir, "--design-only", "--out", out); code != ExitOK && code != ExitShort {
				t.Fatalf("run: exit %d: %s", code, errs)
			}
			for _, f := range []string{"read-next.csv", "survey-route.csv"} {
				rows := readCSV(t, filepath.Join(out, f))
				var found bool
				for _, r := range rows[1:] {
					if r[1] != "pump" {
						continue
					}
					found = true
					v, err := strconv.ParseFloat(r[3], 64)
					if err != nil {
						t.Fatalf("%s: pump expect %q: %v", f, r[3], err)
					}
					if r[5] != tc.unit || !(v >= tc.lo && v <= tc.hi) {
						t.Errorf("%s: the pump's reading expects %s %s, want %g to %g %s", f, r[3], r[5], tc.lo, tc.hi, tc.unit)
					}
				}
				if !found {
					t.Errorf("%s: no pump reading ranked", f)
				}
			}
			b, err := os.ReadFile(filepath.Join(out, "read-next.json"))
			if err != nil {
				t.Fatal(err)
			}
			if !strings.Contains(string(b), `"unit": "`+tc.jsonUnit+`"`) {
				t.Errorf("read-next.json gives no reading in %s", tc.jsonUnit)
			}

			// After a survey, the report's list of readings to take after
			// setting says what to expect of the pump in the same terms.
			s = edgeSite()
			if tc.held {
				s.Boundary = site.Boundary{Kind: site.ConstantDiff, Speed: 1, MaxSpeed: 1, SetPoint: 60e3, Sensor: site.AtPump}
				s.Readings = s.Readings[:4] // the set point fixes the pump's differential
			}
			dir = writeSite(t, s)
			out = filepath.Join(t.TempDir(), "out")
			if code, _, errs := run(t, "run", dir, "--out", out); code != ExitOK && code != ExitShort {
				t.Fatalf("run: exit %d: %s", code, errs)
			}
			html, err := os.ReadFile(filepath.Join(out, "report.html"))
			if err != nil {
				t.Fatal(err)
			}
			note := regexp.MustCompile(`differential and the total flow too \(order \d+\): expect ([^,]*),`).FindSubmatch(html)
			if note == nil {
				t.Fatalf("report.html has no note on the pump's reading")
			}
			if !strings.HasSuffix(string(note[1]), " "+tc.unit) || tc.held != strings.HasPrefix(string(note[1]), "a total flow of ") {
				t.Errorf("report.html: the pump's note expects %q, want a value in %s", note[1], tc.unit)
			}
		})
	}
}
