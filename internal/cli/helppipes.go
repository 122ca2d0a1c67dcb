package cli

import (
	"fmt"
	"strings"

	"github.com/spf13/cobra"

	"flowset/internal/hydraulics"
)

// newPipesTopic is the help topic listing every pipe catalogue, the size
// syntax each accepts and its sizes with their bores.
func newPipesTopic() *cobra.Command {
	var b strings.Builder
	b.WriteString(`pipe catalogues: names for "pipe standard" and "header standard"

The columns "pipe standard" and "pipe size" (and "header standard" and
"header size") of branches.csv name a size from one of these catalogues; the
bore and the roughness of clean pipe then come from it. Give "pipe bore [mm]"
instead for a pipe not listed here.

Size syntax:
  steel (sch40, sch80, en10255-m, en10255-h): a DN ("DN50", "dn 50"), a
    nominal size in inches ("2", "2in", "NPS 2", "1-1/4", "1 1/4", "1.25"),
    or a bare number that is a DN or an inch size of the table.
  tube (en1057, pe100-sdr11): outside diameter x wall in mm ("22x1.0",
    "22 x 1"), or the outside diameter alone where one wall is listed for
    it ("32mm" in pe100-sdr11).
`)
	for _, name := range hydraulics.Standards() {
		title, err := hydraulics.StandardTitle(name)
		if err != nil {
			continue
		}
		sizes, err := hydraulics.Sizes(name)
		if err != nil {
			continue
		}
		fmt.Fprintf(&b, "\n%s: %s, roughness %.4g mm\n", name, title, 1000*sizes[0].Roughness)
		line := "  "
		for k, s := range sizes {
			item := fmt.Sprintf("%s (bore %.1f)", s.Nominal, 1000*s.Bore)
			if k < len(sizes)-1 {
				item += ","
			}
			if len(line)+len(item)+1 > 78 && line != "  " {
				b.WriteString(strings.TrimRight(line, " ") + "\n")
				line = "  "
			}
			line += item + " "
		}
		b.WriteString(strings.TrimRight(line, " ") + "\n")
	}
	b.WriteString("\nBores in mm from the nominal outside diameter and wall (tolerances ignored).")
	return &cobra.Command{Use: "pipes", Short: "pipe catalogues and their size syntax", Long: b.String()}
}
