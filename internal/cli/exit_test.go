package cli

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
)

// plainParallelSite writes a site of n plain parallel branches (a pipe and
// a terminal each, no valve) on a pump, read by a flow on every branch.
func plainParallelSite(t *testing.T, n int) string {
	t.Helper()
	dir := mkdir(t, filepath.Join(t.TempDir(), fmt.Sprintf("parallel-%d", n)))
	var br, rd strings.Builder
	br.WriteString("id,design flow [l/s],pipe standard,pipe size,pipe length [m],terminal drop [kPa]\n")
	rd.WriteString("state,where,quantity,value,unit,instrument\n")
	for i := range n {
		fmt.Fprintf(&br, "B%d,0.1,en10255-m,DN20,10,10\n", i)
		fmt.Fprintf(&rd, "s,B%d,flow,0.1,l/s,clamp-on\n", i)
	}
	mustWrite(t, dir+"/site.csv", "key,value\nname,parallel\nfluid,water\ntemperature [degC],70\nboundary,pump\n")
	mustWrite(t, dir+"/branches.csv", br.String())
	mustWrite(t, dir+"/pump.csv", "flow [l/s],head [m]\n0,20\n30,18\n60,12\n")
	mustWrite(t, dir+"/readings.csv", rd.String())
	return dir
}

// TestPlainParallelBranches runs fit, plan and run on sites of plain
// parallel branches on either side of the size (300) at which the fit
// goes matrix-free; at 300 the fit once panicked in its local Jacobian.
func TestPlainParallelBranches(t *testing.T) {
	for _, n := range []int{299, 300, 301} {
		dir := plainParallelSite(t, n)
		for _, cmd := range []string{"check", "fit", "plan"} {
			if code, _, errs := run(t, cmd, dir); code != ExitOK {
				t.Errorf("%s on %d plain branches: exit %d: %s", cmd, n, code, errs)
			}
		}
		if code, _, errs := run(t, "run", dir, "--out", filepath.Join(t.TempDir(), "out"), "--quiet"); code != ExitOK {
			t.Errorf("run on %d plain branches: exit %d: %s", n, code, errs)
		}
	}
}

// panicWriter panics on its first write: a stand-in for a bug anywhere
// below the command line.
type panicWriter struct{}

func (panicWriter) Write([]byte) (int, error) { panic("write on a broken stream") }

// TestPanicReported checks that a panic below the command line ends in a
// short report on stderr and its own exit status, not a stack dump.
func TestPanicReported(t *testing.T) {
	var se bytes.Buffer
	code := RunIO(context.Background(), []string{"check", surveyDir("plantroom")}, &IO{In: strings.NewReader(""), Out: panicWriter{}, Err: &se, Now: fixedClock})
	if code != ExitInternal {
		t.Errorf("exit %d, want %d", code, ExitInternal)
	}
	for _, w := range []string{"internal error", "write on a broken stream", "please report"} {
		if !strings.Contains(se.String(), w) {
			t.Errorf("stderr does not say %q:\n%s", w, se.String())
		}
	}
	if strings.Count(se.String(), "\n") > 6 {
		t.Errorf("the report is not short:\n%s", se.String())
	}
}

// failWriter fails every write, as a full disk or a closed pipe does.
type failWriter struct{}

func (failWriter) Write([]byte) (int, error) { return 0, os.ErrClosed }

// TestExitStatuses runs command lines that must end with a given status.
func TestExitStatuses(t *testing.T) {
	plant := surveyDir("plantroom")
	for _, c := range []struct {
		name string
		args []string
		code int
		want string
	}{
		{"missing SITE", []string{"check"}, ExitUsage, "takes 1 argument"},
		{"SITE that does not exist", []string{"check", "no/such/site"}, ExitUsage, "no such folder or workbook"},
		{"SITE below a file", []string{"check", filepath.Join(plant, "site.csv", "x")}, ExitUsage, "no such folder or workbook"},
		{"fit of a SITE that does not exist", []string{"fit", "no/such/site"}, ExitUsage, "no such folder or workbook"},
		{"unknown help topic", []string{"help", "nosuch"}, ExitUsage, "no such command or topic"},
		{"help topic with extra words", []string{"help", "check", "nosuch"}, ExitUsage, "no such command or topic"},
		{"known help topic", []string{"help", "readings"}, ExitOK, ""},
		{"help exit", []string{"help", "exit"}, ExitOK, ""},
		{"--confidence NaN", []string{"fit", "--confidence", "NaN", plant}, ExitUsage, "--confidence NaN"},
		{"--confidence 1", []string{"fit", "--confidence", "1", plant}, ExitUsage, "--confidence"},
		{"--suspect-z NaN", []string{"fit", "--suspect-z", "NaN", plant}, ExitUsage, "--suspect-z NaN"},
		{"--suspect-z +Inf", []string{"fit", "--suspect-z", "+Inf", plant}, ExitUsage, "--suspect-z"},
		{"--restricted-ratio NaN", []string{"fit", "--restricted-ratio", "NaN", plant}, ExitUsage, "--restricted-ratio NaN"},
		{"--restricted-ratio 1", []string{"plan", "--restricted-ratio", "1", plant}, ExitUsage, "--restricted-ratio"},
		{"--scale 0", []string{"plan", "--scale", "0", plant}, ExitUsage, "--scale 0"},
		{"--scale NaN", []string{"plan", "--scale", "NaN", plant}, ExitUsage, "--scale NaN"},
		{"--scale -1", []string{"plan", "--scale", "-1", plant}, ExitUsage, "--scale -1"},
		{"--scale not a number", []string{"plan", "--scale", "lots", plant}, ExitUsage, "invalid argument"},
		{"--survey-minutes -5", []string{"plan", "--survey-minutes", "-5", plant}, ExitUsage, "--survey-minutes -5"},
		{"--survey-readings -1", []string{"plan", "--survey-readings", "-1", plant}, ExitUsage, "--survey-readings -1"},
		{"--survey-readings too many", []string{"plan", "--survey-readings", "99999", plant}, ExitUsage, "--survey-readings 99999"},
		{"fit without a scale flag", []string{"fit", plant}, ExitOK, ""},
	} {
		t.Run(c.name, func(t *testing.T) {
			code, _, errs := run(t, c.args...)
			if code != c.code || !strings.Contains(errs, c.want) {
				t.Errorf("flowset %q: exit %d, stderr %q; want exit %d saying %q", c.args, code, errs, c.code, c.want)
			}
		})
	}
	t.Run("stdout fails", func(t *testing.T) {
		var se bytes.Buffer
		code := RunIO(context.Background(), []string{"curves", "--format", "json", plant}, &IO{In: strings.NewReader(""), Out: failWriter{}, Err: &se, Now: fixedClock})
		if code != ExitSystem {
			t.Errorf("curves into a failing stdout: exit %d, want %d: %s", code, ExitSystem, se.String())
		}
	})
	t.Run("documented", func(t *testing.T) {
		readme, err := os.ReadFile(filepath.Join("..", "..", "README.md"))
		if err != nil {
			t.Fatal(err)
		}
		_, help, _ := run(t, "help", "exit")
		for _, s := range exitStatuses {
			if !strings.Contains(help, fmt.Sprintf("\n  %d ", s)) {
				t.Errorf("'flowset help exit' does not list status %d", s)
			}
			if !strings.Contains(string(readme), fmt.Sprintf("`%d`", s)) {
				t.Errorf("README does not list exit status %d", s)
			}
		}
		if !slices.Contains(exitStatuses, ExitCancelled) {
			t.Error("the cancelled status is not in the documented set")
		}
	})
}
