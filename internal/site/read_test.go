package site

import (
	"errors"
	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"
	"github.com/google/go-cmp/cmp/cmpopts"
	"maps"
	"testing/fstest"
)

// base is a small valid site that each bad-input case changes one file of.
var base = map[string]string{
	"branches.csv": `id,parent,design flow [l/s],pipe bore [mm],pipe length [m],valve,setting
A,,0.5,21.6,10,V15,2
B,,0.4,21.6,12,V15,3
`,
	"valves.csv": `model,setting,kv
V15,0.5,0.2
V15,1,0.4
V15,2,0.9
V15,3,1.5
V15,4,2.1
`,
	"readings.csv": `state,where,quantity,value,unit,instrument
as-found,A,flow,0.45,l/s,clamp-on
as-found,B,branch diff,12,kPa,manometer
as-found,header,header diff,40,kPa,manometer
`,
}

const del = "\x00delete"

// mapFS builds a site folder from base with some files replaced (or
// deleted with del).
func mapFS(change map[string]string) fstest.MapFS {
	files := maps.Clone(base)
	for k, v := range change {
		if v == del {
			delete(files, k)
			continue
		}
		files[k] = v
	}
	fsys := fstest.MapFS{}
	for k, v := range files {
		fsys[k] = &fstest.MapFile{Data: []byte(v)}
	}
	return fsys
}

func problemStrings(p Problems) []string {
	out := make([]string, len(p))
	for i, e := range p {
		out[i] = e.Error()
	}
	return out
}

// TestReadDirBad checks every problem reported for each bad input, word for
// word, and the cause the first one wraps.
func TestReadDirBad(t *testing.T) {
	for _, c := range badCases {
		t.Run(c.name, func(t *testing.T) {
			s, p, err := ReadDir(mapFS(c.files), ".")
			got := problemStrings(p)
			if c.prefix {
				for i := range got {
					if i < len(c.want) && strings.HasPrefix(got[i], c.want[i]) {
						got[i] = c.want[i]
					}
				}
			}
			if diff := cmp.Diff(c.want, got, cmpopts.EquateEmpty()); diff != "" {
				t.Errorf("ReadDir problems (-want +got):\n%s", diff)
			}
			if len(p) > 0 && !errors.Is(p[0], c.cause) {
				t.Errorf("first problem %v: cause %v, want %v", p[0], p[0].Err, c.cause)
			}
			hasErr := len(p.Errors()) > 0
			if hasErr != (err != nil) || hasErr != (s == nil) {
				t.Errorf("ReadDir: %d errors, but err = %v and site nil = %v", len(p.Errors()), err, s == nil)
			}
			if err != nil && !errors.Is(err, c.cause) && p.Errors()[0] == p[0] {
				t.Errorf("ReadDir error %v does not wrap %v", err, c.cause)
			}
		})
	}
}
