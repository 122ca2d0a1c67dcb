package surveys_test

import (
	"context"
	"fmt"
	"testing"

	"github.com/google/go-cmp/cmp"

	"flowset/internal/plant"
	"flowset/internal/site"
	"flowset/surveys"
)

func TestNames(t *testing.T) {
	if d := cmp.Diff([]string{"clinic", "demo", "plantroom", "wing"}, surveys.Names()); d != "" {
		t.Errorf("Names() (-want +got):\n%s", d)
	}
}

// TestLoad reads every embedded site as the program does: no problem of
// error severity, and a model that builds and solves in every survey state
// at design values.
func TestLoad(t *testing.T) {
	for _, name := range surveys.Names() {
		t.Run(name, func(t *testing.T) {
			s, probs, err := site.ReadDir(surveys.FS, name)
			if err != nil {
				t.Fatalf("ReadDir(%s): %v\n%v", name, err, probs)
			}
			m, err := plant.New(s)
			if err != nil {
				t.Fatalf("plant.New(%s): %v", name, err)
			}
			if len(m.States) == 0 {
				t.Fatalf("%s has no survey states", name)
			}
			for _, st := range m.States {
				sol, err := m.Solve(context.Background(), m.Design(), st)
				if err != nil {
					t.Fatalf("Solve(%s, %s): %v", name, st.Label, err)
				}
				if q := sol.TotalFlow(); !(q > 0) {
					t.Errorf("%s, %s: total flow %g, want positive", name, st.Label, q)
				}
			}
		})
	}
}

func ExampleNames() {
	for _, name := range surveys.Names() {
		s, _, err := site.ReadDir(surveys.FS, name)
		if err != nil {
			fmt.Println(err)
			continue
		}
		fmt.Printf("%s: %s, %d branches\n", name, s.Name, len(s.Branches))
	}
	// Output:
	// clinic: Harrowfield Clinic - consulting wing chilled water, 9 branches
	// demo: Quillmere Academy - teaching block LTHW, 14 branches
	// plantroom: Brindlecote Works - moulding shop chilled glycol, 6 branches
	// wing: Wrenholt Infirmary - east wing chilled water, 13 branches
}
