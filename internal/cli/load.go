package cli

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"

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
	}
	s, probs, err := site.Load(ctx, path)
	if errors.Is(err, site.ErrNotSite) {
		return nil, &usageError{err}
	}
	if err != nil && len(probs) == 0 {
		return nil, sysErr(err)
	}
	if err != nil {
		return nil, &dataError{err}
	}
	return finishLoad(s, probs, path, w)
}

func finishLoad(s *site.Site, probs site.Problems, label string, w io.Writer) (*loaded, error) {
	if probs.Err() != nil {
		printProblems(w, probs)
		return nil, &dataError{fmt.Errorf("%s: %d error(s) in the site sheets", label, len(probs.Errors()))}
	}
	m, err := plant.New(s)
	if err != nil {
		printProblems(w, probs)
		return nil, &dataError{fmt.Errorf("%s: %w", label, err)}
	}
	probs = append(probs, m.Check()...)
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
