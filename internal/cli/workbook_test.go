package cli

import (
	"bytes"
	"os"
	"path/filepath"
	"testing"

	"github.com/google/go-cmp/cmp"

	"flowset/internal/site"
	"flowset/surveys"
)

// TestWorkbookSameAsCSV writes the demo site as one workbook and checks that
// the whole job gives the same calibration and the same field sheet as from
// the CSV folder.
func TestWorkbookSameAsCSV(t *testing.T) {
	s, probs, err := site.ReadDir(surveys.FS, "demo")
	if err != nil {
		t.Fatal(err, probs)
	}
	var buf bytes.Buffer
	if err := site.WriteWorkbook(s, &buf); err != nil {
		t.Fatal(err)
	}
	book := filepath.Join(t.TempDir(), "demo.xlsx")
	if err := os.WriteFile(book, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	a, b := filepath.Join(t.TempDir(), "csv"), filepath.Join(t.TempDir(), "xlsx")
	if code, _, errs := run(t, "run", surveyDir("demo"), "--out", a, "--quiet"); code != ExitOK {
		t.Fatalf("run on the CSV folder: exit %d: %s", code, errs)
	}
	if code, _, errs := run(t, "run", book, "--out", b, "--quiet"); code != ExitOK {
		t.Fatalf("run on the workbook: exit %d: %s", code, errs)
	}
	for _, f := range []string{"calibration.csv", "field-sheet.csv", "plan.json"} {
		x, _ := os.ReadFile(filepath.Join(a, f))
		y, _ := os.ReadFile(filepath.Join(b, f))
		if len(x) == 0 {
			t.Fatalf("%s is empty", f)
		}
		if d := cmp.Diff(string(x), string(y)); d != "" {
			t.Errorf("%s differs between CSV and workbook input (-csv +xlsx):\n%s", f, d)
		}
	}
}
