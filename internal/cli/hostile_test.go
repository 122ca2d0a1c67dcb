package cli

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestHostileSite runs the whole job on testdata/hostile-site, whose site,
// branch and note texts are markup, script, the chart library's raw-code
// marker and a spreadsheet formula. The report must carry none of them as
// live markup (the browser test in internal/report proves no script runs on
// such names), and the field sheet must neutralise the formula (OWASP, "CSV
// Injection").
func TestHostileSite(t *testing.T) {
	out := filepath.Join(t.TempDir(), "out")
	code, _, errs := run(t, "run", filepath.Join("..", "..", "testdata", "hostile-site"), "--out", out, "--quiet")
	if code != ExitOK {
		t.Fatalf("run on the hostile site: exit %d: %s", code, errs)
	}
	html, err := os.ReadFile(filepath.Join(out, "report.html"))
	if err != nil {
		t.Fatal(err)
	}
	page := string(html)
	if !strings.Contains(page, "alert(1)") {
		t.Fatal("the hostile names do not reach the report at all; the test proves nothing")
	}
	for _, bad := range []string{"<script>alert", "</script><script>", "<!--<script>", "<img src=x", `onmouseover="alert`} {
		if strings.Contains(page, bad) {
			t.Errorf("report.html holds %q as written by the user", bad)
		}
	}
	// In page text the chart library's raw-code marker is harmless words;
	// inside the chart data it must arrive broken.
	const open = `<script type="application/json" id="fs-data">`
	i := strings.Index(page, open)
	if i < 0 {
		t.Fatal("report.html has no chart data block")
	}
	data := page[i+len(open):]
	data = data[:strings.Index(data, "</script>")]
	if !strings.Contains(data, "alert(2)") {
		t.Fatal("the marker name does not reach the chart data; the test proves nothing")
	}
	if strings.Contains(data, "__f__") {
		t.Error("the chart data holds the raw-code marker unbroken")
	}
	csv, err := os.ReadFile(filepath.Join(out, "field-sheet.csv"))
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(string(csv), `"'=HYPERLINK(""http://x"")"`) {
		t.Errorf("field-sheet.csv does not neutralise the formula-like branch name:\n%s", csv)
	}
}
