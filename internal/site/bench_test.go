package site

import (
	"bytes"
	"fmt"
	"strings"
	"testing"
	"testing/fstest"
)

// bigSite returns a site folder with n branches, each with a valve, and
// three readings per branch.
func bigSite(n int) fstest.MapFS {
	var br, rd strings.Builder
	br.WriteString("id,parent,design flow [l/s],pipe bore [mm],pipe length [m],valve,setting,supply length [m],return length [m],header bore [mm]\n")
	rd.WriteString("state,where,quantity,value,unit,instrument\n")
	for i := range n {
		parent := ""
		if i%10 != 0 {
			parent = fmt.Sprintf("B%d", i/10*10)
		}
		fmt.Fprintf(&br, "B%d,%s,%.3f,21.6,%d,V15,%.1f,3,3,54\n", i, parent, 0.2+float64(i%7)/10, 5+i%20, 0.5+float64(i%35)/10)
		fmt.Fprintf(&rd, "as-found,B%d,flow,%.3f,l/s,clamp-on\n", i, 0.2+float64(i%5)/10)
		fmt.Fprintf(&rd, "as-found,B%d,valve diff,%.1f,kPa,manometer\n", i, 3+float64(i%9))
		fmt.Fprintf(&rd, "after-change,B%d,flow,%.3f,l/s,valve-meter\n", i, 0.25+float64(i%5)/10)
	}
	return fstest.MapFS{
		"site.csv":     {Data: []byte("header,direct-return\n")},
		"branches.csv": {Data: []byte(br.String())},
		"valves.csv":   {Data: []byte(base["valves.csv"])},
		"readings.csv": {Data: []byte(rd.String())},
	}
}

func BenchmarkReadDir(b *testing.B) {
	for _, n := range []int{10, 100, 1000, 10000} {
		fsys := bigSite(n)
		b.Run(fmt.Sprintf("branches=%d", n), func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				if _, _, err := ReadDir(fsys, "."); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

func BenchmarkWorkbook(b *testing.B) {
	for _, n := range []int{10, 100, 1000} {
		s, _, err := ReadDir(bigSite(n), ".")
		if err != nil {
			b.Fatal(err)
		}
		var buf bytes.Buffer
		if err := WriteWorkbook(s, &buf); err != nil {
			b.Fatal(err)
		}
		data := buf.Bytes()
		b.Run(fmt.Sprintf("read/branches=%d", n), func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				if _, _, err := ReadWorkbook(bytes.NewReader(data), int64(len(data)), "b.xlsx"); err != nil {
					b.Fatal(err)
				}
			}
		})
		b.Run(fmt.Sprintf("write/branches=%d", n), func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				var w bytes.Buffer
				if err := WriteWorkbook(s, &w); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
