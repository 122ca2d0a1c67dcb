package cli

import (
	"bytes"
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
overwrites an existing folder or file; with --force it replaces only a
blank template flowset wrote that nobody has changed since.`,
		Args: exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			opts.Dest = args[0]
			return runTemplate(cmd.Context(), ios, opts)
		},
	}
	cmd.Flags().BoolVar(&opts.Force, "force", false, "replace a blank template flowset wrote earlier, if nothing in it was changed or added")
	return cmd
}

func runTemplate(ctx context.Context, ios *IO, opts *templateOptions) error {
	xlsx := strings.EqualFold(filepath.Ext(opts.Dest), ".xlsx")
	c, err := claimOut("", opts.Dest, opts.Force, xlsx, nil)
	if err != nil {
		return err
	}
	written := false
	defer func() { c.finish(written) }()
	if xlsx {
		err = c.writeFile(ctx, site.WriteTemplateWorkbook, isBlankTemplate)
	} else {
		err = c.writeDir(ctx, site.WriteTemplateCSV)
	}
	if err != nil {
		return err
	}
	written = true
	fmt.Fprintf(ios.Out, "wrote a blank site to %s; see 'flowset help sheets'\n", shown(opts.Dest))
	return nil
}

// isBlankTemplate reports whether b is the blank template workbook, byte
// for byte (the writer is deterministic): --force replaces nothing else.
func isBlankTemplate(b []byte) bool {
	var fresh bytes.Buffer
	if err := site.WriteTemplateWorkbook(&fresh); err != nil {
		return false
	}
	return bytes.Equal(b, fresh.Bytes())
}
