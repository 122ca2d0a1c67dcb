package cli

import (
	"context"
	"fmt"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"flowset/internal/site"
)

type templateOptions struct {
	Dest  string
	Force bool
}

func newTemplateCmd(ios *IO) *cobra.Command {
	opts := &templateOptions{}
	cmd := &cobra.Command{
		Use:   "template DEST",
		Short: "Write a blank site (CSV folder, or an .xlsx workbook) to fill in",
		Long: `Template writes the sheets of a new site with their headers and a help row:
a folder of CSV files, or one workbook when DEST ends in .xlsx. It never
overwrites an existing folder or file unless --force is given.`,
		Args: exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.Dest = args[0]
			return runTemplate(cmd.Context(), ios, opts)
		},
	}
	cmd.Flags().BoolVar(&opts.Force, "force", false, "replace an existing destination")
	return cmd
}

func runTemplate(_ context.Context, ios *IO, opts *templateOptions) error {
	if strings.EqualFold(filepath.Ext(opts.Dest), ".xlsx") {
		if err := writeFileAtomic(opts.Dest, opts.Force, site.WriteTemplateWorkbook); err != nil {
			return err
		}
	} else {
		if err := writeDirAtomic(opts.Dest, opts.Force, site.WriteTemplateCSV); err != nil {
			return err
		}
	}
	fmt.Fprintf(ios.Out, "wrote a blank site to %s; see 'flowset help sheets'\n", opts.Dest)
	return nil
}
