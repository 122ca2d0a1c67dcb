package cli

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"syscall"

	"flowset/internal/plant"
	"flowset/internal/site"
)

// loaded is a site read from disk with its model.
type loaded struct {
	Site     *site.Site
	Model    *plant.Model
	Problems site.Problems // structural and physical warnings, sorted
}

// loadSite reads a site folder or workbook, builds its model and runs the
// physical checks. Problems of error severity are listed on w and come back
// as a *dataError; warnings are kept in loaded.Problems for the caller.
func loadSite(ctx context.Context, path string, w io.Writer) (*loaded, error) {
	if _, err := os.Stat(path); errors.Is(err, fs.ErrNotExist) {
		return nil, usagef("SITE %s: no such folder or workbook", shown(path))
	} else if errors.Is(err, syscall.ENOTDIR) || errors.Is(err, syscall.ELOOP) {
		return nil, usagef("SITE %s: no such folder or workbook (a part of the path is a file, or links in a loop)", shown(path))
	}
	s, probs, err := site.Load(ctx, path)
	if errors.Is(err, site.ErrNotSite) {
		return nil, &usageError{err}
	}
	if err != nil && len(probs) == 0 {
		return nil, sysErr(err)
	}
	// With errors, finishLoad lists every problem, warnings included.
	return finishLoad(ctx, s, probs, shown(path), w)
}

func finishLoad(ctx context.Context, s *site.Site, probs site.Problems, label string, w io.Writer) (*loaded, error) {
	if probs.Err() != nil {
		printProblems(w, probs)
		return nil, &dataError{fmt.Errorf("%s: %d error(s) in the site sheets", label, len(probs.Errors()))}
	}
	m, err := plant.New(s)
	if err != nil {
		probs = append(probs, locate(s, err))
		s.Locate(probs)
		probs.Sort()
		printProblems(w, probs)
		return nil, &dataError{fmt.Errorf("%s: %d error(s) in the site data", label, len(probs.Errors()))}
	}
	// The model and its checks do not watch the context; between them,
	// a signal is heard.
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	probs = append(probs, m.Check()...)
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	s.Locate(probs)
	if probs.Err() != nil {
		printProblems(w, probs)
		return nil, &dataError{fmt.Errorf("%s: %d error(s) in the site data", label, len(probs.Errors()))}
	}
	return &loaded{Site: s, Model: m, Problems: probs}, nil
}

// printProblems lists problems one a line; each one's text already says
// where it is and whether it is a warning.
func printProblems(w io.Writer, probs site.Problems) {
	for _, p := range probs {
		if p.Severity == site.SeverityError {
			fmt.Fprintf(w, "%s: %v\n", p.Severity, p)
			continue
		}
		fmt.Fprintln(w, p)
	}
}

// locate turns an error of the model (plant.New) into a problem at the
// sheet cell that caused it, as the sheets' own problems are: an error
// that starts with a sheet position keeps it; one about the pump curve is
// put on the pump sheet's head column; one about the boundary on the site
// sheet's boundary key.
func locate(s *site.Site, err error) *site.Error {
	msg := err.Error()
	e := &site.Error{Err: err, Msg: msg}
	positions := func(yield func(site.Pos) bool) {
		for _, b := range s.Branches {
			if !yield(b.Pos) {
				return
			}
		}
		for _, r := range s.Readings {
			if !yield(r.Pos) {
				return
			}
		}
	}
	for pos := range positions {
		if pos.File == "" {
			continue
		}
		if rest, ok := strings.CutPrefix(msg, pos.String()+": "); ok {
			e.File, e.Line, e.Msg = pos.File, pos.Line, rest
			return e
		}
	}
	switch {
	case strings.HasPrefix(msg, "pump curve: ") && len(s.Pump) > 0:
		last := s.Pump[len(s.Pump)-1].Pos
		e.File, e.Line, e.Field = last.File, last.Line, "head"
		e.Msg = strings.TrimPrefix(strings.TrimPrefix(msg, "pump curve: "), "pump fit: ")
		e.Want = "flows and heads read from the pump's curve, the head falling as the flow rises"
	case strings.HasPrefix(msg, "boundary "):
		e.Field = "boundary"
		e.File = s.Source.Path + "[site]"
		if s.Source.Format == "csv" {
			e.File = filepath.Join(s.Source.Path, "site.csv")
		}
	default:
		e.File = s.Source.Path
	}
	return e
}
