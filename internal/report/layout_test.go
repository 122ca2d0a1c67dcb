package report

import (
	"fmt"
	"regexp"
	"testing"
	"time"

	"github.com/chromedp/cdproto/cdp"
	"github.com/chromedp/cdproto/emulation"
	"github.com/chromedp/cdproto/page"
	"github.com/chromedp/chromedp"
)

// pdfPage matches a page object of a PDF written by Chromium (Skia writes
// no object streams, so every page object is in plain text).
var pdfPage = regexp.MustCompile(`/Type\s*/Page[^s]`)

// overflowJS reports what runs off the side of the window: the page's
// scroll width beyond the window, and each table wider than its wrapper.
const overflowJS = `(() => {
	const out = {page: document.documentElement.scrollWidth - window.innerWidth, tables: []};
	for (const w of document.querySelectorAll("section.step .tablewrap")) {
		if (w.scrollWidth > w.clientWidth + 1) out.tables.push(w.closest("section").id + ": " + (w.scrollWidth - w.clientWidth) + " px");
	}
	return out;
})()`

// brokenJS lists the identifier cells and words (kept on one line) whose text runs
// over more than one line box.
const brokenJS = `Array.from(document.querySelectorAll("td.nw, span.id")).filter(td => {
	const r = document.createRange();
	r.selectNodeContents(td);
	const tops = new Set(Array.from(r.getClientRects()).map(x => Math.round(x.top)));
	return tops.size > 1;
}).map(td => td.textContent)`

// firstPageJS gives, in print layout, the bottom of each action heading in
// CSS pixels from the top of the document.
const firstPageJS = `["before", "fix", "pump"].map(id => {
	const h = document.querySelector("#" + id + " h2");
	return h ? h.getBoundingClientRect().bottom + window.scrollY : -1;
})`

// trimFirstPageJS is firstPageJS for the round after setting: its first
// step and the pump.
const trimFirstPageJS = `["proof", "pump"].map(id => {
	const h = document.querySelector("#" + id + " h2");
	return h ? h.getBoundingClientRect().bottom + window.scrollY : -1;
})`

type overflow struct {
	Page   int      `json:"page"`
	Tables []string `json:"tables"`
}

// TestBrowserLayout checks, in headless Chromium, that the report uses the
// width it has without running off a tablet's or an 800 px window's side,
// that identifiers are never broken, that the first printed page holds the
// start of the visit, and that printing gives a sensible page count on A4
// and Letter.
func TestBrowserLayout(t *testing.T) {
	browserCtx := startBrowser(t)
	for _, tc := range []struct {
		name   string
		in     Input
		maxPDF int // most printed pages
	}{
		// The visit takes 2-3 pages for 5 branches, 3-4 for 40; each of the
		// appendix's chart sections about one page; its tables 1-4.
		{"sample", sampleInput(), 9},
		{"40 branches", bigInput(40), 15},
		// A large site prints a page of each long table (the visit's fixes
		// and settings, the finder, the appendix's three) and a bounded set
		// of charts, whatever its size.
		{"1000 branches", siteInput(1000), 32},
		// The round after setting: its four steps, then the appendix
		// without the plan's charts.
		{"trim", trimInput(), 8},
		{"trim, 1000 branches", withTrim(siteInput(1000)), 24},
	} {
		t.Run(tc.name, func(t *testing.T) {
			in := tc.in
			if in.Trim == nil && len(in.Visit.Settings.Rows) == 0 {
				in.Visit = sampleInput().Visit
				in.Visit.Settings.Rows = nil
				for i, b := range in.Branches {
					in.Visit.Settings.Rows = append(in.Visit.Settings.Rows, []string{fmt.Sprint(i + 1), b.ID, "V-25", "4.00 turns", "2.10 turns", "12.5", "0.400"})
				}
			}
			file := writeFile(t, in)
			ctx, _ := open(t, browserCtx, file)
			if _, err := chromedp.Run(ctx, chromedp.Poll[int](readyJS, chromedp.WithPollingTimeout(15*time.Second))); err != nil {
				t.Fatalf("charts not ready: %v", err)
			}
			// Screen widths: a tablet in portrait (768) and an 800 px window.
			for _, w := range []int64{768, 800, 1280} {
				if _, err := chromedp.Call(ctx, emulation.SetDeviceMetricsOverride, emulation.SetDeviceMetricsOverrideParams{Width: w, Height: 1000, DeviceScaleFactor: 1}); err != nil {
					t.Fatal(err)
				}
				o, err := chromedp.Run(ctx, chromedp.Evaluate[overflow](overflowJS))
				if err != nil {
					t.Fatal(err)
				}
				if o.Page > 0 || len(o.Tables) > 0 {
					t.Errorf("at %d px the page runs %d px off the side; tables that scroll: %v", w, o.Page, o.Tables)
				}
				broken, err := chromedp.Run(ctx, chromedp.Evaluate[[]string](brokenJS))
				if err != nil {
					t.Fatal(err)
				}
				if len(broken) > 0 {
					t.Errorf("at %d px these identifiers break over lines: %q", w, broken)
				}
			}

			// Print layout at A4's printable width (210 mm less 12 mm margins
			// each side = 186 mm = 703 CSS px); the first page holds 297 mm
			// less the 30 mm of top and bottom margins = 267 mm = 1009 px.
			if _, err := chromedp.Call(ctx, emulation.SetEmulatedMedia, emulation.SetEmulatedMediaParams{Media: "print"}); err != nil {
				t.Fatal(err)
			}
			if _, err := chromedp.Call(ctx, emulation.SetDeviceMetricsOverride, emulation.SetDeviceMetricsOverrideParams{Width: 703, Height: 1009, DeviceScaleFactor: 1}); err != nil {
				t.Fatal(err)
			}
			heads, js := []string{"before you start", "fix first", "pump"}, firstPageJS
			if in.Trim != nil {
				heads, js = []string{"as left", "pump"}, trimFirstPageJS
			}
			bottoms, err := chromedp.Run(ctx, chromedp.Evaluate[[]float64](js))
			if err != nil {
				t.Fatal(err)
			}
			for k, id := range heads {
				if bottoms[k] < 0 || bottoms[k] > 1009 {
					t.Errorf("printed, the heading %q ends at %.0f px, not on the first page (1009 px)", id, bottoms[k])
				}
			}
			if _, err := chromedp.Call(ctx, emulation.ClearDeviceMetricsOverride, cdp.Empty{}); err != nil {
				t.Fatal(err)
			}

			for _, paper := range []struct {
				name string
				w, h float64 // inches
			}{{"A4", 8.27, 11.69}, {"Letter", 8.5, 11}} {
				yes := true
				res, err := chromedp.Call(ctx, page.PrintToPDF, page.PrintToPDFParams{PaperWidth: paper.w, PaperHeight: paper.h, PreferCSSPageSize: &yes})
				if err != nil {
					t.Fatalf("print to PDF on %s: %v", paper.name, err)
				}
				n := len(pdfPage.FindAll(res.Data, -1))
				t.Logf("%s: %d pages", paper.name, n)
				lo, hi := 4, tc.maxPDF
				if n < lo || n > hi {
					t.Errorf("printed on %s: %d pages, want %d to %d", paper.name, n, lo, hi)
				}
			}
		})
	}
}

// TestBrowserLayoutControls shows that the layout checks can fail: a
// settings table too wide for a tablet, an identifier cell allowed to
// wrap, and a first step long enough to push the pump off the first page
// are each caught.
func TestBrowserLayoutControls(t *testing.T) {
	browserCtx := startBrowser(t)
	in := sampleInput()
	wide := in.Visit.Settings
	for k := 0; k < 20; k++ {
		wide.Columns = append(wide.Columns, fmt.Sprintf("extra column %d", k))
	}
	for r := range wide.Rows {
		for k := 0; k < 20; k++ {
			wide.Rows[r] = append(wide.Rows[r], "12345.678")
		}
	}
	in.Visit.Settings = wide
	for k := 0; k < 40; k++ {
		in.Visit.BeforeStart = append(in.Visit.BeforeStart, fmt.Sprintf("Line %d of a long list of things to do before starting.", k))
	}
	ctx, _ := open(t, browserCtx, writeFile(t, in))
	if _, err := chromedp.Run(ctx, chromedp.Poll[int](readyJS, chromedp.WithPollingTimeout(15*time.Second))); err != nil {
		t.Fatalf("charts not ready: %v", err)
	}
	if _, err := chromedp.Call(ctx, emulation.SetDeviceMetricsOverride, emulation.SetDeviceMetricsOverrideParams{Width: 768, Height: 1000, DeviceScaleFactor: 1}); err != nil {
		t.Fatal(err)
	}
	o, err := chromedp.Run(ctx, chromedp.Evaluate[overflow](overflowJS))
	if err != nil {
		t.Fatal(err)
	}
	if len(o.Tables) == 0 {
		t.Errorf("a 27-column settings table at 768 px is not caught as running off the side")
	}
	// An identifier cell made to wrap in a narrow column.
	const squeeze = `(() => { const td = document.querySelector("td.nw"); td.style.whiteSpace = "normal"; td.style.maxWidth = "2em"; td.textContent = "FCU-R.3-LONG-ID"; return 1; })()`
	if _, err := chromedp.Run(ctx, chromedp.Evaluate[int](squeeze)); err != nil {
		t.Fatal(err)
	}
	broken, err := chromedp.Run(ctx, chromedp.Evaluate[[]string](brokenJS))
	if err != nil {
		t.Fatal(err)
	}
	if len(broken) == 0 {
		t.Errorf("an identifier squeezed over lines is not caught")
	}
	if _, err := chromedp.Call(ctx, emulation.SetEmulatedMedia, emulation.SetEmulatedMediaParams{Media: "print"}); err != nil {
		t.Fatal(err)
	}
	if _, err := chromedp.Call(ctx, emulation.SetDeviceMetricsOverride, emulation.SetDeviceMetricsOverrideParams{Width: 703, Height: 1009, DeviceScaleFactor: 1}); err != nil {
		t.Fatal(err)
	}
	bottoms, err := chromedp.Run(ctx, chromedp.Evaluate[[]float64](firstPageJS))
	if err != nil {
		t.Fatal(err)
	}
	if bottoms[2] <= 1009 {
		t.Errorf("with 40 lines before it, the pump heading still ends at %.0f px, on the first page", bottoms[2])
	}
}
