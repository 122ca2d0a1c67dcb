//go:build linux || darwin || freebsd || netbsd || openbsd || dragonfly

package cli

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"os/exec"
	"os/signal"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// runWithin is run that fails the test, instead of hanging, when flowset
// does not return within d.
func runWithin(t *testing.T, d time.Duration, args ...string) (int, string, string) {
	t.Helper()
	type result struct {
		code     int
		out, err string
	}
	done := make(chan result, 1)
	go func() {
		var so, se bytes.Buffer
		code := RunIO(context.Background(), args, &IO{In: strings.NewReader(""), Out: &so, Err: &se, Now: fixedClock})
		done <- result{code, so.String(), se.String()}
	}()
	select {
	case r := <-done:
		return r.code, r.out, r.err
	case <-time.After(d):
		t.Fatalf("flowset %q did not return within %v", args, d)
		return 0, "", ""
	}
}

// TestSheetsThatAreNotFiles gives sheets that would block or read without
// end: a named pipe with no writer, a link to an endless device. Each must
// be refused by name, at once.
func TestSheetsThatAreNotFiles(t *testing.T) {
	for _, c := range []struct {
		name string
		make func(t *testing.T, p string)
		code int
		want string
	}{
		{"readings.csv a named pipe", func(t *testing.T, p string) {
			if err := syscall.Mkfifo(p, 0o644); err != nil {
				t.Skip(err)
			}
		}, ExitData, "readings.csv: is a named pipe, not a sheet, so it is not read"},
		{"readings.csv a link to /dev/zero", func(t *testing.T, p string) {
			if err := os.Symlink("/dev/zero", p); err != nil {
				t.Skip(err)
			}
		}, ExitData, "readings.csv: is a device, not a sheet, so it is not read"},
		{"readings.csv a link to nothing", func(t *testing.T, p string) {
			if err := os.Symlink("nowhere.csv", p); err != nil {
				t.Skip(err)
			}
		}, ExitData, "readings.csv: cannot be opened: it is a link to nothing"},
		{"readings.csv a folder", func(t *testing.T, p string) { mkdir(t, p) }, ExitData, "readings.csv: is a folder, not a sheet"},
		{"readings.csv a link to itself", func(t *testing.T, p string) {
			if err := os.Symlink("readings.csv", p); err != nil {
				t.Skip(err)
			}
		}, ExitData, "readings.csv: cannot be opened: it is a link in a loop of links"},
	} {
		t.Run(c.name, func(t *testing.T) {
			dir := mkdir(t, filepath.Join(t.TempDir(), "site"))
			copySite(t, "plantroom", dir)
			p := filepath.Join(dir, "readings.csv")
			if err := os.Remove(p); err != nil {
				t.Fatal(err)
			}
			c.make(t, p)
			code, out, errs := runWithin(t, 20*time.Second, "check", dir)
			if code != c.code || !strings.Contains(out+errs, c.want) {
				t.Errorf("check: exit %d, stderr:\n%s\nwant exit %d saying %q", code, errs, c.code, c.want)
			}
		})
	}
	t.Run("SITE a named pipe called .xlsx", func(t *testing.T) {
		p := filepath.Join(t.TempDir(), "site.xlsx")
		if err := syscall.Mkfifo(p, 0o644); err != nil {
			t.Skip(err)
		}
		code, _, errs := runWithin(t, 20*time.Second, "check", p)
		if code != ExitUsage || !strings.Contains(errs, "not a regular file") {
			t.Errorf("check: exit %d, stderr:\n%s\nwant exit 2 saying it is not a regular file", code, errs)
		}
	})
}

// TestSignalStops starts this test binary as flowset (see TestMain's
// FLOWSET_AS_MAIN) on a site large enough to take a while, sends SIGINT or
// SIGTERM at several moments, and checks the run ends with ExitCancelled
// and leaves no output, or (signal too late) ends with success and the
// whole output.
func TestSignalStops(t *testing.T) {
	if testing.Short() {
		t.Skip("starts flowset several times")
	}
	site := plainParallelSite(t, 1000)
	for _, sig := range []syscall.Signal{syscall.SIGINT, syscall.SIGTERM} {
		for _, after := range []time.Duration{0, 30 * time.Millisecond, 150 * time.Millisecond, 400 * time.Millisecond} {
			t.Run(fmt.Sprintf("%v after %v", sig, after), func(t *testing.T) {
				root := t.TempDir()
				out := filepath.Join(root, "out")
				cmd := exec.Command(os.Args[0], "-test.run=^$")
				cmd.Env = append(os.Environ(), "FLOWSET_AS_MAIN=run\x1f"+site+"\x1f--out\x1f"+out+"\x1f--quiet")
				var se bytes.Buffer
				cmd.Stderr = &se
				if err := cmd.Start(); err != nil {
					t.Fatal(err)
				}
				time.Sleep(after)
				cmd.Process.Signal(sig)
				done := make(chan error, 1)
				go func() { done <- cmd.Wait() }()
				select {
				case <-done:
				case <-time.After(60 * time.Second):
					cmd.Process.Kill()
					t.Fatalf("flowset did not stop within 60 s of %v", sig)
				}
				code := cmd.ProcessState.ExitCode()
				entries, _ := os.ReadDir(root)
				t.Logf("exit %d", code)
				switch code {
				case -1:
					// Killed before the runtime set up its handlers: the
					// run had not begun.
					if len(entries) != 0 {
						t.Errorf("run killed at start left %v", entries)
					}
				case ExitCancelled:
					if len(entries) != 0 {
						t.Errorf("stopped run left %v", entries)
					}
				case ExitOK:
					if err := untouched("out", out, mustLstat(t, out)); err != nil {
						t.Errorf("finished run: %v", err)
					}
				default:
					t.Errorf("exit %d after %v, want %d or 0; stderr:\n%s", code, sig, ExitCancelled, se.String())
				}
			})
		}
	}
}

// TestMain lets the test binary act as flowset for TestSignalStops, with
// the signal handling of cmd/flowset.
func TestMain(m *testing.M) {
	if args := os.Getenv("FLOWSET_AS_MAIN"); args != "" {
		ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
		go func() {
			<-ctx.Done()
			stop()
		}()
		os.Exit(Run(ctx, strings.Split(args, "\x1f"), os.Stdin, os.Stdout, os.Stderr))
	}
	os.Exit(m.Run())
}
