package cli

import "github.com/spf13/cobra"

// addCommands attaches every command and help topic to root.
func addCommands(root *cobra.Command, ios *IO) {
	_ = ios
}

func exitCode(err error) int { return exitUnknown }
