package cli

import (
	"errors"
	"strings"

	"github.com/spf13/cobra"

	"flowset/internal/site"
)

// addCommands attaches every command and help topic to root.
func addCommands(root *cobra.Command, ios *IO) {
	root.AddCommand(
		newCheckCmd(ios),
		newCurvesCmd(ios),
		newTemplateCmd(ios),
		newFitCmd(ios),
		newPlanCmd(ios),
		newRunCmd(ios),
		newDemoCmd(ios),
	)
	for _, t := range site.Topics() {
		// A command without Run is listed by cobra as an additional help
		// topic, shown by `flowset help NAME`.
		root.AddCommand(&cobra.Command{Use: t.Name, Short: t.Title, Long: t.Title + "\n\n" + strings.TrimRight(t.Body, "\n")})
	}
}

// dataError marks a run that found problems in the user's data (exit 1).
type dataError struct{ err error }

func (e *dataError) Error() string { return e.err.Error() }
func (e *dataError) Unwrap() error { return e.err }

func exitCode(err error) int {
	var de *dataError
	if errors.As(err, &de) {
		return ExitData
	}
	return exitUnknown
}
