package cli

import (
	"fmt"
	"io"

	"flowset/internal/plant"
	"flowset/internal/site"
)

// loaded is a site read from disk with its model.
type loaded struct {
	Site     *site.Site
	Model    *plant.Model
	Problems site.Problems // structural and physical, sorted
}

// loadSite reads a site folder or workbook, builds its model and runs the
// physical checks. Problems of error severity come back as a *dataError after
// being listed on w; warnings are listed and the load goes on.
func loadSite(path string, w io.Writer) (*loaded, error) {
	s, probs, err := site.Load(path)
	if err != nil {
		return nil, &dataError{err}
	}
	if probs.Err() != nil {
		printProblems(w, probs)
		return nil, &dataError{fmt.Errorf("%s: %d error(s) in the site sheets", path, len(probs.Errors()))}
	}
	m, err := plant.New(s)
	if err != nil {
		printProblems(w, probs)
		return nil, &dataError{fmt.Errorf("%s: %w", path, err)}
	}
	probs = append(probs, m.Check()...)
	if probs.Err() != nil {
		printProblems(w, probs)
		return nil, &dataError{fmt.Errorf("%s: %d error(s) in the site data", path, len(probs.Errors()))}
	}
	return &loaded{Site: s, Model: m, Problems: probs}, nil
}

func printProblems(w io.Writer, probs site.Problems) {
	for _, p := range probs {
		fmt.Fprintf(w, "%s: %v\n", p.Severity, p)
	}
}
