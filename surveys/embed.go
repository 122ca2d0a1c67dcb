// Package surveys holds the example sites shipped with flowset, embedded in
// the binary: demo (an invented school's heating circuit, with hidden faults
// to find), plantroom (an invented moulding shop's chilled-glycol
// circuit) and clinic (an invented clinic's chilled water on
// pressure-independent valves) and wing (an invented hospital wing in US
// customary units: pressure-independent valves, a riser held by a
// differential-pressure controller, duty/assist pumps). Each is a folder of site sheets that site.ReadDir reads from FS.
// The sheets are written by internal/synth from hand-written descriptions;
// see README.md.
package surveys

import (
	"embed"
	"io/fs"
	"sort"
)

// FS holds one folder of CSV sheets per example site.
//
//go:embed demo plantroom clinic wing
var FS embed.FS

// Names returns the example sites' folder names in FS, sorted.
func Names() []string {
	ents, err := fs.ReadDir(FS, ".")
	if err != nil {
		return nil // not reached: the root of an embed.FS always reads
	}
	var out []string
	for _, e := range ents {
		if e.IsDir() {
			out = append(out, e.Name())
		}
	}
	sort.Strings(out)
	return out
}
