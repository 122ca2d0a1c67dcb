package report

import (
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/cdproto/fetch"
	"github.com/chromedp/cdproto/log"
	"github.com/chromedp/cdproto/network"
	"github.com/chromedp/cdproto/page"
	"github.com/chromedp/cdproto/runtime"
	"github.com/chromedp/chromedp"
	"github.com/go-echarts/go-echarts/v2/charts"
	"github.com/go-echarts/go-echarts/v2/opts"
)

// chromiumPath is where Debian's chromium package puts the browser.
const chromiumPath = "/usr/bin/chromium"

// browserEvents collects what the page did that a report must never do.
type browserEvents struct {
	mu         sync.Mutex
	exceptions []string
	consoleErr []string
	dialogs    []string
	requests   []string // any request other than the report file and data: URLs
}

func (e *browserEvents) add(list *[]string, s string) {
	e.mu.Lock()
	defer e.mu.Unlock()
	*list = append(*list, s)
}

// readyJS is truthy once every chart container has an echarts instance
// whose renderer has nothing left to paint. Animation is off, so that is
// when drawing has finished; a "finished" event hook could fire before a
// listener exists.
const readyJS = `(() => {
	if (typeof echarts === "undefined") return 0;
	const els = Array.from(document.querySelectorAll(".chart"));
	if (els.length === 0) return 0;
	for (const el of els) {
		const inst = echarts.getInstanceByDom(el);
		if (!inst || !el.querySelector("canvas")) return 0;
		const zr = inst.getZr();
		if (zr._needsRefresh || zr._needsRefreshHover) return 0;
	}
	return els.length;
})()`

// pixelsJS counts, per chart, the canvas pixels that are neither
// transparent nor white, i.e. what was drawn over the background.
const pixelsJS = `Array.from(document.querySelectorAll(".chart")).map(el => {
	let drawn = 0, canvases = 0;
	for (const c of el.querySelectorAll("canvas")) {
		canvases++;
		const d = c.getContext("2d").getImageData(0, 0, c.width, c.height).data;
		for (let i = 0; i < d.length; i += 4) {
			if (d[i+3] > 0 && !(d[i] > 245 && d[i+1] > 245 && d[i+2] > 245)) drawn++;
		}
	}
	return {id: el.id, canvases: canvases, drawn: drawn};
})`

// tooltipsJS opens the tooltip of the first item of every series of every
// chart, so that echarts writes each name into tooltip HTML.
const tooltipsJS = `(() => {
	let n = 0;
	for (const el of document.querySelectorAll(".chart")) {
		const inst = echarts.getInstanceByDom(el);
		const series = inst.getOption().series || [];
		for (let k = 0; k < series.length; k++) {
			inst.dispatchAction({type: "showTip", seriesIndex: k, dataIndex: 0});
			n++;
		}
	}
	return n;
})()`

// injectedJS counts elements that only injected markup could have made.
const injectedJS = `document.querySelectorAll("img, iframe, object, embed, a[href], link, base, form, style:not(head > style)").length + (document.scripts.length - 3)`

type chartPixels struct {
	ID       string `json:"id"`
	Canvases int    `json:"canvases"`
	Drawn    int    `json:"drawn"`
}

// startBrowser starts headless Chromium for the test, or skips the test
// where there is none (but fails in CI, which must have it).
func startBrowser(t testing.TB) context.Context {
	t.Helper()
	if _, err := os.Stat(chromiumPath); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("headless Chromium is required in CI: %v (apt-get install chromium)", err)
		}
		t.Skipf("headless Chromium not found at %s (apt-get install chromium); skipping the browser test", chromiumPath)
	}
	limit := 60 * time.Second
	if _, ok := t.(*testing.B); ok {
		limit = 10 * time.Minute // a benchmark may open an old report of 20 MB
	}
	parent, cancel := context.WithTimeout(context.Background(), limit)
	t.Cleanup(cancel)
	opts := append(chromedp.DefaultExecAllocatorOptions[:],
		chromedp.ExecPath(chromiumPath),
		chromedp.NoSandbox, // tests run as root in CI
		chromedp.DisableGPU,
		chromedp.NoFirstRun,
		chromedp.UserDataDir(t.TempDir()),
		chromedp.WindowSize(760, 1000),
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		// No name resolves: a stray request fails fast instead of leaving.
		chromedp.Flag("host-resolver-rules", "MAP * ~NOTFOUND"),
	)
	allocCtx, cancelAlloc := chromedp.NewExecAllocator(parent, opts...)
	t.Cleanup(cancelAlloc)
	browserCtx, cancelBrowser := chromedp.NewContext(allocCtx)
	t.Cleanup(cancelBrowser)
	if err := chromedp.Do(browserCtx); err != nil {
		t.Fatalf("start Chromium: %v", err)
	}
	return browserCtx
}

// open opens file in a new tab of the browser with every request other than
// the file itself and data: URLs failed, and records what the page does.
func open(t testing.TB, browserCtx context.Context, file string) (context.Context, *browserEvents) {
	t.Helper()
	fileURL := "file://" + file
	ctx, cancel := chromedp.NewContext(browserCtx)
	t.Cleanup(cancel)
	ev := &browserEvents{}
	allowed := func(u string) bool { return u == fileURL || strings.HasPrefix(u, "data:") }
	err := chromedp.Listen(ctx, func(e any) {
		switch e := e.(type) {
		case *runtime.EventExceptionThrown:
			d := e.ExceptionDetails
			msg := d.Text
			if d.Exception != nil {
				msg += " " + d.Exception.Description
			}
			ev.add(&ev.exceptions, msg)
		case *runtime.EventConsoleAPICalled:
			if e.Type == runtime.ConsoleAPICalledTypeError || e.Type == runtime.ConsoleAPICalledTypeAssert {
				var parts []string
				for _, a := range e.Args {
					parts = append(parts, string(a.Value)+a.Description)
				}
				ev.add(&ev.consoleErr, strings.Join(parts, " "))
			}
		case *log.EventEntryAdded:
			if e.Entry.Level == log.EntryLevelError {
				ev.add(&ev.consoleErr, e.Entry.Text+" "+e.Entry.URL)
			}
		case *page.EventJavascriptDialogOpening:
			ev.add(&ev.dialogs, string(e.Type)+": "+e.Message)
			// The dialog blocks the page until it is closed.
			go chromedp.Call(ctx, page.HandleJavaScriptDialog, page.HandleJavaScriptDialogParams{Accept: false})
		case *network.EventRequestWillBeSent:
			if !allowed(e.Request.URL) {
				ev.add(&ev.requests, e.Request.URL)
			}
		case *fetch.EventRequestPaused:
			if allowed(e.Request.URL) {
				go chromedp.Call(ctx, fetch.ContinueRequest, fetch.ContinueRequestParams{RequestID: e.RequestID})
				return
			}
			ev.add(&ev.requests, e.Request.URL)
			go chromedp.Call(ctx, fetch.FailRequest, fetch.FailRequestParams{RequestID: e.RequestID, ErrorReason: network.ErrorReasonBlockedByClient})
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	// Every request pauses; only the file itself may go on.
	if _, err := chromedp.Call(ctx, fetch.Enable, fetch.EnableParams{Patterns: []*fetch.RequestPattern{{URLPattern: "*"}}}); err != nil {
		t.Fatalf("enable request interception: %v", err)
	}
	if err := chromedp.Do(ctx, chromedp.Navigate(fileURL)); err != nil {
		t.Fatalf("open %s: %v", fileURL, err)
	}
	return ctx, ev
}

func writeFile(t testing.TB, in Input) string {
	t.Helper()
	file := filepath.Join(t.TempDir(), "report.html")
	f, err := os.Create(file)
	if err != nil {
		t.Fatal(err)
	}
	if err := Write(f, in); err != nil {
		t.Fatal(err)
	}
	if err := f.Close(); err != nil {
		t.Fatal(err)
	}
	return file
}

// TestBrowser opens reports in headless Chromium with the network off and
// checks that every chart draws, that nothing is fetched, and that no
// injected name runs.
func TestBrowser(t *testing.T) {
	browserCtx := startBrowser(t)
	for _, tc := range []struct {
		name string
		in   Input
	}{
		{"hostile names", hostileInput()},
		{"hostile names, large site", hostileLarge()},
		{"sample", sampleInput()},
		{"trim", trimInput()},
		{"trim, hostile names", makeHostile(trimInput())},
		{"trim, large site", withTrim(siteInput(300))},
	} {
		t.Run(tc.name, func(t *testing.T) {
			file := writeFile(t, tc.in)
			start := time.Now()
			ctx, ev := open(t, browserCtx, file)
			n, err := chromedp.Run(ctx, chromedp.Poll[int](readyJS, chromedp.WithPollingTimeout(15*time.Second)))
			if err != nil {
				t.Fatalf("charts not ready: %v", err)
			}
			t.Logf("%d charts drawn %v after navigation started", n, time.Since(start).Round(time.Millisecond))
			var data struct {
				Charts []struct{ ID string }
			}
			if err := json.Unmarshal(dataBlock(t, file), &data); err != nil {
				t.Fatal(err)
			}
			if n != len(data.Charts) {
				t.Errorf("%d chart containers ready, want %d", n, len(data.Charts))
			}

			px, err := chromedp.Run(ctx, chromedp.Evaluate[[]chartPixels](pixelsJS))
			if err != nil {
				t.Fatalf("count pixels: %v", err)
			}
			if len(px) != n {
				t.Errorf("pixel count covers %d charts, want %d", len(px), n)
			}
			for _, p := range px {
				// Axes and labels alone draw about a thousand pixels; a chart
				// with its series draws several thousand.
				if p.Canvases == 0 || p.Drawn < 2000 {
					t.Errorf("chart %s: %d canvases, %d drawn pixels; want a canvas with at least 2000", p.ID, p.Canvases, p.Drawn)
				}
			}

			shot, err := chromedp.Run(ctx, chromedp.FullScreenshot(100))
			if err != nil {
				t.Fatalf("screenshot: %v", err)
			}
			png := filepath.Join(filepath.Dir(file), "report.png")
			if err := os.WriteFile(png, shot, 0o644); err != nil {
				t.Fatal(err)
			}
			t.Logf("screenshot: %s (%d bytes)", png, len(shot))
			if keep := os.Getenv("FLOWSET_SCREENSHOT_DIR"); keep != "" {
				name := strings.ReplaceAll(tc.name, " ", "-") + ".png"
				if err := os.WriteFile(filepath.Join(keep, name), shot, 0o644); err != nil {
					t.Fatal(err)
				}
			}

			tips, err := chromedp.Run(ctx, chromedp.Evaluate[int](tooltipsJS))
			if err != nil {
				t.Fatalf("open tooltips: %v", err)
			}
			// Tooltips render on a timer; give them a moment, then look.
			if err := chromedp.Do(ctx, chromedp.Sleep(300*time.Millisecond)); err != nil {
				t.Fatal(err)
			}
			injected, err := chromedp.Run(ctx, chromedp.Evaluate[int](injectedJS))
			if err != nil {
				t.Fatalf("look for injected elements: %v", err)
			}
			if injected != 0 {
				t.Errorf("after opening %d tooltips the page has %d elements or scripts it should not have", tips, injected)
			}

			ev.mu.Lock()
			defer ev.mu.Unlock()
			for _, c := range []struct {
				what string
				list []string
			}{
				{"runtime exception", ev.exceptions},
				{"console error", ev.consoleErr},
				{"JavaScript dialog", ev.dialogs},
				{"request off the file", ev.requests},
			} {
				for _, s := range c.list {
					t.Errorf("%s: %s", c.what, s)
				}
			}
		})
	}

	// The checks above must be able to fail: a page from go-echarts' own
	// renderer, with a raw hostile title and its default remote script,
	// must trip the dialog, request and exception detectors.
	t.Run("control: unsafe page is caught", func(t *testing.T) {
		l := charts.NewLine()
		l.SetGlobalOptions(charts.WithTitleOpts(opts.Title{Title: "</script><script>alert(1)</script>"}))
		l.AddSeries("s", []opts.LineData{{Value: 1}})
		file := filepath.Join(t.TempDir(), "unsafe.html")
		f, err := os.Create(file)
		if err != nil {
			t.Fatal(err)
		}
		if err := l.Render(f); err != nil {
			t.Fatal(err)
		}
		if err := f.Close(); err != nil {
			t.Fatal(err)
		}
		ctx, ev := open(t, browserCtx, file)
		if err := chromedp.Do(ctx, chromedp.Sleep(500*time.Millisecond)); err != nil {
			t.Fatal(err)
		}
		ev.mu.Lock()
		defer ev.mu.Unlock()
		if len(ev.dialogs) == 0 || len(ev.requests) == 0 || len(ev.exceptions) == 0 {
			t.Errorf("unsafe page: %d dialogs, %d requests, %d exceptions caught; want each at least 1", len(ev.dialogs), len(ev.requests), len(ev.exceptions))
		}
	})
}

// dataBlock returns the chart data of the report file.
func dataBlock(t *testing.T, file string) []byte {
	t.Helper()
	b, err := os.ReadFile(file)
	if err != nil {
		t.Fatal(err)
	}
	_, data := pageParts(t, b)
	return data
}
