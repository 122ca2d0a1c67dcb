package cli

import (
	"context"
	"encoding/json"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"flowset/internal/site"
	"flowset/internal/synth"
)

// writeControlledSite writes a generated nested site with a differential
// controller on its first riser, surveyed on the true plant (a clamp-on flow
// and a branch differential on every branch, the span, header and pump
// differentials, noise-free), and returns the folder and the riser's ID.
// The controller's set point as recorded is off by offset (a fraction) from
// the one the true plant holds.
func writeControlledSite(t *testing.T, offset float64) (string, string) {
	t.Helper()
	return writeControlledSiteWith(t, offset, "", nil)
}

// writeControlledSiteWith is writeControlledSite with edit applied to the
// site (surveyed already) before it is written.
// The controller senses as senses says (site.Controller.Senses).
func writeControlledSiteWith(t *testing.T, offset float64, senses string, edit func(s *site.Site, riser int)) (string, string) {
	t.Helper()
	ctx := context.Background()
	s, tr, err := synth.Generate(ctx, synth.Spec{Branches: 14, Arrangement: site.DirectReturn, Nested: true, Boundary: site.PumpCurve,
		Seed: 51, Fouled: 0.1, States: 1})
	if err != nil {
		t.Fatal(err)
	}
	s.Boundary.MaxSpeed = 1.5
	s.Branches = slices.Clone(s.Branches)
	k := slices.IndexFunc(s.Branches, func(b site.Branch) bool {
		return slices.ContainsFunc(s.Branches, func(c site.Branch) bool { return c.Parent == b.ID })
	})
	found := make([]float64, len(s.Branches))
	for i := range found {
		found[i] = math.NaN()
	}
	before, err := synth.Simulate(ctx, s, tr, found)
	if err != nil {
		t.Fatal(err)
	}
	d, q := before.BranchDiff(k), before.Flow(k)
	set := 0.7 * d
	if senses == site.SensesBranches {
		set = 0.5 * d // the riser's own parts lie outside the span too
	}
	s.Branches[k].Controller = site.Controller{SetPoint: set, Kvs: 3600 * q / math.Sqrt(0.15*d/1e5), Min: 0.2 * d, Max: 2 * d, Senses: senses}
	sol, err := synth.Simulate(ctx, s, tr, found)
	if err != nil {
		t.Fatal(err)
	}
	inst := map[string]*site.Instrument{}
	for _, in := range site.Instruments() {
		inst[in.Name] = &in
	}
	var rd []site.Reading
	add := func(where string, what site.Quantity, instrument string, v float64) {
		rd = append(rd, site.Reading{State: "as-found", Where: where, What: what, Value: v, Setting: math.NaN(),
			Instrument: instrument, Sigma: inst[instrument].DefaultSigma(what, v)})
	}
	for i, b := range sol.Model.Branches {
		add(b.ID, site.Flow, "clamp-on", sol.Flow(i))
		add(b.ID, site.BranchDiff, "manometer", sol.BranchDiff(i))
	}
	span, _ := sol.ControlledDiff(k)
	add(s.Branches[k].ID, site.ControlledDiff, "manometer", span)
	add(site.AtPump, site.PumpDiff, "manometer", sol.PumpDiff())
	s.Readings = rd
	s.Branches[k].Controller.SetPoint *= 1 + offset
	if edit != nil {
		edit(s, k)
	}
	dir := filepath.Join(t.TempDir(), "site")
	if err := os.Mkdir(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	err = site.WriteDir(s, func(name string) (io.WriteCloser, error) { return os.Create(filepath.Join(dir, name)) })
	if err != nil {
		t.Fatal(err)
	}
	return dir, s.Branches[k].ID
}

// TestRunController runs check, curves and run on a site with a controlled
// riser: each says what the controller does, the plan gives it a set point
// (field sheet and plan.json), and a set point recorded 20 % off what the
// plant holds is flagged.
func TestRunController(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the whole job")
	}
	dir, riser := writeControlledSite(t, 0)
	code, out, errs := run(t, "check", dir)
	if code != 0 || !strings.Contains(out, "differential controller on "+riser) {
		t.Fatalf("check: status %d, stdout %s, stderr %s", code, out, errs)
	}
	code, out, errs = run(t, "curves", dir)
	if code != 0 || !strings.Contains(out, "differential controllers") || !strings.Contains(out, "holding") {
		t.Fatalf("curves: status %d, stdout %s, stderr %s", code, out, errs)
	}
	job := filepath.Join(t.TempDir(), "job")
	code, out, errs = run(t, "run", dir, "--out", job)
	if code != 0 {
		t.Fatalf("run: status %d, stdout %s, stderr %s", code, out, errs)
	}
	if !strings.Contains(out, "differential controller") {
		t.Errorf("run's console does not mention the controller:\n%s", out)
	}
	if strings.Contains(out, "controller-off-set-point") || strings.Contains(out, "controller-wide-open") {
		t.Errorf("a controller holding its recorded set point is flagged:\n%s", out)
	}
	fs, err := os.ReadFile(filepath.Join(job, "field-sheet.csv"))
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(string(fs), "differential controller,kPa,") || !strings.Contains(string(fs), "it must read the new set point") {
		t.Errorf("field sheet has no controller row in kPa saying what to read:\n%s", fs)
	}
	// In US units its set points are in psi like every differential.
	us := filepath.Join(t.TempDir(), "us")
	if code, out, errs := run(t, "plan", dir, "--units", "us", "--out", us); code != 0 {
		t.Fatalf("plan --units us: status %d, stdout %s, stderr %s", code, out, errs)
	}
	if b, err := os.ReadFile(filepath.Join(us, "field-sheet.csv")); err != nil || !strings.Contains(string(b), "differential controller,psi,") {
		t.Errorf("US field sheet's controller row not in psi (%v):\n%s", err, b)
	}
	b, err := os.ReadFile(filepath.Join(job, "plan.json"))
	if err != nil {
		t.Fatal(err)
	}
	var plan struct {
		Controllers []struct {
			Riser    string   `json:"riser"`
			SetPoint *float64 `json:"new_set_point_pa"`
			Holding  bool     `json:"holding"`
		} `json:"differential_controllers"`
	}
	if err := json.Unmarshal(b, &plan); err != nil {
		t.Fatal(err)
	}
	if len(plan.Controllers) != 1 || plan.Controllers[0].Riser != riser || plan.Controllers[0].SetPoint == nil || !plan.Controllers[0].Holding {
		t.Errorf("plan.json controllers %+v, want one holding on %s with a set point", plan.Controllers, riser)
	}

	// The sheet says 20 % more than the controller holds: its span reads
	// off its recorded set point.
	off, _ := writeControlledSite(t, 0.2)
	code, out, errs = run(t, "fit", off)
	if code != 0 {
		t.Fatalf("fit: status %d, stdout %s, stderr %s", code, out, errs)
	}
	if !strings.Contains(out, "does not read its set point") {
		t.Errorf("a set point 20 %% off is not flagged:\n%s", out)
	}
	if !strings.Contains(out, "the survey puts what it held at") {
		t.Errorf("fit does not say what set point the controller held:\n%s", out)
	}
}
