package cli

import (
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"testing"

	"flowset/internal/plant"
	"flowset/internal/site"
	"flowset/internal/synth"
)

// TestWingSite runs the whole job on the third example site (surveys/wing,
// built by synth.Wing: US customary sheets, fan coils on pressure-independent
// valves, a riser on a differential controller, duty/assist pumps) and
// checks what it finds and plans against the hidden truth the generator
// holds, not against the program's own numbers:
//   - the fouled branches, and only they, are found restricted, each with
//     its true resistance ratio inside the fit's 95 % interval;
//   - the valves found starved are exactly those the true plant starves in
//     some survey state;
//   - the controller is found off its recorded set point, with the set point
//     it truly held inside the fit's 95 % interval;
//   - the plan (valve settings, drive speed, controller set point, both pumps
//     running) applied to the true plant gives every branch its design flow
//     within the site's ±10 %;
//   - the plan's verdict on one pump fewer is what the true plant does with
//     one pump flat out at the planned settings;
//   - the run ends with status 0 and shows its results in US units.
func TestWingSite(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the whole job")
	}
	ctx := context.Background()
	out := filepath.Join(t.TempDir(), "job")
	code, stdout, errs := run(t, "run", surveyDir("wing"), "--out", out)
	if code != ExitOK {
		t.Fatalf("run wing: exit %d, want %d:\n%s%s", code, ExitOK, stdout, errs)
	}
	flat := strings.Join(strings.Fields(stdout), " ")
	for _, want := range []string{"gpm", "psi", "P1 and P2 run in parallel", "One pump fewer would not give the planned duty", "differential controller"} {
		if !strings.Contains(flat, want) {
			t.Errorf("console does not say %q:\n%s", want, stdout)
		}
	}

	// The truth, and the site as the program read it.
	gen, tr, err := synth.Wing(ctx)
	if err != nil {
		t.Fatal(err)
	}
	s, probs, err := site.ReadDir(os.DirFS(surveyDir("wing")), ".")
	if err != nil {
		t.Fatalf("read wing: %v\n%v", err, probs)
	}
	m, err := plant.New(s)
	if err != nil {
		t.Fatal(err)
	}
	n := len(m.Branches)
	starved := map[string]bool{}
	for _, st := range m.States {
		sol, err := synth.SimulateState(ctx, gen, tr, st)
		if err != nil {
			t.Fatal(err)
		}
		for i := range n {
			if m.Branches[i].PI != nil && !sol.Regulates(i) {
				starved[m.Branches[i].ID] = true
			}
		}
	}
	if !starved["FC-S4"] {
		t.Fatalf("the truth does not starve FC-S4 in any state: the site no longer tells its story")
	}

	var cal struct {
		Branches []struct {
			Branch     string  `json:"branch"`
			Ratio      float64 `json:"resistance_ratio"`
			Lo         float64 `json:"ratio_lo95"`
			Hi95       float64 `json:"ratio_hi95"`
			Determined bool    `json:"determined"`
		} `json:"branches"`
		Controllers []struct {
			Riser string  `json:"riser"`
			Held  float64 `json:"held_set_point_pa"`
			Lo    float64 `json:"held_lo95_pa"`
			Hi95  float64 `json:"held_hi95_pa"`
		} `json:"differential_controllers"`
		Findings []struct {
			Code, Severity, Branch string
		} `json:"findings"`
	}
	readJSON(t, filepath.Join(out, "calibration.json"), &cal)
	found := map[string][]string{}
	for _, f := range cal.Findings {
		if f.Severity == "fault" && !slices.Contains(found[f.Code], f.Branch) {
			found[f.Code] = append(found[f.Code], f.Branch)
		}
	}
	var fouled, wantStarved []string
	for i, b := range m.Branches {
		if tr.Faults[i] == synth.Fouled {
			fouled = append(fouled, b.ID)
		}
		if starved[b.ID] {
			wantStarved = append(wantStarved, b.ID)
		}
	}
	for code, want := range map[string][]string{
		"restricted": fouled, "valve-starved": wantStarved, "controller-off-set-point": {"R-N"},
	} {
		got := found[code]
		sort.Strings(got)
		sort.Strings(want)
		if !slices.Equal(got, want) {
			t.Errorf("%s found on %q, the truth says %q", code, got, want)
		}
	}
	for code, ids := range found {
		if code != "restricted" && code != "valve-starved" && code != "controller-off-set-point" {
			t.Errorf("fault %s on %q, which the truth does not have", code, ids)
		}
	}
	for _, b := range cal.Branches {
		i, _ := m.Index(b.Branch)
		if r := tr.Params.Resistance[i]; r != 1 && !(b.Lo <= r && r <= b.Hi95) {
			t.Errorf("%s: fitted resistance %.2f (95 %% %.2f-%.2f), truth %.2f", b.Branch, b.Ratio, b.Lo, b.Hi95, r)
		}
	}
	rn, _ := m.Index("R-N")
	held := tr.Params.SetPoint[rn] * s.Branches[rn].Controller.SetPoint
	if len(cal.Controllers) != 1 || !(cal.Controllers[0].Lo <= held && held <= cal.Controllers[0].Hi95) {
		t.Errorf("controllers fitted %+v, truth holds %.0f Pa on R-N", cal.Controllers, held)
	}

	var plan struct {
		Pump struct {
			Speed float64 `json:"speed_ratio"`
			Max   float64 `json:"max_speed_ratio"`
			Pumps struct {
				Running  int `json:"running"`
				OneFewer struct {
					Running int  `json:"running"`
					Serves  bool `json:"serves"`
				} `json:"one_fewer"`
			} `json:"pumps"`
		} `json:"pump"`
		Branches []struct {
			Branch  string  `json:"branch"`
			Setting float64 `json:"new_setting"`
		} `json:"branches"`
		Controllers []struct {
			Riser    string  `json:"riser"`
			SetPoint float64 `json:"new_set_point_pa"`
		} `json:"differential_controllers"`
	}
	readJSON(t, filepath.Join(out, "plan.json"), &plan)
	st := plant.State{Settings: make([]float64, n), Speed: plan.Pump.Speed, Running: plan.Pump.Pumps.Running,
		SetPoints: make([]float64, n)}
	for i := range n {
		st.Settings[i], st.SetPoints[i] = math.NaN(), math.NaN()
	}
	for _, b := range plan.Branches {
		i, ok := m.Index(b.Branch)
		if !ok {
			t.Fatalf("plan names unknown branch %q", b.Branch)
		}
		st.Settings[i] = b.Setting
	}
	for i, b := range m.Branches {
		if b.HasValve() && math.IsNaN(st.Settings[i]) {
			t.Errorf("plan gives no setting for %s", b.ID)
		}
	}
	if len(plan.Controllers) != 1 || plan.Controllers[0].Riser != "R-N" || !(plan.Controllers[0].SetPoint > 0) {
		t.Fatalf("plan's controllers %+v, want R-N's", plan.Controllers)
	}
	st.SetPoints[rn] = plan.Controllers[0].SetPoint
	if plan.Pump.Pumps.Running != 2 || plan.Pump.Pumps.OneFewer.Running != 1 {
		t.Fatalf("plan runs %d pumps, one fewer %d; want 2 and 1", plan.Pump.Pumps.Running, plan.Pump.Pumps.OneFewer.Running)
	}
	// short lists the branches the true plant leaves outside the site's
	// tolerance of design flow in state st, and returns its total flow.
	short := func(st plant.State) ([]string, float64) {
		sol, err := synth.SimulateState(ctx, gen, tr, st)
		if err != nil {
			t.Fatal(err)
		}
		var out []string
		for i, b := range m.Branches {
			if r := sol.Flow(i)/b.Design - 1; r < s.ToleranceLow || r > s.ToleranceHigh {
				out = append(out, b.ID)
			}
		}
		return out, sol.TotalFlow()
	}
	off, q2 := short(st)
	if len(off) > 0 {
		t.Errorf("the plan applied to the true plant leaves %q outside -10 %% to +10 %% of design", off)
	}
	// One pump fewer serves when it gives the planned duty: at the same
	// settings the system curve is the same, so the same total flow (within
	// 1 %) is the same duty.
	one := st
	one.Running, one.Speed = 1, plan.Pump.Max
	_, q1 := short(one)
	if serves := q1 >= 0.99*q2; serves != plan.Pump.Pumps.OneFewer.Serves {
		t.Errorf("plan says one pump fewer serves: %v; the true plant with one pump flat out gives %.2f %% of the planned flow",
			plan.Pump.Pumps.OneFewer.Serves, 100*q1/q2)
	}
}

func readJSON(t *testing.T, path string, v any) {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, v); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
}
