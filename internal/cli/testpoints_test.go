package cli

import (
	"context"
	"io"
	"math"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	"flowset/internal/balance"
	"flowset/internal/diagnose"
	"flowset/internal/site"
	"flowset/internal/synth"
)

// TestTestPointsDecided: a plant from flowset's own generator (its square
// law holds exactly, so the answer is known), surveyed in two states with
// every branch read by valve meter with its valve and branch differentials.
// A clean branch whose valve moved between the states has its test points
// made to read the flow 25 % low in both (valve differentials times 0.5625,
// flows times 0.75: the tapping's error of calibrate.TestPointShare): the
// run must say its test points read about 25 % low and not call it
// restricted, where at one setting it would be restricted about 1.8 times
// (the fit itself puts this one's valve off its mark, an offset absorbing
// part of the error: the weighing must see through it). A fouled branch
// whose valve moved is found restricted with its test points confirmed,
// and is neither held at design nor hedged. (On seeds 1, 2 and 8 both
// hold; on seed 13 the branch's test points are 90 % likely off against
// 10 % for its valve off its mark, rightly undecided.)
func TestTestPointsDecided(t *testing.T) {
	s, tr := twoStates(t, 8)
	off, fouled := readTwice(s, tr)
	if off == "" || fouled == "" {
		t.Fatalf("construction: no clean (%q) or fouled (%q) branch read at two settings", off, fouled)
	}
	out, stdout, _ := runBiased(t, s, off, 0.75)
	rows := readCSV(t, filepath.Join(out, "findings.csv"))
	var offSaid, fouledSaid bool
	for _, row := range rows[1:] {
		code, br, text := row[1], row[2], strings.Join(row[3:], " ")
		switch {
		case br == off && (code == "restricted" || code == "cannot-reach-design"):
			t.Errorf("%s, its test points reading 25 %% low, is called %s: %s", off, code, text)
		case br == off && code == "suspect-reading" && strings.Contains(text, "test points read the flow about 2"):
			offSaid = strings.Contains(text, "% low")
		case br == fouled && code == "restricted":
			fouledSaid = strings.Contains(text, "read right")
		}
	}
	if !offSaid {
		t.Errorf("no finding says %s's test points read about 25 %% low:\n%v", off, rows)
	}
	if !fouledSaid {
		t.Errorf("no finding calls the fouled %s restricted with its test points read right:\n%v", fouled, rows)
	}
	flat := strings.Join(strings.Fields(stdout), " ")
	for _, id := range []string{off, fouled} {
		if strings.Contains(flat, id+" reads as") {
			t.Errorf("%s is held or hedged on its test points:\n%s", id, stdout)
		}
	}
}

// readTwice returns the first clean and the first fouled branch of s whose
// test points were read at two settings ("" where none).
func readTwice(s *site.Site, tr *synth.Truth) (clean, fouled string) {
	sets := map[string]map[float64]bool{}
	for _, r := range s.Readings {
		if r.What == site.Flow && r.Instrument == "valve-meter" && !math.IsNaN(r.Setting) {
			if sets[r.Where] == nil {
				sets[r.Where] = map[float64]bool{}
			}
			sets[r.Where][r.Setting] = true
		}
	}
	for i, b := range s.Branches {
		if len(sets[b.ID]) < 2 {
			continue
		}
		switch tr.Faults[i] {
		case "":
			if clean == "" {
				clean = b.ID
			}
		case synth.Fouled:
			if fouled == "" {
				fouled = b.ID
			}
		}
	}
	return clean, fouled
}

// TestTestPointsLikelyOff: TestTestPointsDecided's construction on seed 13,
// where the clean branch's test points, reading 25 % low, come out 90 %
// likely off against its valve off its mark: not decided. Its one finding
// must name the likelier explanation, its test points reading low, with
// the other named after it; no finding may call it restricted, free or
// its valve off its mark or seized.
func TestTestPointsLikelyOff(t *testing.T) {
	s, tr := twoStates(t, 13)
	off, _ := readTwice(s, tr)
	if off == "" {
		t.Fatal("construction: no clean branch read at two settings")
	}
	out, _, _ := runBiased(t, s, off, 0.75)
	var said int
	for _, row := range readCSV(t, filepath.Join(out, "findings.csv"))[1:] {
		code, br, text := row[1], row[2], strings.Join(row[3:], " ")
		switch {
		case br != off:
		case code == "restricted" || code == "free" || code == "valve-mis-set" || code == "valve-stuck":
			t.Errorf("%s, its test points reading 25 %% low, is found %s: %s", off, code, text)
		case code == "suspect-reading" && strings.Contains(text, "test points most likely read the flow about"):
			if !strings.Contains(text, "% low") || !strings.Contains(text, "; else ") || !strings.Contains(text, "not enough to decide") {
				t.Errorf("%s's finding does not say its test points likely read low, the other explanation after: %s", off, text)
			}
			said++
		}
	}
	if said != 1 {
		t.Errorf("%d findings say %s's test points most likely read off, want 1", said, off)
	}
}

// runTrim runs trim on the site in dir with the plan at plan and returns
// its output directory.
func runTrim(t *testing.T, dir, plan string) string {
	t.Helper()
	trim := filepath.Join(t.TempDir(), "trim")
	if code, _, errs := run(t, "trim", dir, "--plan", plan, "--out", trim); code != ExitOK && code != ExitShort {
		t.Fatalf("trim: exit %d:\n%s", code, errs)
	}
	return trim
}

// runBiased makes branch id's test points read the flow f times true
// (biasTestPoints), runs the job on site s and returns its output directory
// and console text, and the site's directory.
func runBiased(t *testing.T, s *site.Site, id string, f float64) (out, stdout, dir string) {
	t.Helper()
	biasTestPoints(s, id, f)
	dir = writeSite(t, s)
	out = filepath.Join(t.TempDir(), "out")
	code, stdout, errs := run(t, "run", dir, "--out", out)
	if code != ExitOK && code != ExitShort {
		t.Fatalf("run: exit %d:\n%s", code, errs)
	}
	return out, stdout, dir
}

// biasTestPoints makes branch id's test points read the flow f times true:
// its valve differentials f² times, its valve-meter flows f times.
func biasTestPoints(s *site.Site, id string, f float64) {
	for k := range s.Readings {
		r := &s.Readings[k]
		switch {
		case r.Where != id:
		case r.What == site.ValveDiff:
			r.Value *= f * f
			r.Sigma *= f * f
		case r.What == site.Flow && r.Instrument == "valve-meter":
			r.Value *= f
			r.Sigma *= f
		}
	}
}

// TestTestPointsSeized: TestTestPointsDecided's generator on seed 6, where a
// clean branch (T3) whose valve moved between the two states has its test
// points made to read the flow 20 % high. The fit, which does not hold test
// points reading off, finds its valve seized (one Kv explains the readings
// better than its table); weighed with the seized valve as a fourth
// explanation, the test points reading off win. The run must say so, not
// call the valve stuck, and plan the branch on its valve's table.
func TestTestPointsSeized(t *testing.T) {
	s, tr := twoStates(t, 6)
	const id = "T3"
	if i := slices.IndexFunc(s.Branches, func(b site.Branch) bool { return b.ID == id }); i < 0 || tr.Faults[i] != "" {
		t.Fatalf("construction: %s missing or faulty", id)
	}
	out, _, _ := runBiased(t, s, id, 1.2)
	for _, row := range readCSV(t, filepath.Join(out, "calibration.csv"))[1:] {
		if row[0] == id && !strings.Contains(row[5], "holds one kv") {
			t.Fatalf("construction: the fit finds %s's valve %q, not seized: the case no longer tests the weighing against a seized valve", id, row[5])
		}
	}
	var said bool
	for _, row := range readCSV(t, filepath.Join(out, "findings.csv"))[1:] {
		code, br, text := row[1], row[2], strings.Join(row[3:], " ")
		switch {
		case br != id:
		case code == "valve-stuck" || code == "restricted" || code == "free":
			t.Errorf("%s, its test points reading 20 %% high, is called %s: %s", id, code, text)
		case code == "suspect-reading" && strings.Contains(text, "test points read the flow about"):
			said = strings.Contains(text, "% high")
		}
	}
	if !said {
		t.Errorf("no finding says %s's test points read high", id)
	}
	// Its band in the plan is the weighing's, not the seized fit's, whose
	// Kv spread reaches decades.
	var plan struct {
		Branches []struct {
			ID   string  `json:"branch"`
			Low  float64 `json:"band_low_percent"`
			High float64 `json:"band_high_percent"`
		} `json:"branches"`
	}
	readJSON(t, filepath.Join(out, "plan.json"), &plan)
	i := -1
	for k, pb := range plan.Branches {
		if pb.ID == id {
			i = k
		}
	}
	if i < 0 {
		t.Fatalf("%s not in plan.json", id)
	}
	if pb := plan.Branches[i]; !(pb.Low > 80) || !(pb.High < 120) {
		t.Errorf("%s's band in the plan %.1f-%.1f %%: want inside 80-120 %%", id, pb.Low, pb.High)
	}
}

// twoStates generates the test-point tests' plant: 16 branches, a quarter
// fouled, surveyed in two states with every branch read by valve meter with
// its valve and branch differentials, the pump's differential and total flow.
func twoStates(t *testing.T, seed int64) (*site.Site, *synth.Truth) {
	t.Helper()
	spec := synth.Spec{Branches: 16, Arrangement: site.DirectReturn, Seed: seed, Fouled: 0.25, Noise: 1, States: 2,
		Readings: synth.ReadingMix{ValveMeter: 1, Paired: true, BranchDiff: 1, PumpDiff: true, TotalFlow: true}}
	s, tr, err := synth.Generate(context.Background(), spec)
	if err != nil {
		t.Fatal(err)
	}
	return s, tr
}

// TestTrimAnchorsDecided: TestTestPointsSeized's plant, its second state
// taken as the state after setting. T3's test points, reading 20 % high in
// both states, are found off; the trim puts T3 as left where its reading
// there, corrected by the error found, says (within 3 %: the error's own
// estimate), and its band is that reading's spread, not the fit's.
func TestTrimAnchorsDecided(t *testing.T) {
	s, _ := twoStates(t, 6)
	const id = "T3"
	// The readings come state by state: the last flow read at T3 is the
	// last state's.
	var q0, rel float64
	for _, r := range s.Readings {
		if r.Where == id && r.What == site.Flow && r.Instrument == "valve-meter" {
			q0, rel = r.Value, r.Sigma/r.Value
		}
	}
	if !(q0 > 0) {
		t.Fatalf("construction: no valve-meter flow at %s in the last state", id)
	}
	out, _, dir := runBiased(t, s, id, 1.2)
	trim := runTrim(t, dir, filepath.Join(out, "plan.json"))
	var tj struct {
		Branches []struct {
			ID     string  `json:"branch"`
			Target float64 `json:"target_m3_s"`
			Left   float64 `json:"as_left_percent"`
			Low    float64 `json:"as_left_band_low_percent"`
			High   float64 `json:"as_left_band_high_percent"`
		} `json:"branches"`
	}
	readJSON(t, filepath.Join(trim, "trim.json"), &tj)
	for _, br := range tj.Branches {
		if br.ID != id {
			continue
		}
		q := br.Left / 100 * br.Target
		if math.Abs(q/q0-1) > 0.03 {
			t.Errorf("%s as left %.4g m3/s, its reading there corrected %.4g: want within 3 %%", id, q, q0)
		}
		// Two sd either side of the reading's relative sd, in ln.
		if w := math.Log(br.High / br.Low); math.Abs(w/(4*rel)-1) > 0.3 {
			t.Errorf("%s's band as left %.1f-%.1f %%: want about ±%.0f %% (the reading's two sd)", id, br.Low, br.High, 200*rel)
		}
		return
	}
	t.Fatalf("%s not in trim.json", id)
}

// TestReadIndexFirst: a generated plant read through valve meters at one
// setting, one branch's test points made to read the flow 20 % low, the
// first branch (in sheet order, its valve not found fully open) for which
// that makes it the index circuit restricted on its test points alone. Through them alone it is restricted,
// or they read low: the plan opens it for the restriction and sets the pump
// for it, and neither holds nor hedges an index. Its reading at the new
// setting tells the two apart and with them the pump (tpDecides), so it must
// be the first reading ranked, saying so; its finding must state its
// confidence with the test points weighed and have its flow read another
// way first, in the findings and the fixes; unbiased, none of that.
func TestReadIndexFirst(t *testing.T) {
	gen := func() *site.Site {
		spec := synth.Spec{Branches: 12, Arrangement: site.DirectReturn, Seed: 3, Noise: 1, States: 1,
			Readings: synth.ReadingMix{ValveMeter: 1, Paired: true, BranchDiff: 1, PumpDiff: true}}
		s, _, err := synth.Generate(context.Background(), spec)
		if err != nil {
			t.Fatal(err)
		}
		return s
	}
	first := func(out string) (where, settles string) {
		rows := readCSV(t, filepath.Join(out, "read-next.csv"))
		if len(rows) < 2 {
			t.Fatalf("read-next.csv: no reading ranked")
		}
		return rows[1][1], rows[1][len(rows[1])-1]
	}
	index := func(out string) string {
		var plan struct {
			Index string `json:"index_circuit"`
		}
		readJSON(t, filepath.Join(out, "plan.json"), &plan)
		return plan.Index
	}
	restricted := func(out, id string) bool {
		for _, row := range readCSV(t, filepath.Join(out, "findings.csv"))[1:] {
			if row[2] == id && (row[1] == "restricted" || row[1] == "cannot-reach-design") {
				return true
			}
		}
		return false
	}
	var id, out, stdout string
	s := gen()
	for _, b := range s.Branches {
		// A valve found fully open stays so: read there again, its test
		// points decide nothing.
		if v := s.Valve(b.Valve); v == nil {
			continue
		} else if _, hi := v.Range(); b.Setting >= hi {
			continue
		}
		o, so, _ := runBiased(t, gen(), b.ID, 0.8)
		if index(o) == b.ID && restricted(o, b.ID) {
			id, out, stdout = b.ID, o, so
			break
		}
	}
	if id == "" {
		t.Fatal("construction: no branch becomes the index restricted on its test points 20 % low")
	}
	where, settles := first(out)
	if where != id || !strings.Contains(settles, "tell a real restriction from themselves reading off") || !strings.Contains(settles, "and the pump") {
		t.Errorf("first reading %s (%q), want the index %s, its test points at the new setting deciding the restriction and the pump", where, settles, id)
	}
	// Its finding states the fit's confidence with the test points
	// weighed, names the other explanation, and has a flow read another
	// way come first, in the findings and in the fixes.
	for _, row := range readCSV(t, filepath.Join(out, "findings.csv"))[1:] {
		if row[2] != id || row[1] != "restricted" && row[1] != "cannot-reach-design" {
			continue
		}
		c, err := strconv.ParseFloat(strings.TrimSuffix(row[6], " %"), 64)
		if err != nil || !(c > 0 && c < 100) || !strings.Contains(row[5], "or its test points read") ||
			!strings.HasPrefix(row[7], "read its flow with a clamp-on meter before anything else") {
			t.Errorf("%s's finding: confidence %q, evidence %q, action %q: want under 100 %% with its test points weighed, a clamp-on first", id, row[6], row[5], row[7])
		}
	}
	if !strings.Contains(stdout, id+": first read its flow with a clamp-on meter") {
		t.Errorf("the fixes do not have %s's flow read another way first:\n%s", id, stdout)
	}
	o, so, _ := runBiased(t, gen(), "", 1)
	for _, row := range readCSV(t, filepath.Join(o, "read-next.csv"))[1:] {
		if row[1] == id && strings.Contains(row[len(row)-1], "tell a real restriction") {
			t.Errorf("unbiased, %s is ranked to tell a restriction from its test points: %s", id, row[len(row)-1])
		}
	}
	if strings.Contains(so, "first read its flow with a clamp-on meter") {
		t.Errorf("unbiased, a fix starts with a clamp-on reading:\n%s", so)
	}
	// Found fully open and planned so, the index learns nothing read again
	// at its new setting: it is read once at a check setting instead, its
	// valve moved for it and put back.
	id, out = "", ""
	for _, b := range gen().Branches {
		s := gen()
		k := slices.IndexFunc(s.Branches, func(c site.Branch) bool { return c.ID == b.ID })
		v := s.Valve(b.Valve)
		if v == nil {
			continue
		}
		_, hi := v.Range()
		s.Branches[k].Setting = hi
		for r := range s.Readings {
			if s.Readings[r].Where == b.ID && !math.IsNaN(s.Readings[r].Setting) {
				s.Readings[r].Setting = hi
			}
		}
		o, _, _ := runBiased(t, s, b.ID, 0.8)
		if index(o) == b.ID && restricted(o, b.ID) && planned(t, o, b.ID) == hi {
			id, out = b.ID, o
			break
		}
	}
	if id == "" {
		t.Fatal("construction: no branch found fully open becomes the index restricted on its test points 20 % low")
	}
	var rn struct {
		Readings []struct {
			Where   string   `json:"where"`
			At      *float64 `json:"at_setting"`
			Settles string   `json:"settles"`
		} `json:"readings"`
	}
	readJSON(t, filepath.Join(out, "read-next.json"), &rn)
	if len(rn.Readings) == 0 || rn.Readings[0].Where != id || rn.Readings[0].At == nil || !strings.Contains(rn.Readings[0].Settles, "read once with its valve at") {
		t.Fatalf("found fully open, the index %s is not read first at a check setting: %+v", id, rn.Readings[:min(2, len(rn.Readings))])
	}
	if at := *rn.Readings[0].At; at >= planned(t, out, id) {
		t.Errorf("%s's check setting %g does not close it from the plan's %g", id, at, planned(t, out, id))
	}
}

// planned is the new setting plan.json in out gives branch id.
func planned(t *testing.T, out, id string) float64 {
	t.Helper()
	var plan struct {
		Branches []struct {
			ID  string  `json:"branch"`
			New float64 `json:"new_setting"`
		} `json:"branches"`
	}
	readJSON(t, filepath.Join(out, "plan.json"), &plan)
	for _, b := range plan.Branches {
		if b.ID == id {
			return b.New
		}
	}
	t.Fatalf("%s missing from plan.json", id)
	return 0
}

// TestRecovers: the share of a restricted branch's shortfall that opening
// its valve fully recovers, on the branch the plan throttles most. Clean,
// the plan's setting passes its target (1); restricted a little, opening
// recovers it all (1); restricted far, only part, less the further, and
// under half at 32 times design.
func TestRecovers(t *testing.T) {
	opts := &jobOptions{Scale: 1, Rounding: "smart", Thresholds: diagnose.DefaultThresholds()}
	j, err := runJob(context.Background(), meterSite(t, 1, 1, 1, true), opts, &progress{w: io.Discard}, nil)
	if err != nil {
		t.Fatal(err)
	}
	m := j.L.Model
	// The branch whose valve the plan throttles most: room to open.
	var b balance.BranchPlan
	i := -1
	for _, bp := range j.Plan.Branches {
		if k, ok := m.Index(bp.ID); ok && !bp.OnIndex && (i < 0 || bp.New < b.New) {
			b, i = bp, k
		}
	}
	if i < 0 {
		t.Fatal("construction: no branch off the index path")
	}
	if got := recovers(j, i, b, 1); got != 1 {
		t.Errorf("clean: recovers %g, want 1", got)
	}
	if got := recovers(j, i, b, 1.3); got != 1 {
		t.Errorf("fixed parts 1.3 times design, its valve at %g of 0-4 turns: recovers %g, want 1", b.New, got)
	}
	prev := 1.0
	for _, mult := range []float64{4, 8, 16, 32} {
		got := recovers(j, i, b, mult)
		if !(got >= 0 && got <= prev) {
			t.Errorf("fixed parts %g times design: recovers %g, want within 0 and %g (the previous)", mult, got, prev)
		}
		prev = got
	}
	if !(prev < 0.5) {
		t.Errorf("fixed parts 32 times design: recovers %g, want well short of it all", prev)
	}
}
