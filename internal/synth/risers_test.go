package synth

import (
	"context"
	"strings"
	"testing"

	"flowset/internal/site"
)

// TestRiserSurvey checks the building layout (Spec.RiserTerminals) and the
// paired survey mix against what they promise: risers of the asked size
// within 20 %, terminals of the three kinds, one flow reading per branch
// (valve meter on 70 %, clamp-on on the rest), the valve differential at
// every valve-metered branch, half the branches with a branch differential,
// 5 % of the terminals fouled. The shares are of the generator's own draw:
// common practice, no source.
func TestRiserSurvey(t *testing.T) {
	const n = 1000
	s, tr, err := Generate(context.Background(), Spec{Branches: n, Arrangement: site.DirectReturn, RiserTerminals: 30,
		Seed: 7, Fouled: 0.05, Noise: 1, States: 1, Readings: SurveyMix()})
	if err != nil {
		t.Fatal(err)
	}
	if len(s.Branches) != n {
		t.Fatalf("%d branches, want %d", len(s.Branches), n)
	}
	children := map[string]int{}
	kinds := map[string]int{}
	for _, b := range s.Branches {
		if b.Parent != "" {
			children[b.Parent]++
			kinds[b.Note]++
		}
	}
	for _, b := range s.Branches {
		if b.Parent == "" && (children[b.ID] < 24 || children[b.ID] > 36) && b.ID != s.Branches[len(s.Branches)-1].Parent {
			t.Errorf("riser %s has %d terminals, want 24 to 36 (the last riser may take the remainder)", b.ID, children[b.ID])
		}
	}
	if kinds["radiator"] == 0 || kinds["fan coil"] == 0 || kinds["air-handler coil"] == 0 {
		t.Errorf("terminal kinds %v: want radiators, fan coils and air-handler coils", kinds)
	}
	flows := map[string]string{}
	vdiff, bdiff, low := map[string]bool{}, 0, 0
	for _, r := range s.Readings {
		switch {
		case r.What == site.Flow:
			if flows[r.Where] != "" {
				t.Fatalf("branch %s read twice for flow (%s and %s)", r.Where, flows[r.Where], r.Instrument)
			}
			flows[r.Where] = r.Instrument
		case r.What == site.ValveDiff:
			vdiff[r.Where] = true
			if r.Value < 3e3 {
				low++
			}
		case r.What == site.BranchDiff:
			bdiff++
		}
	}
	var meter int
	for _, b := range s.Branches {
		switch flows[b.ID] {
		case "valve-meter":
			meter++
			if !vdiff[b.ID] {
				t.Errorf("%s: valve meter without the valve differential", b.ID)
			}
		case "clamp-on":
			if vdiff[b.ID] {
				t.Errorf("%s: clamp-on branch with a valve differential", b.ID)
			}
		default:
			t.Errorf("%s: no flow reading", b.ID)
		}
	}
	if meter != 700 || bdiff != 500 {
		t.Errorf("%d valve-metered and %d branch differentials, want 700 and 500", meter, bdiff)
	}
	// About 14 % of the valve differentials below 3 kPa: the share the
	// radiators' flow range was chosen for.
	if f := float64(low) / float64(len(vdiff)); f < 0.08 || f > 0.22 {
		t.Errorf("%.1f %% of valve differentials below 3 kPa, want about 14 %%", 100*f)
	}
	var fouled, leaves int
	for i, b := range s.Branches {
		if b.Parent != "" {
			leaves++
			if tr.Faults[i] == Fouled {
				fouled++
			}
		} else if tr.Faults[i] != "" {
			t.Errorf("riser %s given fault %q", b.ID, tr.Faults[i])
		}
	}
	if want := int(0.05*float64(leaves) + 0.5); fouled != want {
		t.Errorf("%d fouled terminals of %d, want %d", fouled, leaves, want)
	}
	if !strings.HasPrefix(s.Branches[0].ID, "R") {
		t.Errorf("first row %s, want a riser", s.Branches[0].ID)
	}
}
