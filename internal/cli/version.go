package cli

import (
	"fmt"
	"runtime/debug"

	"github.com/spf13/cobra"
)

// Version is flowset's release. 'flowset --version' prints it with the
// commit it was built from, when the build recorded one.
const Version = "0.1.0"

// versionText is the text of 'flowset --version' after the program name.
func versionText() string {
	v := Version
	if bi, ok := debug.ReadBuildInfo(); ok {
		var rev, dirty string
		for _, s := range bi.Settings {
			switch s.Key {
			case "vcs.revision":
				rev = s.Value
			case "vcs.modified":
				if s.Value == "true" {
					dirty = ", modified"
				}
			}
		}
		if len(rev) > 12 {
			rev = rev[:12]
		}
		if rev != "" {
			v += fmt.Sprintf(" (commit %s%s)", rev, dirty)
		}
		v += ", " + bi.GoVersion
	}
	return v
}

// newCompletionCmd writes a shell completion script for bash, zsh, fish or
// PowerShell to standard output.
func newCompletionCmd(ios *IO) *cobra.Command {
	return &cobra.Command{
		Use:   "completion bash|zsh|fish|powershell",
		Short: "Print a shell completion script",
		Long: `Completion prints a script that makes the shell complete flowset's commands,
flags and help topics. For example:

  bash:        source <(flowset completion bash)
  zsh:         flowset completion zsh > "${fpath[1]}/_flowset"
  fish:        flowset completion fish > ~/.config/fish/completions/flowset.fish
  powershell:  flowset completion powershell | Out-String | Invoke-Expression`,
		Args:      exactArgs(1),
		ValidArgs: []string{"bash", "zsh", "fish", "powershell"},
		RunE: func(cmd *cobra.Command, args []string) error {
			root := cmd.Root()
			var err error
			switch args[0] {
			case "bash":
				err = root.GenBashCompletionV2(ios.Out, true)
			case "zsh":
				err = root.GenZshCompletion(ios.Out)
			case "fish":
				err = root.GenFishCompletion(ios.Out, true)
			case "powershell":
				err = root.GenPowerShellCompletionWithDesc(ios.Out)
			default:
				return usagef("completion %q: want bash, zsh, fish or powershell", args[0])
			}
			return sysErr(err)
		},
	}
}
