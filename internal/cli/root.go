// Package cli builds flowset's command tree. It is the only package that
// imports cobra or touches the process's files and streams; every command is
// an options struct, a constructor that only parses flags, and a run function
// that takes a context, readers and writers so tests call it directly.
package cli

import (
	"context"
	"fmt"
	"io"
	"os"
	"runtime/pprof"
	"strings"
	"time"

	"github.com/spf13/cobra"
)

// IO carries the streams a command reads and writes.
type IO struct {
	In  io.Reader
	Out io.Writer
	Err io.Writer
	// Terminal reports whether Err is a terminal, to decide on progress output.
	Terminal bool
	// Now is the clock stamped on outputs; nil means time.Now. Tests inject
	// a fixed one so outputs can be compared byte for byte.
	Now func() time.Time
	// workers bounds the stages a job runs side by side after its fit (0:
	// one per processor; 1: one after another). Tests compare the two.
	workers int
}

func (ios *IO) now() time.Time {
	if ios.Now != nil {
		return ios.Now()
	}
	return time.Now()
}

// usageError marks a mistake on the command line (exit code 2).
type usageError struct{ err error }

func (e *usageError) Error() string { return e.err.Error() }
func (e *usageError) Unwrap() error { return e.err }

func usagef(format string, a ...any) error { return &usageError{fmt.Errorf(format, a...)} }

// Run executes flowset with args (without the program name) and returns the
// process exit code.
func Run(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	if path := os.Getenv(cpuProfileEnv); path != "" {
		if stopProfile, err := startCPUProfile(path); err != nil {
			fmt.Fprintf(stderr, "flowset: %s: %v\n", cpuProfileEnv, err)
		} else {
			defer stopProfile()
		}
	}
	return RunIO(ctx, args, &IO{In: stdin, Out: stdout, Err: stderr, Terminal: isTerminal(stderr)})
}

// cpuProfileEnv names the environment variable that, when set to a file
// path, makes Run write a CPU profile of the whole process (start-up, sheets,
// fit, stages, files) there: a hidden tool for developers, since the
// benchmarks see only the job in process (DEVELOPERS.md, Benchmarks).
const cpuProfileEnv = "FLOWSET_CPUPROFILE"

// startCPUProfile starts a CPU profile into the file at path and returns the
// function that stops it and closes the file.
func startCPUProfile(path string) (func(), error) {
	f, err := os.Create(path)
	if err != nil {
		return nil, err
	}
	if err := pprof.StartCPUProfile(f); err != nil {
		f.Close()
		return nil, err
	}
	return func() {
		pprof.StopCPUProfile()
		f.Close()
	}, nil
}

// RunIO is Run with the streams and clock given in ios. It never panics:
// a panic below is reported briefly and ends with ExitInternal. Everything
// it writes to ios.Out and ios.Err passes through a filter that escapes
// terminal control sequences (see termSafe).
func RunIO(ctx context.Context, args []string, ios *IO) (code int) {
	safe := *ios
	safe.Out, safe.Err = &safeWriter{w: ios.Out}, &safeWriter{w: ios.Err}
	ios = &safe
	defer func() {
		if v := recover(); v != nil {
			reportPanic(ios.Err, v)
			code = ExitInternal
		}
	}()
	root := NewRoot(ios)
	root.SetArgs(args)
	root.SetIn(ios.In)
	root.SetOut(ios.Out)
	root.SetErr(ios.Err)
	err := root.ExecuteContext(ctx)
	if err == nil {
		return ExitOK
	}
	code = exitCode(ctx, err)
	switch code {
	case ExitCancelled:
		fmt.Fprintln(ios.Err, "flowset: stopped (interrupted); nothing was written")
	case ExitUsage:
		fmt.Fprintf(ios.Err, "flowset: %s\n", termSafe(err.Error()))
		fmt.Fprintln(ios.Err, "run 'flowset help' for usage")
	default:
		fmt.Fprintf(ios.Err, "flowset: %s\n", termSafe(err.Error()))
	}
	return code
}

// NewRoot builds the whole command tree in one place.
func NewRoot(ios *IO) *cobra.Command {
	root := &cobra.Command{
		Use:   "flowset",
		Short: "Fit a water-circuit survey, diagnose it and plan its balancing",
		Long: `flowset turns a survey of a hydronic or process water circuit (flows,
differentials and valve settings read on site) into a calibrated hydraulic
model, says which branches are off design and why, and plans one set of
balancing-valve settings and a pump set-point that give every branch its
design flow at the lowest pump head.

Results are predictions. Verify them on site; pressurised, hot or chilled
water and rotating machinery can hurt people. Work to local codes and
licensed practice.`,
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.CompletionOptions.DisableDefaultCmd = true
	root.Version = versionText()
	root.SetVersionTemplate("flowset {{.Version}}\n")
	root.SetFlagErrorFunc(func(_ *cobra.Command, err error) error { return &usageError{err} })
	addCommands(root, ios)
	return root
}

// isCobraUsage recognises cobra's own argument errors, which it returns as
// plain errors.
func isCobraUsage(err error) bool {
	msg := err.Error()
	for _, p := range []string{"unknown command", "accepts ", "requires at least", "requires at most", "unknown flag", "unknown shorthand"} {
		if strings.Contains(msg, p) {
			return true
		}
	}
	return false
}
