package cli

import (
	"context"
	"errors"
	"fmt"
	"io"
	"runtime"
	"strings"
)

// Exit statuses. Every path through Run ends with one of these; README and
// 'flowset help exit' list them.
const (
	ExitOK        = 0   // done, nothing wrong
	ExitData      = 1   // problems in the data, or a computation that could not finish
	ExitUsage     = 2   // wrong command line (including an output that may not be written)
	ExitSystem    = 3   // the system failed: a file or folder could not be read or written, disk full, no permission
	ExitInternal  = 4   // a bug in flowset (an internal error); nothing was written
	ExitShort     = 5   // the plan cannot meet its targets; the outputs are written and say so
	ExitCancelled = 130 // stopped by an interrupt (Ctrl-C) or terminate signal; nothing was written
)

// exitStatuses is the documented set, for tests.
var exitStatuses = []int{ExitOK, ExitData, ExitUsage, ExitSystem, ExitInternal, ExitShort, ExitCancelled}

// exitHelp is the text of 'flowset help exit'.
const exitHelp = `Exit status

  0    done
  1    problems in the data (each listed with its file, line, column and field)
  2    a wrong command line: an unknown command, flag or help topic, a flag value
       out of range, a SITE that does not exist, or an output that may not be
       written (it exists without --force, is not an untouched output of
       flowset, holds or lies inside an input, or another run is writing it)
  3    the system failed: a file or folder could not be read or written, the
       disk is full, or permission was refused
  4    an internal error: a bug in flowset; please report it with the command
       line and the site
  5    the plan cannot meet its targets: the outputs are written, and the plan
       says first what is short, why and what would fix it (no saving claimed)
  130  stopped by an interrupt (Ctrl-C) or a terminate signal

Whatever the status, the inputs are never modified, and an output folder or
file is either written whole or not at all.`

// dataError marks a run that found problems in the user's data (exit 1).
type dataError struct{ err error }

func (e *dataError) Error() string { return e.err.Error() }
func (e *dataError) Unwrap() error { return e.err }

// systemError marks a failure of the file system or the streams (exit 3).
type systemError struct{ err error }

func (e *systemError) Error() string { return e.err.Error() }
func (e *systemError) Unwrap() error { return e.err }

// sysErr marks err as a system failure unless it is already classified or
// a cancellation; nil stays nil.
func sysErr(err error) error {
	if err == nil {
		return nil
	}
	var ue *usageError
	var de *dataError
	var se *systemError
	var sh *shortError
	if errors.As(err, &ue) || errors.As(err, &de) || errors.As(err, &se) || errors.As(err, &sh) ||
		errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return err
	}
	return &systemError{err}
}

// exitCode maps the error a command returned to its exit status. A
// cancelled context wins: whatever failed after it was only its echo.
func exitCode(ctx context.Context, err error) int {
	if ctx.Err() != nil || errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return ExitCancelled
	}
	var ue *usageError
	var de *dataError
	var sh *shortError
	switch {
	case errors.As(err, &sh):
		return ExitShort
	case errors.As(err, &ue) || isCobraUsage(err):
		return ExitUsage
	case errors.As(err, &de):
		return ExitData
	}
	return ExitSystem
}

// reportPanic writes the short report of a panic caught at the top: what
// happened and where in flowset, without the whole stack.
func reportPanic(w io.Writer, v any) {
	fmt.Fprintf(w, "flowset: internal error (a bug in flowset, not a problem in your data): %s\n", termSafe(fmt.Sprint(v)))
	pcs := make([]uintptr, 32)
	n := runtime.Callers(3, pcs)
	frames := runtime.CallersFrames(pcs[:n])
	shownFrames := 0
	for {
		f, more := frames.Next()
		if strings.HasPrefix(f.Function, "flowset/") && shownFrames < 3 {
			fmt.Fprintf(w, "  at %s (%s:%d)\n", f.Function, shortFile(f.File), f.Line)
			shownFrames++
		}
		if !more {
			break
		}
	}
	fmt.Fprintln(w, "no output was written; please report this with the command line and the site")
}

func shortFile(p string) string {
	if i := strings.Index(p, "/internal/"); i >= 0 {
		return p[i+1:]
	}
	return p
}
