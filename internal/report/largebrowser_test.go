package report

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
)

// usableJS is truthy once the page can be used: parsed, its script run,
// and on a large site's report the branch finder's first page and every
// long table's pager shown. The charts may still be drawing (readyJS).
const usableJS = `(() => {
	if (document.readyState === "loading" || typeof echarts === "undefined") return 0;
	const find = document.getElementById("fs-find");
	if (find && find.querySelectorAll("tbody tr").length === 0) return 0;
	for (const w of document.querySelectorAll("[data-table]")) {
		if (!w.previousElementSibling || !w.previousElementSibling.classList.contains("pager")) return 0;
	}
	return 1;
})()`

// BenchmarkOpenReport opens the report of an invented site of n branches
// (siteInput) in headless Chromium and times it from navigation to a usable
// page (usableJS); ms/usable is that time. FLOWSET_OPEN_REPORT=FILE times
// the given report file instead (for measuring reports of other versions
// or of generated sites by hand).
func BenchmarkOpenReport(b *testing.B) {
	files := map[string]string{}
	var names []string
	if f := os.Getenv("FLOWSET_OPEN_REPORT"); f != "" {
		files["file"], names = f, []string{"file"}
	} else {
		for _, n := range []int{1000, 10000} {
			name := fmt.Sprintf("n=%d", n)
			files[name] = writeFile(b, siteInput(n))
			names = append(names, name)
		}
	}
	browserCtx := startBrowser(b)
	for _, name := range names {
		b.Run(name, func(b *testing.B) {
			st, err := os.Stat(files[name])
			if err != nil {
				b.Fatal(err)
			}
			var usable, drawn time.Duration
			poll := func(ctx context.Context, js string) time.Duration {
				start := time.Now()
				if _, err := chromedp.Run(ctx, chromedp.Poll[int](js, chromedp.WithPollingTimeout(60*time.Second), chromedp.WithPollingInterval(10*time.Millisecond))); err != nil {
					b.Fatalf("not ready: %v", err)
				}
				return time.Since(start)
			}
			pid := chromedp.FromContext(browserCtx).Browser.Process().Pid
			var cpu time.Duration
			for b.Loop() {
				start, cpu0 := time.Now(), treeCPU(pid)
				ctx, _ := open(b, browserCtx, files[name])
				opened := time.Since(start)
				u := poll(ctx, usableJS)
				usable += opened + u
				cpu += treeCPU(pid) - cpu0
				drawn += opened + u + poll(ctx, readyJS)
			}
			b.ReportMetric(float64(usable.Milliseconds())/float64(b.N), "ms/usable")
			b.ReportMetric(float64(drawn.Milliseconds())/float64(b.N), "ms/charts-drawn")
			// The machine may be shared: Chromium's own CPU time to a usable
			// page (all its processes; 0 where /proc is missing).
			b.ReportMetric(float64(cpu.Milliseconds())/float64(b.N), "cpu-ms/usable")
			b.ReportMetric(float64(st.Size()), "bytes/report")
		})
	}
}

// treeCPU is the user and system CPU time of process pid and every process
// below it, read from /proc (Linux); 0 where /proc cannot be read.
func treeCPU(pid int) time.Duration {
	ents, err := os.ReadDir("/proc")
	if err != nil {
		return 0
	}
	type proc struct {
		ppid int
		cpu  time.Duration
	}
	procs := map[int]proc{}
	const tick = 10 * time.Millisecond // USER_HZ is 100 on Linux
	for _, e := range ents {
		p, err := strconv.Atoi(e.Name())
		if err != nil {
			continue
		}
		b, err := os.ReadFile("/proc/" + e.Name() + "/stat")
		if err != nil {
			continue
		}
		// The command name may hold spaces: the fields follow its ")".
		f := strings.Fields(string(b[bytes.LastIndexByte(b, ')')+1:]))
		if len(f) < 13 {
			continue
		}
		ppid, _ := strconv.Atoi(f[1])
		ut, _ := strconv.Atoi(f[11])
		st, _ := strconv.Atoi(f[12])
		procs[p] = proc{ppid, time.Duration(ut+st) * tick}
	}
	var total time.Duration
	for p, pr := range procs {
		for q := p; q > 1; q = procs[q].ppid {
			if q == pid {
				total += pr.cpu
				break
			}
			if _, ok := procs[q]; !ok {
				break
			}
		}
	}
	return total
}
