package site_test

import (
	"fmt"
	"testing/fstest"

	"flowset/internal/site"
)

func ExampleReadDir() {
	fsys := fstest.MapFS{
		"annex/branches.csv": {Data: []byte("id,design flow [m3/h],pipe bore [mm],pipe length [m]\nAHU-1,3.6,27.3,20\nFCU-2,0.72,16.1,35\n")},
		"annex/readings.csv": {Data: []byte("where,quantity,value,unit,instrument\nAHU-1,flow,1.1,l/s,clamp-on\nheader,header diff,45,kPa,manometer\n")},
	}
	s, problems, err := site.ReadDir(fsys, "annex")
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(s.Name, len(s.Branches), "branches,", len(problems), "problems")
	fmt.Printf("design flow of %s: %.4g m3/s\n", s.Branches[0].ID, s.Branches[0].DesignFlow)
	r := s.Readings[0]
	fmt.Printf("%s at %s: %.4g m3/s, standard uncertainty %.3g m3/s\n", r.What, r.Where, r.Value, r.Sigma)
	fmt.Println(s.Summary().Missing)
	// Output:
	// annex 2 branches, 0 problems
	// design flow of AHU-1: 0.001 m3/s
	// flow at AHU-1: 0.0011 m3/s, standard uncertainty 2.75e-05 m3/s
	// [branch FCU-2 has no reading]
}

func ExampleProblems() {
	fsys := fstest.MapFS{
		"branches.csv": {Data: []byte("id;design flow [kPa];pipe length [m];colour\nA;0,5;-3;red\n")},
		"readings.csv": {Data: []byte("where,quantity,value,instrument\nB,flow,0.4,clamp-on\n")},
	}
	_, problems, err := site.ReadDir(fsys, ".")
	for _, p := range problems {
		fmt.Println(p)
	}
	fmt.Println(err != nil, len(problems.Errors()), "errors")
	// Output:
	// branches.csv:1:2: field "design flow": value "kPa": unit "kPa" is a pressure, not a flow (want a flow unit: l/s, m3/h, l/h or gpm)
	// branches.csv:1:4: warning: field "colour": unknown column, ignored (want one of: id, parent, design flow, pipe standard, pipe size, pipe bore, pipe length, roughness, fittings k, terminal drop, terminal flow, valve, setting, control kvs, supply length, return length, header standard, header size, header bore, header k, header roughness, supply k, return k, return standard, return size, return bore, return roughness, controller set point, controller kvs, controller min, controller max, controller senses, bypass valve, bypass setting, note)
	// branches.csv:2:3: field "pipe length": value "-3": must not be negative (want a length of 0 or more)
	// readings.csv:2:1: field "where": value "B": no branch has this id (want a branch id from the branches sheet, pump or header)
	// true 3 errors
}
