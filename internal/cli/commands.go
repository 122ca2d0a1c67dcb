package cli

import (
	"fmt"
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
		newTrimCmd(ios),
		newDemoCmd(ios),
	)
	for _, t := range site.Topics() {
		// A command without Run is listed by cobra as an additional help
		// topic, shown by `flowset help NAME`.
		root.AddCommand(&cobra.Command{Use: t.Name, Short: t.Title, Long: t.Title + "\n\n" + strings.TrimRight(t.Body, "\n")})
	}
	root.AddCommand(&cobra.Command{Use: "exit", Short: "Exit statuses", Long: exitHelp})
	root.AddCommand(newPipesTopic(), newCompletionCmd(ios))
	root.SetHelpCommand(newHelpCmd())
}

// newHelpCmd is cobra's help command, except that an unknown topic is a
// wrong command line (exit 2) instead of a usage text and success.
func newHelpCmd() *cobra.Command {
	return &cobra.Command{
		Use:   "help [command or topic]",
		Short: "Help about any command or topic",
		RunE: func(c *cobra.Command, args []string) error {
			cmd, rest, err := c.Root().Find(args)
			if err != nil || cmd == nil || len(rest) > 0 {
				var names []string
				for _, sub := range c.Root().Commands() {
					if !sub.Hidden && sub.Name() != "completion" && sub.Name() != "help" {
						names = append(names, sub.Name())
					}
				}
				return usagef("help %s: no such command or topic; there are %s", termSafe(strings.Join(args, " ")), strings.Join(names, ", "))
			}
			cmd.InitDefaultHelpFlag()
			if err := cmd.Help(); err != nil {
				return sysErr(fmt.Errorf("help: %w", err))
			}
			return nil
		},
	}
}
