package cli

import (
	"context"
	"encoding/csv"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/cdproto/emulation"
	"github.com/chromedp/cdproto/runtime"
	"github.com/chromedp/chromedp"
)

// chromiumPath is where Debian's chromium package puts the browser (as in
// the report package's browser tests).
const chromiumPath = "/usr/bin/chromium"

// startChromium starts headless Chromium with every host unresolvable, or
// skips the test where there is none (but fails in CI, which installs it).
func startChromium(t *testing.T) context.Context {
	t.Helper()
	if _, err := os.Stat(chromiumPath); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("headless Chromium is required in CI: %v (apt-get install chromium)", err)
		}
		t.Skipf("headless Chromium not found at %s (apt-get install chromium); skipping the browser test", chromiumPath)
	}
	parent, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	t.Cleanup(cancel)
	opts := append(chromedp.DefaultExecAllocatorOptions[:],
		chromedp.ExecPath(chromiumPath),
		chromedp.NoSandbox, // tests run as root in CI
		chromedp.DisableGPU,
		chromedp.NoFirstRun,
		chromedp.UserDataDir(t.TempDir()),
		chromedp.WindowSize(1280, 1000),
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("host-resolver-rules", "MAP * ~NOTFOUND"),
	)
	allocCtx, cancelAlloc := chromedp.NewExecAllocator(parent, opts...)
	t.Cleanup(cancelAlloc)
	ctx, cancelBrowser := chromedp.NewContext(allocCtx)
	t.Cleanup(cancelBrowser)
	if err := chromedp.Do(ctx); err != nil {
		t.Fatalf("start Chromium: %v", err)
	}
	return ctx
}

// usableJS is the number of branch rows the finder shows once the page is
// usable: the finder drawn and every chart drawn; 0 before.
const usableJS = `(() => {
	if (typeof echarts === "undefined") return 0;
	const rows = document.querySelectorAll("#fs-find tbody tr").length;
	if (rows === 0) return 0;
	for (const el of document.querySelectorAll(".chart")) {
		const inst = echarts.getInstanceByDom(el);
		if (!inst || !el.querySelector("canvas")) return 0;
		const zr = inst.getZr();
		if (zr._needsRefresh || zr._needsRefreshHover) return 0;
	}
	return rows;
})()`

// finderRowsJS is the finder's rows on screen, one array of cell texts
// each.
const finderRowsJS = `Array.from(document.querySelectorAll("#fs-find tbody tr")).map(tr => Array.from(tr.cells).map(td => td.textContent))`

// finderAllJS pages through the finder from its first page and returns
// every row's name and flags.
const finderAllJS = `(() => {
	const prev = document.getElementById("fs-find-prev"), next = document.getElementById("fs-find-next");
	while (!prev.disabled) prev.click();
	const out = [];
	for (;;) {
		for (const tr of document.querySelectorAll("#fs-find tbody tr")) {
			out.push([tr.cells[0].textContent, tr.cells[8].textContent]);
		}
		if (next.disabled) break;
		next.click();
	}
	while (!prev.disabled) prev.click();
	return out;
})()`

// TestReportLargeSiteBrowser runs the whole job on a generated building of
// 600 branches (risers of about 30 terminals, the survey mix of large
// sites), opens the report in headless Chromium with the network off and
// uses its branch finder as a reader would: it finds a branch by name,
// sorts by deviation from design, pages through every branch and shows only
// the flagged ones, each checked against the site's own sheets and the
// findings written beside the report. It logs the time from opening the
// file to a usable page; the target (< 3 s at 10,000 branches) is measured
// by BenchmarkOpenReport in internal/report and recorded in DEVELOPERS.md.
func TestReportLargeSiteBrowser(t *testing.T) {
	if testing.Short() {
		t.Skip("fits a 600-branch site and opens its report in Chromium")
	}
	browser := startChromium(t)
	dir := writeSpec(t, risersSpec(600))
	out := filepath.Join(t.TempDir(), "out")
	if code, _, errs := run(t, "run", dir, "--out", out, "--quiet"); code != ExitOK && code != ExitShort {
		t.Fatalf("run: exit %d: %s", code, errs)
	}

	// What the finder must hold, from outside the report: the terminal
	// branches of the generated sheets (a riser is a parent, not a terminal
	// branch) and the branches that findings.csv flags.
	branches := readCSV(t, filepath.Join(dir, "branches.csv"))
	parents := map[string]bool{}
	for _, r := range branches[1:] {
		parents[r[1]] = true
	}
	var terminals []string
	for _, r := range branches[1:] {
		if !parents[r[0]] {
			terminals = append(terminals, r[0])
		}
	}
	flaggedWant := map[string]bool{}
	findings := readCSV(t, filepath.Join(out, "findings.csv"))
	for _, r := range findings[1:] {
		// finding, branch, reading: branch findings other than
		// "undetermined" flag their branch.
		if r[2] != "" && r[3] == "" && r[1] != "undetermined" && !parents[r[2]] {
			flaggedWant[r[2]] = true
		}
	}
	if len(flaggedWant) == 0 {
		t.Fatal("no branch flagged on a site with fouled terminals: the filter check proves nothing")
	}

	ctx, cancel := chromedp.NewContext(browser)
	defer cancel()
	var exceptions []string
	var mu sync.Mutex
	if err := chromedp.Listen(ctx, func(e any) {
		if e, ok := e.(*runtime.EventExceptionThrown); ok {
			mu.Lock()
			defer mu.Unlock()
			exceptions = append(exceptions, e.ExceptionDetails.Text)
		}
	}); err != nil {
		t.Fatal(err)
	}
	start := time.Now()
	if err := chromedp.Do(ctx, chromedp.Navigate("file://"+filepath.Join(out, "report.html"))); err != nil {
		t.Fatal(err)
	}
	shown, err := chromedp.Run(ctx, chromedp.Poll[int](usableJS, chromedp.WithPollingTimeout(20*time.Second)))
	if err != nil {
		t.Fatalf("report not usable: %v", err)
	}
	usable := time.Since(start)
	t.Logf("%d terminal branches: report usable %v after opening (%d finder rows)", len(terminals), usable.Round(time.Millisecond), shown)
	if shown != 40 {
		t.Errorf("finder shows %d rows on its first page, want 40", shown)
	}
	set := func(js string) {
		t.Helper()
		if _, err := chromedp.Run(ctx, chromedp.Evaluate[int](js+`; 0`)); err != nil {
			t.Fatalf("%s: %v", js, err)
		}
	}

	// Every branch, once: page through the finder.
	all := evalJS[[][]string](t, ctx, finderAllJS)
	var names []string
	for _, r := range all {
		names = append(names, r[0])
	}
	slices.Sort(names)
	want := slices.Clone(terminals)
	slices.Sort(want)
	if !slices.Equal(names, want) {
		t.Errorf("paging through the finder gives %d branches, want the %d terminals of branches.csv", len(names), len(want))
	}

	// Search by name: a branch from the middle of the sheet.
	needle := terminals[len(terminals)/2]
	set(`(() => { const q = document.getElementById("fs-find-q"); q.value = ` + strconv.Quote(needle) + `; q.dispatchEvent(new Event("input")); })()`)
	rows := evalJS[[][]string](t, ctx, finderRowsJS)
	if len(rows) == 0 || !slices.ContainsFunc(rows, func(r []string) bool { return r[0] == needle }) {
		t.Errorf("search for %q: rows %v do not hold it", needle, rows)
	}
	for _, r := range rows {
		if !strings.Contains(strings.ToLower(r[0]), strings.ToLower(needle)) {
			t.Errorf("search for %q shows %q", needle, r[0])
		}
	}
	set(`(() => { const q = document.getElementById("fs-find-q"); q.value = ""; q.dispatchEvent(new Event("input")); })()`)

	// Sort by deviation as found: the first page in falling order, and
	// its first row at least as far from design as any branch.
	set(`(() => { const s = document.getElementById("fs-find-sort"); s.value = "before"; s.dispatchEvent(new Event("change")); })()`)
	rows = evalJS[[][]string](t, ctx, finderRowsJS)
	dev := func(s string) float64 {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil {
			return -1
		}
		return math.Abs(v - 100)
	}
	for k := 1; k < len(rows); k++ {
		if dev(rows[k][2]) > dev(rows[k-1][2]) {
			t.Errorf("sorted by deviation as found, row %d (%s %s %%) is further from design than row %d (%s %s %%)", k+1, rows[k][0], rows[k][2], k, rows[k-1][0], rows[k-1][2])
		}
	}
	maxDev := evalJS[float64](t, ctx, `Math.max(...(() => { const f = JSON.parse(document.getElementById("fs-data").textContent).finder; return f.f0.filter(v => v !== null).map(v => Math.abs(v - 100)); })())`)
	if len(rows) == 0 || math.Abs(dev(rows[0][2])-maxDev) > 0.051 {
		t.Errorf("sorted by deviation, the first row is %v; want one %.1f %% from design", rows[:min(1, len(rows))], maxDev)
	}

	// The flow and resistance charts follow the finder's page.
	var page []string
	for _, r := range rows {
		page = append(page, r[0])
	}
	for _, id := range []string{"fs-flow", "fs-ratio"} {
		axis := evalJS[[]string](t, ctx, `echarts.getInstanceByDom(document.getElementById("`+id+`")).getOption().xAxis[0].data`)
		if !slices.Equal(axis, page) {
			t.Errorf("chart %s shows %v, want the finder's page %v", id, axis, page)
		}
	}

	// Only the flagged: every one findings.csv flags, and nothing else.
	set(`(() => { const c = document.getElementById("fs-find-flagged"); c.checked = true; c.dispatchEvent(new Event("change")); })()`)
	all = evalJS[[][]string](t, ctx, finderAllJS)
	got := map[string]bool{}
	for _, r := range all {
		got[r[0]] = true
		if strings.TrimSpace(r[1]) == "" {
			t.Errorf("flagged only: %s shown without a flag", r[0])
		}
	}
	for id := range flaggedWant {
		if !got[id] {
			t.Errorf("flagged only: %s (flagged in findings.csv) not shown", id)
		}
	}
	for id := range got {
		if !flaggedWant[id] {
			t.Errorf("flagged only: %s shown, but findings.csv does not flag it", id)
		}
	}

	// A long table, a page at a time: searched for the branch, the
	// readings table shows its rows of readings.csv, cell for cell.
	shownReadings := evalJS[[][]string](t, ctx, `(() => {
		const wrap = Array.from(document.querySelectorAll("[data-table]")).find(w => w.closest("section").querySelector("h2").textContent.includes("Readings"));
		const q = wrap.previousElementSibling.querySelector("input");
		q.value = `+strconv.Quote(needle)+`; q.dispatchEvent(new Event("input"));
		return Array.from(wrap.querySelectorAll("tbody tr")).map(tr => Array.from(tr.cells).map(td => td.textContent));
	})()`)
	var wantReadings [][]string
	for _, r := range readCSV(t, filepath.Join(out, "readings.csv"))[1:] {
		if r[2] == needle {
			wantReadings = append(wantReadings, r)
		}
	}
	if len(wantReadings) == 0 {
		t.Fatalf("readings.csv has no reading at %s", needle)
	}
	for _, w := range wantReadings {
		if !slices.ContainsFunc(shownReadings, func(r []string) bool { return slices.Equal(r, w) }) {
			t.Errorf("searching the readings table for %s: row %q of readings.csv not shown; shown %q", needle, w, shownReadings)
		}
	}

	// Nothing runs off the side of a tablet's window.
	if _, err := chromedp.Call(ctx, emulation.SetDeviceMetricsOverride, emulation.SetDeviceMetricsOverrideParams{Width: 768, Height: 1000, DeviceScaleFactor: 1}); err != nil {
		t.Fatal(err)
	}
	over := evalJS[int](t, ctx, `document.documentElement.scrollWidth - window.innerWidth`)
	if over > 0 {
		t.Errorf("at 768 px the large report runs %d px off the side", over)
	}
	mu.Lock()
	defer mu.Unlock()
	if len(exceptions) > 0 {
		t.Errorf("script exceptions: %v", exceptions)
	}
}

// evalJS evaluates js in the page and returns its value.
func evalJS[T any](t *testing.T, ctx context.Context, js string) T {
	t.Helper()
	v, err := chromedp.Run(ctx, chromedp.Evaluate[T](js))
	if err != nil {
		t.Fatalf("%.80s: %v", js, err)
	}
	return v
}

func readCSV(t *testing.T, path string) [][]string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	return rows
}
