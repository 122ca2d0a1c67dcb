package site

import "strings"

// badCase changes files of the base site and lists every problem expected,
// in order, with the cause of the first.
type badCase struct {
	name  string
	files map[string]string
	want  []string
	cause error
	// prefix marks wants that end where another package's words begin.
	prefix bool
}

const brHead = "id,parent,design flow [l/s],pipe bore [mm],pipe length [m],valve,setting\n"
const rdHead = "state,where,quantity,value,unit,instrument\n"
const rdBase = "as-found,A,flow,0.45,l/s,clamp-on\n"

// pumpCurve is a pump sheet for cases that need a pump boundary.
const pumpCurve = "flow [l/s],head [m]\n0,8\n1,7\n2,5\n"

// twoPumps is a pump sheet of two pumps, the second smaller.
const twoPumps = "pump,flow [l/s],head [m]\nP1,0,8\nP1,1,7\nP1,2,5\nP2,0,6\nP2,1,5\nP2,1.5,4\n"

var badCases = []badCase{
	// Accepted variants: no problems at all.
	{name: "byte order mark", files: map[string]string{"branches.csv": "\ufeff" + base["branches.csv"]}},
	{name: "semicolons and decimal comma", files: map[string]string{"branches.csv": "id;parent;design flow [l/s];pipe bore [mm];pipe length [m];valve;setting\nA;;0,5;21,6;10;V15;2\nB;;0.4;21.6;12;V15;3\n"}},
	{name: "tabs", files: map[string]string{"branches.csv": "id\tdesign flow [l/s]\tpipe bore [mm]\tpipe length [m]\nA\t0,5\t21.6\t10\nB\t0.4\t21.6\t12\n"}},
	{name: "comments, blank lines, CRLF and spaces", files: map[string]string{"branches.csv": "# plant room 2\r\n\r\n id , design flow [l/s] , pipe bore (mm),pipe length [m]\r\n# riser A\r\nA, 0.5 ,21.6,10\r\n,,,\r\n\r\nB,0.4,21.6,12\r\n"}},
	{name: "quoted cells", files: map[string]string{"branches.csv": "\"id\",\"design flow [l/s]\",pipe bore [mm],pipe length [m],note\n\"A\",\"0.5\",21.6,10,\"east, \"\"low\"\" end\"\nB,0.4,21.6,12,\n"}},
	{name: "trailing empty column", files: map[string]string{"branches.csv": "id,design flow [l/s],pipe bore [mm],pipe length [m],\nA,0.5,21.6,10,\nB,0.4,21.6,12,\n"}},

	{name: "lone CR line ends", files: map[string]string{"branches.csv": strings.ReplaceAll(base["branches.csv"], "\n", "\r")}},
	{name: "sep= line naming semicolons", files: map[string]string{"branches.csv": "sep=;\nid;design flow [l/s];pipe bore [mm];pipe length [m]\nA;0,5;21.6;10\nB;0.4;21.6;12\n"}},
	{name: "sep= line naming commas after a byte order mark", files: map[string]string{"branches.csv": "\ufeffsep=,\r\n" + base["branches.csv"]}},

	// Encoding and file shape.
	{name: "sep= line naming another separator", files: map[string]string{"branches.csv": "sep=|\nid|design flow [l/s]\nA|0.5\n"},
		cause: ErrSyntax,
		want: []string{
			`branches.csv:1: sep= line names the separator "|", which flowset does not read (want "sep=," "sep=;" or a tab after "sep=", or no sep= line)`,
		}},
	{name: "thousands point in a decimal-comma file", files: map[string]string{"branches.csv": "id;design flow [l/s];pipe bore [mm];pipe length [m]\nA;0,5;21,6;10\nB;0.4;21.6;1.200\n"},
		cause: ErrSyntax,
		want: []string{
			`branches.csv:3:4: field "pipe length": value "1.200": decimal point or thousands separator? line 2 writes numbers with a decimal comma (want the number without a thousands separator (1200), or with the file's decimal comma)`,
		}},
	{name: "thousands comma in a decimal-point semicolon file", files: map[string]string{"branches.csv": "id;design flow [l/s];pipe bore [mm];pipe length [m]\nA;0.5;21.6;10\nB;0.4;21.6;1,200\n"},
		cause: ErrSyntax,
		want: []string{
			`branches.csv:3:4: field "pipe length": value "1,200": decimal comma or thousands separator? line 2 writes numbers with a decimal point (want the number without a thousands separator (1200), or with the file's decimal point)`,
		}},
	{name: "lone CR line ends with an error on line 3", files: map[string]string{"branches.csv": strings.ReplaceAll(brHead+"A,,0.5,21.6,10,V15,2\nB,,lots,21.6,12,V15,3\n", "\n", "\r")},
		cause: ErrSyntax,
		want: []string{
			`branches.csv:3:3: field "design flow": value "lots": not a number (want a number such as 1.5)`,
		}},
	{name: "line too long", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3," + strings.Repeat("x", MaxLineBytes) + "\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:3: line is longer than 1024 KiB (want lines of at most 1 MiB: one row of the sheet per line)",
		}},
	{name: "cell too long", files: map[string]string{"branches.csv": "id,design flow [l/s],pipe bore [mm],pipe length [m],note\nA,0.5,21.6,10,ok\nB,0.4,21.6,12," + strings.Repeat("y", MaxCellBytes+1) + "\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:3:5: cell is longer than 32000 characters (want a shorter cell)",
		}},
	{name: "utf-16", files: map[string]string{"branches.csv": "\xff\xfei\x00d\x00"},
		cause: ErrSyntax,
		want: []string{
			"branches.csv: file is UTF-16 text (want UTF-8 text: save the sheet as CSV UTF-8)",
		}},
	{name: "invalid utf-8", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,2\nB\xe9,,0.4,21.6,12,V15,3\n"},
		cause: ErrSyntax,
		want: []string{
			"branches.csv:3:1: value \"B?\": invalid UTF-8 text (want UTF-8 text: save the sheet as CSV UTF-8)",
		}},
	{name: "empty file", files: map[string]string{"branches.csv": ""},
		cause: ErrMissing,
		want: []string{
			"branches.csv: file is empty (want a header line naming the columns)",
		}},
	{name: "only comments", files: map[string]string{"branches.csv": "# nothing yet\n\n"},
		cause: ErrMissing,
		want: []string{
			"branches.csv: file is empty (want a header line naming the columns)",
		}},
	{name: "broken quotes", files: map[string]string{"branches.csv": brHead + "A,,\"0.5,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrSyntax,
		want: []string{
			"branches.csv:2: cannot split line: extraneous or missing \" in quoted-field (want cells separated by one separator, with \" only around a whole cell)",
		}},
	{name: "missing sheet", files: map[string]string{"readings.csv": del},
		cause: ErrMissing,
		want: []string{
			"readings.csv: sheet is missing (want a readings sheet; see flowset help readings)",
		}},
	{name: "two files for one sheet", files: map[string]string{"Readings.csv": rdHead + rdBase},
		cause: ErrDuplicate,
		want: []string{
			"readings.csv: a second file for the sheet of Readings.csv (want one file per sheet: remove or rename one of them)",
		}},
	{name: "unknown file", files: map[string]string{"target.csv": "branch,target flow\nA,0.5\n"},
		cause: ErrUnknown,
		want: []string{
			"target.csv: warning: unknown sheet, ignored (want \"targets.csv\")",
		}},
	{name: "header only", files: map[string]string{"branches.csv": brHead},
		cause: ErrMissing,
		want: []string{
			"branches.csv:1: no branches listed (want one row per branch below the header)",
		}},

	// Names that look alike but differ, or look other than they are.
	{name: "id with a right-to-left override", files: map[string]string{"branches.csv": brHead + "A\u202e1-UHA,,0.5,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrSyntax,
		want: []string{
			`branches.csv:2:1: field "id": value "A\u202e1-UHA": holds the invisible character U+202E (right-to-left override) at character 2 (want visible characters only: retype the text)`,
			`readings.csv:2:2: field "where": value "A": no branch has this id (want a branch id from the branches sheet, pump or header)`,
		}},
	{name: "id with a zero width space", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,2\nB\u200b,,0.4,21.6,12,V15,3\n"},
		cause: ErrSyntax,
		want: []string{
			`branches.csv:3:1: field "id": value "B\u200b": holds the invisible character U+200B (zero width space) at character 2 (want visible characters only: retype the text)`,
			`readings.csv:3:2: field "where": value "B": no branch has this id (want a branch id from the branches sheet, pump or header)`,
		}},
	{name: "reading place with a direction isolate", files: map[string]string{"readings.csv": rdHead + "as-found,\u2066A,flow,0.45,l/s,clamp-on\n"},
		cause: ErrSyntax,
		want: []string{
			`readings.csv:2:2: field "where": value "\u2066A": holds the invisible character U+2066 (left-to-right isolate) at character 1 (want visible characters only: retype the text)`,
		}},
	{name: "id too long", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n" + strings.Repeat("C", MaxNameChars+1) + ",,0.4,21.6,12,V15,3\n"},
		cause: ErrRange,
		want: []string{
			`branches.csv:4:1: field "id": value "` + strings.Repeat("C", 60) + `...": name is 257 characters long (want a name of at most 256 characters)`,
		}},
	{name: "ids differing only in case", files: map[string]string{"branches.csv": brHead + "ahu-1,,0.5,21.6,10,V15,2\nAHU-1,,0.4,21.6,12,V15,3\nA,,0.4,21.6,12,V15,3\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrDuplicate,
		want: []string{
			`branches.csv:3:1: field "id": value "AHU-1": branch id differs from "ahu-1" on line 2 only in letter case (want names that differ in more than letter case)`,
		}},
	{name: "ids differing only in Unicode form", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\nCAF\u00c9,,0.4,21.6,12,V15,3\nCAFE\u0301,,0.4,21.6,12,V15,3\n"},
		cause: ErrDuplicate,
		want: []string{
			`branches.csv:5:1: field "id": value "CAFÉ": branch id "CAFE\u0301" looks the same as "CAF\u00c9" on line 4 but is written with other characters (want names that differ visibly; retype one of them)`,
		}},
	{name: "valve models differing only in case", files: map[string]string{"valves.csv": base["valves.csv"] + "v15,5,2.5\n"},
		cause: ErrDuplicate,
		want: []string{
			`valves.csv:7:1: field "model": value "v15": valve model differs from "V15" on line 2 only in letter case (want names that differ in more than letter case)`,
		}},

	// Header problems.
	{name: "blank header", files: map[string]string{"branches.csv": "id,,design flow [l/s],pipe bore [mm],pipe length [m]\nA,x,0.5,21.6,10\nB,,0.4,21.6,12\n"},
		cause: ErrMissing,
		want: []string{
			"branches.csv:1:2: blank column name (want a name for the column that holds \"x\" on line 2)",
		}},
	{name: "value beyond header", files: map[string]string{"branches.csv": "id,design flow [l/s],pipe bore [mm],pipe length [m]\nA,0.5,21.6,10\nB,0.4,21.6,12,oops\n"},
		cause: ErrMissing,
		want: []string{
			"branches.csv:1:5: blank column name (want a name for the column that holds \"oops\" on line 3)",
		}},
	{name: "unit bracket not closed", files: map[string]string{"branches.csv": "id,design flow [l/s,pipe bore [mm],pipe length [m],roughnes [mm]\nA,0.5,21.6,10,\nB,0.4,21.6,12,\n"},
		cause: ErrSyntax,
		want: []string{
			`branches.csv:1:2: field "design flow": value "design flow [l/s": unit bracket [ is not closed (want "design flow [l/s]")`,
			`branches.csv:1:5: warning: field "roughnes": unknown column, ignored (want "roughness")`,
		}},
	{name: "duplicate header", files: map[string]string{"branches.csv": "id,design flow [l/s],pipe bore [mm],pipe length [m],Design-Flow [m3/h]\nA,0.5,21.6,10,1.8\nB,0.4,21.6,12,1.4\n"},
		cause: ErrDuplicate,
		want: []string{
			"branches.csv:1:5: field \"design flow\": column given twice (want one \"design flow\" column; the first is column 2)",
		}},
	{name: "unknown column", files: map[string]string{"branches.csv": "id,design flow [l/s],pipe bore [mm],pipe length [m],colour,pipe lenght\nA,0.5,21.6,10,red,1\nB,0.4,21.6,12,blue,1\n"},
		cause: ErrUnknown,
		want: []string{
			"branches.csv:1:5: warning: field \"colour\": unknown column, ignored (want one of: id, parent, design flow, pipe standard, pipe size, pipe bore, pipe length, roughness, fittings k, terminal drop, terminal flow, valve, setting, control kvs, supply length, return length, header standard, header size, header bore, header k, header roughness, supply k, return k, return standard, return size, return bore, return roughness, controller set point, controller kvs, controller min, controller max, controller senses, bypass valve, bypass setting, note)",
			"branches.csv:1:6: warning: field \"pipe lenght\": unknown column, ignored (want \"pipe length\")",
		}},
	{name: "missing required column", files: map[string]string{"branches.csv": "id,pipe bore [mm],pipe length [m]\nA,21.6,10\nB,21.6,12\n"},
		cause: ErrMissing,
		want: []string{
			"branches.csv:1: field \"design flow\": column is missing (want a column named \"design flow\")",
		}},
	{name: "unit of wrong kind", files: map[string]string{"branches.csv": "id,design flow [kPa],pipe bore [mm],pipe length [m]\nA,0.5,21.6,10\nB,0.4,21.6,12\n"},
		cause: ErrUnit,
		want: []string{
			"branches.csv:1:2: field \"design flow\": value \"kPa\": unit \"kPa\" is a pressure, not a flow (want a flow unit: l/s, m3/h, l/h or gpm)",
		}},
	{name: "unknown unit", files: map[string]string{"branches.csv": "id,design flow [l/s],pipe bore [mm],pipe length [furlong]\nA,0.5,21.6,10\nB,0.4,21.6,12\n"},
		cause: ErrUnit,
		want: []string{
			"branches.csv:1:4: field \"pipe length\": value \"furlong\": unknown unit (want a length unit: m, mm, ft or in)",
		}},
	{name: "unit on a text column", files: map[string]string{"branches.csv": "id [m],design flow [l/s],pipe bore [mm],pipe length [m]\nA,0.5,21.6,10\nB,0.4,21.6,12\n"},
		cause: ErrUnit,
		want: []string{
			"branches.csv:1:1: field \"id\": value \"m\": column takes no unit (want no unit in the column name)",
		}},
	{name: "unit on kv", files: map[string]string{"valves.csv": "model,setting,kv [m3/h]\nV15,0.5,0.2\nV15,4,2.1\n"},
		cause: ErrUnit,
		want: []string{
			"valves.csv:1:3: field \"kv\": value \"m3/h\": column takes no unit (want no unit: kv is in m3/h at 1 bar; a \"cv\" column takes US Cv)",
		}},

	// Numbers.
	{name: "text in a number", files: map[string]string{"branches.csv": brHead + "A,,half,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrSyntax,
		want: []string{
			"branches.csv:2:3: field \"design flow\": value \"half\": not a number (want a number such as 1.5)",
		}},
	{name: "unit in a cell", files: map[string]string{"branches.csv": brHead + "A,,0.5 l/s,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrSyntax,
		want: []string{
			"branches.csv:2:3: field \"design flow\": value \"0.5 l/s\": not a number: units go in the column name (want a bare number; name the unit in the header, e.g. \"design flow [l/s]\")",
		}},
	{name: "decimal comma with comma separator", files: map[string]string{"branches.csv": brHead + "A,,\"0,5\",21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrSyntax,
		want: []string{
			"branches.csv:2:3: field \"design flow\": value \"0,5\": not a number: a decimal comma needs a semicolon-separated file (want a number with a decimal point, such as 1.5)",
		}},
	{name: "decimal comma and point", files: map[string]string{"branches.csv": "id;design flow [l/s];pipe bore [mm];pipe length [m]\nA;1.000,5;21,6;10\nB;0,4;21,6;12\n"},
		cause: ErrSyntax,
		want: []string{
			"branches.csv:2:2: field \"design flow\": value \"1.000,5\": not a number: mixes decimal point and comma (want a number such as 1,5 without thousands separators)",
		}},
	{name: "nan", files: map[string]string{"branches.csv": brHead + "A,,NaN,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:2:3: field \"design flow\": value \"NaN\": not a finite number (want a finite number)",
		}},
	{name: "infinity", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,-Inf,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:2:5: field \"pipe length\": value \"-Inf\": not a finite number (want a finite number)",
		}},
	{name: "huge", files: map[string]string{"branches.csv": brHead + "A,,1e300,21.6,10,V15,2\nB,,0.4,21.6,1e400,V15,3\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:2:3: field \"design flow\": value \"1e300\": too large (want a flow from 0.0001 l/s to 10000 l/s)",
			"branches.csv:3:5: field \"pipe length\": value \"1e400\": number too large (want a finite number)",
		}},
	{name: "tiny", files: map[string]string{"branches.csv": brHead + "A,,1e-400,21.6,10,V15,2\nB,,0.00001,21.6,12,V15,3\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:2:3: field \"design flow\": value \"1e-400\": number too small to hold (want 0 or a number of sensible size)",
			"branches.csv:3:3: field \"design flow\": value \"0.00001\": too small (want a flow from 0.0001 l/s to 10000 l/s)",
		}},
	{name: "hex float", files: map[string]string{"branches.csv": brHead + "A,,0x1p-2,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrSyntax,
		want: []string{
			"branches.csv:2:3: field \"design flow\": value \"0x1p-2\": not a number (want a number such as 1.5)",
		}},
	{name: "negative flow", files: map[string]string{"branches.csv": brHead + "A,,-2,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:2:3: field \"design flow\": value \"-2\": must be positive (want a flow above 0)",
		}},
	{name: "negative length", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,-10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:2:5: field \"pipe length\": value \"-10\": must not be negative (want a length of 0 or more)",
		}},
	{name: "zero bore", files: map[string]string{"branches.csv": brHead + "A,,0.5,0,10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:2:4: field \"pipe bore\": value \"0\": must be positive (want a bore above 0)",
		}},
	{name: "bore in inches typed as mm", files: map[string]string{"branches.csv": brHead + "A,,0.5,0.85,10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:2:4: field \"pipe bore\": value \"0.85\": too small (want a bore from 1 mm to 3000 mm)",
		}},
	{name: "blank required value", files: map[string]string{"branches.csv": brHead + "A,,,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrMissing,
		want: []string{
			"branches.csv:2:3: field \"design flow\": blank (want a design flow)",
		}},

	// Branches.
	{name: "duplicate branch id", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\nA,,0.3,21.6,12,,\n"},
		cause: ErrDuplicate,
		want: []string{
			"branches.csv:4:1: field \"id\": value \"A\": branch id given twice (want a unique id; the first is on line 2)",
		}},
	{name: "blank branch id", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n,,0.3,21.6,12,,\n"},
		cause: ErrMissing,
		want: []string{
			"branches.csv:4:1: field \"id\": blank (want a unique branch id)",
		}},
	{name: "reserved branch id", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\nPump,,0.3,21.6,12,,\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:4:1: field \"id\": value \"Pump\": pump and header are reserved names (want another branch id)",
		}},
	{name: "line break in id", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n\"C\nD\",,0.3,21.6,12,,\n"},
		cause: ErrSyntax,
		want: []string{
			"branches.csv:4:1: field \"id\": value \"C\\nD\": holds a line break or control character (want text on one line)",
		}},
	{name: "unknown parent", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,2\nB,a,0.4,21.6,12,V15,3\n"},
		cause: ErrReference,
		want: []string{
			"branches.csv:3:2: field \"parent\": value \"a\": no branch has this id (want the id of the riser in this sheet, or blank; did you mean \"A\")",
		}},
	{name: "branches in a loop", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,2\nB,D,0.4,21.6,12,V15,3\nC,B,0.3,21.6,12,,\nD,C,0.3,21.6,12,,\n"},
		cause: ErrReference,
		want: []string{
			"branches.csv:3:2: field \"parent\": value \"D\": branches in a loop: B -> D -> C -> B (want a chain of parents that ends at a branch on the main headers)",
		}},
	{name: "branch hangs from itself", files: map[string]string{"branches.csv": brHead + "A,A,0.5,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrReference,
		want: []string{
			"branches.csv:2:2: field \"parent\": value \"A\": branch hangs from itself (want a chain of parents that ends at a branch on the main headers)",
		}},
	{name: "pipe length without size", files: map[string]string{"branches.csv": "id,design flow [l/s],pipe standard,pipe length [m]\nA,0.5,en10255-m,10\nB,0.4,,0\n"},
		cause: ErrMissing,
		want: []string{
			"branches.csv:2: field \"pipe size\": pipe length given without the pipe's size (want a pipe standard and size, or a pipe bore)",
		}},
	{name: "setting without valve", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrMissing,
		want: []string{
			"branches.csv:2:7: field \"setting\": value \"2\": setting given for a branch without a valve (want a valve model in the valve column, or no setting)",
		}},
	{name: "controller without kvs", files: map[string]string{"branches.csv": "id,parent,design flow [l/s],pipe bore [mm],pipe length [m],controller set point [kPa],controller kvs\nA,,0.5,21.6,10,25,\nB,A,0.4,21.6,12,,\n"},
		cause: ErrMissing,
		want: []string{
			"branches.csv:2:7: field \"controller kvs\": differential controller without its valve's Kvs (want the Kvs of the controller's valve wide open (or a controller cvs column))",
		}},
	{name: "controller kvs without set point", files: map[string]string{"branches.csv": "id,parent,design flow [l/s],pipe bore [mm],pipe length [m],controller set point [kPa],controller kvs\nA,,0.5,21.6,10,,4\nB,A,0.4,21.6,12,,\n"},
		cause: ErrMissing,
		want: []string{
			"branches.csv:2:6: field \"controller set point\": controller columns given without its set point (want the differential the controller holds, or none of the controller columns)",
		}},
	{name: "controller set point outside its range", files: map[string]string{"branches.csv": "id,parent,design flow [l/s],pipe bore [mm],pipe length [m],controller set point [kPa],controller kvs,controller min [kPa],controller max [kPa]\nA,,0.5,21.6,10,45,4,5,30\nB,A,0.4,21.6,12,,,,\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:2:6: field \"controller set point\": value \"45\": set point outside the controller's range (want a set point from 5 to 30 kPa, or the range as found on the controller)",
		}},
	{name: "controller range reversed", files: map[string]string{"branches.csv": "id,parent,design flow [l/s],pipe bore [mm],pipe length [m],controller set point [kPa],controller kvs,controller min [kPa],controller max [kPa]\nA,,0.5,21.6,10,25,4,30,5\nB,A,0.4,21.6,12,,,,\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:2:9: field \"controller max\": value \"5\": controller max not above controller min (want the highest set point the controller can be given, above its lowest)",
		}},
	{name: "controller on a terminal branch", files: map[string]string{"branches.csv": "id,parent,design flow [l/s],pipe bore [mm],pipe length [m],controller set point [kPa],controller kvs\nA,,0.5,21.6,10,25,4\nB,,0.4,21.6,12,,\n"},
		cause: ErrReference,
		want: []string{
			"branches.csv:2:6: field \"controller set point\": value \"25\": a differential controller on a branch that no branch hangs from (want a controller only on a riser or branch group (branches naming it as their parent), or no set point)",
		}},
	{name: "valve not defined", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V-15,2\nB,,0.4,21.6,12,V15,3\n"},
		cause: ErrReference,
		want: []string{
			"branches.csv:2:6: field \"valve\": value \"V-15\": valve model not defined (want a model defined in the valves sheet; did you mean \"V15\")",
		}},
	{name: "valves sheet missing", files: map[string]string{"valves.csv": del},
		cause: ErrReference,
		want: []string{
			"branches.csv:2:6: field \"valve\": value \"V15\": valve model not defined (want a valves sheet defining this model)",
			"branches.csv:3:6: field \"valve\": value \"V15\": valve model not defined (want a valves sheet defining this model)",
		}},
	{name: "setting outside table", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,4.5\nB,,0.4,21.6,12,V15,0.2\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:2:7: field \"setting\": value \"4.5\": outside the range of valve \"V15\" (want a setting from 0.5 to 4 turns)",
			"branches.csv:3:7: field \"setting\": value \"0.2\": outside the range of valve \"V15\" (want a setting from 0.5 to 4 turns)",
		}},
	{name: "header lengths with no header", files: map[string]string{"branches.csv": "id,design flow [l/s],supply length [m],return length [m],header bore [mm]\nA,0.5,0,0,\nB,0.4,5,5,40\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:3:3: warning: field \"supply length\": value \"5\": header lengths ignored: the site's header is none (want header direct-return or reverse-return in the site sheet)",
		}},
	{name: "header length without size", files: map[string]string{"site.csv": "header,direct-return\n", "branches.csv": "id,design flow [l/s],supply length [m],return length [m]\nA,0.5,0,0\nB,0.4,5,5\n"},
		cause: ErrMissing,
		want: []string{
			"branches.csv:3: field \"header size\": header length given without the header's size (want a header standard and size, or a header bore)",
		}},

	// Valves.
	{name: "one-point valve", files: map[string]string{"valves.csv": "model,setting,kv\nV15,2,0.9\n"},
		cause: ErrMissing,
		want: []string{
			"valves.csv:2:1: field \"model\": value \"V15\": kv table has one point (want at least two settings with their kv)",
		}},
	{name: "settings not rising", files: map[string]string{"valves.csv": "model,setting,kv\nV15,0.5,0.2\nV15,2,0.9\nV15,1,0.4\nV15,4,2.1\n"},
		cause: ErrRange,
		want: []string{
			"valves.csv:4:2: field \"setting\": value \"1\": settings must rise down the table (want a setting above 2 (line 3))",
		}},
	{name: "kv falling", files: map[string]string{"valves.csv": "model,setting,kv\nV15,0.5,0.2\nV15,1,0.4\nV15,2,0.35\nV15,4,2.1\n"},
		cause: ErrRange,
		want: []string{
			"valves.csv:4:3: field \"kv\": value \"0.35\": kv falls as the setting rises (want a kv of at least 0.4 (line 3))",
		}},
	{name: "shut position in kv table", files: map[string]string{"valves.csv": "model,setting,kv\nV15,0,0\nV15,0.5,0.2\nV15,4,2.1\n"},
		cause: ErrRange,
		want: []string{
			"valves.csv:2:3: field \"kv\": value \"0\": kv 0 is a shut valve, which cannot be modelled (want a kv above 0: start the table at the first setting that passes water)",
		}},
	{name: "kv flat", files: map[string]string{"valves.csv": "model,setting,kv\nV15,0.5,0.2\nV15,1,0.4\nV15,2,0.4\nV15,4,2.1\n"},
		cause: ErrRange,
		want: []string{
			"valves.csv:4:3: warning: field \"kv\": value \"0.4\": kv the same as at the setting before (want a kv that rises with the setting; settings in between cannot be told apart)",
		}},
	{name: "setting without kv", files: map[string]string{"valves.csv": "model,setting,kv\nV15,0.5,0.2\nV15,1,\nV15,4,2.1\n"},
		cause: ErrMissing,
		want: []string{
			"valves.csv:3:3: field \"kv\": setting without a kv (want the kv at that setting)",
		}},
	// Pressure-independent valves (a max flow table and a hold diff).
	{name: "pressure-independent valve", files: map[string]string{"valves.csv": "model,setting,max flow [l/s],kv,hold diff [kPa]\nV15,0.5,0.1,,25\nV15,4,0.6,5,\n"}},
	{name: "pressure-independent valve without hold diff", files: map[string]string{"valves.csv": "model,setting,max flow [l/s]\nV15,0.5,0.1\nV15,4,0.6\n"},
		cause: ErrMissing,
		want: []string{
			"valves.csv:2:1: field \"model\": value \"V15\": pressure-independent valve without a hold diff (want the least differential across it at which it holds its flow, e.g. 20 kPa)",
		}},
	{name: "max flow falling", files: map[string]string{"valves.csv": "model,setting,max flow [l/s],hold diff [kPa]\nV15,0.5,0.1,20\nV15,2,0.3,\nV15,4,0.3,\n"},
		cause: ErrRange,
		want: []string{
			"valves.csv:4:3: field \"max flow\": value \"0.3\": max flow does not rise with the setting (want a max flow above line 3's)",
		}},
	{name: "max flow rows mixed with kv rows", files: map[string]string{"valves.csv": "model,setting,kv,max flow [l/s],hold diff [kPa]\nV15,0.5,0.2,0.1,20\nV15,4,2.1,,\n"},
		cause: ErrDuplicate,
		want: []string{
			"valves.csv:2:1: field \"model\": value \"V15\": model has rows with a max flow and rows without (want a max flow on every setting row of a pressure-independent valve)",
		}},
	{name: "max flow without a setting", files: map[string]string{"valves.csv": "model,setting,max flow [l/s],hold diff [kPa]\nV15,0.5,0.1,20\nV15,,0.3,\nV15,4,0.6,\n"},
		cause: ErrMissing,
		want: []string{
			"valves.csv:3:2: field \"setting\": max flow without a setting (want the setting this max flow belongs to)",
		}},
	{name: "hold diff on a kv table", files: map[string]string{"valves.csv": "model,setting,kv,hold diff [kPa]\nV15,0.5,0.2,20\nV15,4,2.1,\n"},
		cause: ErrMissing,
		want: []string{
			"valves.csv:2:1: field \"model\": value \"V15\": hold diff given for a valve without max flow rows (want setting and max flow rows for a pressure-independent valve, or no hold diff)",
		}},
	{name: "pressure-independent valve with kvs", files: map[string]string{"valves.csv": "model,setting,max flow [l/s],hold diff [kPa],kvs\nV15,0.5,0.1,20,3\nV15,4,0.6,,\n"},
		cause: ErrDuplicate,
		want: []string{
			"valves.csv:2:1: field \"model\": value \"V15\": kvs given for a pressure-independent valve (want setting, max flow and hold diff (kv optional on each row))",
		}},
	{name: "pressure-independent kv falling", files: map[string]string{"valves.csv": "model,setting,max flow [l/s],kv,hold diff [kPa]\nV15,0.5,0.1,2,25\nV15,4,0.6,1.5,\n"},
		cause: ErrRange,
		want: []string{
			"valves.csv:3:4: field \"kv\": value \"1.5\": kv falls as the setting rises (want a kv of at least 2 (line 2), or kv blank on every row)",
		}},
	{name: "table and characteristic", files: map[string]string{"valves.csv": "model,setting,kv,characteristic,kvs\nV15,0.5,0.2,,\nV15,4,2.1,,\nV15,,,linear,2.5\n"},
		cause: ErrDuplicate,
		want: []string{
			"valves.csv:4:4: field \"characteristic\": value \"linear\": model has both a kv table and a characteristic (want either setting and kv rows or one characteristic)",
		}},
	{name: "characteristic without kvs", files: map[string]string{"valves.csv": "model,setting,kv,characteristic,kvs\nV15,0.5,0.2,,\nV15,4,2.1,,\nCV,,,equal-percentage,\n"},
		cause: ErrMissing,
		want: []string{
			"valves.csv:4:4: field \"characteristic\": value \"equal-percentage\": characteristic without kvs (want the valve's kvs)",
		}},
	{name: "unknown characteristic", files: map[string]string{"valves.csv": "model,setting,kv,characteristic,kvs\nV15,0.5,0.2,,\nV15,4,2.1,,\nCV,,,parabolic,4\n"},
		cause: ErrUnknown,
		want: []string{
			"valves.csv:4:4: field \"characteristic\": value \"parabolic\": unknown word (want one of: linear, equal-percentage, quick-opening)",
		}},
	{name: "conflicting setting unit", files: map[string]string{"valves.csv": "model,setting unit,setting,kv\nV15,turns,0.5,0.2\nV15,%,4,2.1\n"},
		cause: ErrDuplicate,
		want: []string{
			"valves.csv:3:2: field \"setting unit\": value \"%\": differs from line 2 for the same model (want one value per model)",
		}},
	{name: "kv and cv columns", files: map[string]string{"valves.csv": "model,setting,kv,cv\nV15,0.5,0.2,0.23\nV15,4,2.1,2.4\n"},
		cause: ErrDuplicate,
		want: []string{
			"valves.csv:1:4: field \"cv\": column given twice (want one \"kv\" or \"cv\" column; the first is column 3)",
		}},

	// Readings.
	{name: "reading at unknown branch", files: map[string]string{"readings.csv": rdHead + rdBase + "as-found,b,flow,0.4,l/s,clamp-on\n"},
		cause: ErrReference,
		want: []string{
			"readings.csv:3:2: field \"where\": value \"b\": no branch has this id (want a branch id from the branches sheet, pump or header; did you mean \"B\")",
		}},
	{name: "unknown quantity", files: map[string]string{"readings.csv": rdHead + rdBase + "as-found,B,velocity,0.4,m/s,clamp-on\n"},
		cause: ErrUnknown,
		want: []string{
			"readings.csv:3:3: field \"quantity\": value \"velocity\": unknown word (want one of: flow, valve diff, branch diff, header diff, pump diff, total flow, speed, controlled diff)",
		}},
	{name: "unknown instrument", files: map[string]string{"readings.csv": rdHead + rdBase + "as-found,B,flow,0.4,l/s,bucket\n"},
		cause: ErrUnknown,
		want: []string{
			"readings.csv:3:6: field \"instrument\": value \"bucket\": unknown word (want one of: clamp-on, valve-meter, orifice, mag-meter, manometer, gauge, transmitter, pump-display)",
		}},
	{name: "instrument that cannot read it", files: map[string]string{"readings.csv": rdHead + rdBase + "as-found,B,flow,0.4,l/s,manometer\n"},
		cause: ErrRange,
		want: []string{
			"readings.csv:3:6: field \"instrument\": value \"manometer\": a manometer does not read flow (want one of: clamp-on, valve-meter, orifice, mag-meter, transmitter)",
		}},
	{name: "no instrument and no uncertainty", files: map[string]string{"readings.csv": rdHead + rdBase + "as-found,B,flow,0.4,l/s,\n"},
		cause: ErrMissing,
		want: []string{
			"readings.csv:3:6: field \"instrument\": no instrument and no uncertainty (want an instrument kind or an uncertainty)",
		}},
	{name: "reading unit of wrong kind", files: map[string]string{"readings.csv": rdHead + rdBase + "as-found,B,flow,0.4,kPa,clamp-on\n"},
		cause: ErrUnit,
		want: []string{
			"readings.csv:3:5: field \"unit\": value \"kPa\": unit \"kPa\" is a pressure, not a flow (want a flow unit: l/s, m3/h, l/h or gpm for a flow reading)",
		}},
	{name: "negative reading", files: map[string]string{"readings.csv": rdHead + rdBase + "as-found,B,valve diff,-3,kPa,manometer\n"},
		cause: ErrRange,
		want: []string{
			"readings.csv:3:4: field \"value\": value \"-3\": negative beyond its uncertainty (want a pressure difference of 0 or more; a reading near zero is taken as read down to -0.2 kPa, twice its expanded uncertainty)",
		}},
	{name: "negative differentials near zero", files: map[string]string{"readings.csv": "where,quantity,value,unit,instrument,uncertainty\nA,flow,0.45,l/s,clamp-on,\nA,valve diff,-0.1,kPa,manometer,\nB,branch diff,-0.9,kPa,gauge,0.5\nB,valve diff,-1.2,kPa,manometer,0.5\nheader,header diff,-0.15,kPa,manometer,\n"},
		cause: ErrRange,
		want: []string{
			// manometer default: ±0.1 kPa floor at k = 2, so down to -0.2 kPa; a stated ±0.5 kPa allows -1 kPa.
			"readings.csv:3:3: warning: field \"value\": value \"-0.1\": negative, but within its uncertainty of zero: kept as read (want nothing to change if the instrument showed it; the fit compares it as read)",
			"readings.csv:4:3: warning: field \"value\": value \"-0.9\": negative, but within its uncertainty of zero: kept as read (want nothing to change if the instrument showed it; the fit compares it as read)",
			"readings.csv:5:3: field \"value\": value \"-1.2\": negative beyond its uncertainty (want a pressure difference of 0 or more; a reading near zero is taken as read down to -1 kPa, twice its expanded uncertainty)",
			"readings.csv:6:3: warning: field \"value\": value \"-0.15\": negative, but within its uncertainty of zero: kept as read (want nothing to change if the instrument showed it; the fit compares it as read)",
		}},
	{name: "zero uncertainties", files: map[string]string{"readings.csv": "where,quantity,value,unit,instrument,uncertainty\nA,flow,0,l/s,clamp-on,5 %\nA,valve diff,0,kPa,manometer,0\nB,flow,0.4,m3/h,mag-meter,0 %\npump,total flow,0.9,l/s,orifice,0\n"},
		cause: ErrRange,
		want: []string{
			"readings.csv:2:6: warning: field \"uncertainty\": value \"5 %\": a percentage of a zero reading is zero: replaced by the clamp-on default, ±0.01 l/s at k = 2 (want the reading's uncertainty: no reading is exact)",
			"readings.csv:3:6: warning: field \"uncertainty\": value \"0\": zero uncertainty: replaced by the manometer default, ±0.1 kPa at k = 2 (want the reading's uncertainty: no reading is exact)",
			// mag-meter ±2 % of 0.4 m3/h is above its 0.036 m3/h floor.
			"readings.csv:4:6: warning: field \"uncertainty\": value \"0 %\": zero uncertainty: replaced by the mag-meter default, ±0.036 m3/h at k = 2 (want the reading's uncertainty: no reading is exact)",
			"readings.csv:5:6: warning: field \"uncertainty\": value \"0\": zero uncertainty: replaced by the orifice default, ±0.045 l/s at k = 2 (want the reading's uncertainty: no reading is exact)",
		}},
	{name: "speed readings against max speed", files: map[string]string{"readings.csv": "where,quantity,value,unit,instrument\npump,speed,1.001,,pump-display\npump,speed,100.5,%,pump-display\npump,speed,1.05,,pump-display\npump,speed,103,%,pump-display\npump,speed,95,,pump-display\npump,speed,-0.1,,pump-display\n"},
		cause: ErrRange,
		want: []string{
			// pump-display: ±1 % of rated at k = 2, so up to 2 % above max speed.
			"readings.csv:4:3: field \"value\": value \"1.05\": above the drive's max speed 1 by more than the display's uncertainty (want a speed up to 1.02 (max speed plus twice the reading's expanded uncertainty); check the max speed in the site sheet, and give unit % for a percentage)",
			"readings.csv:5:3: field \"value\": value \"103\": above the drive's max speed 100 % by more than the display's uncertainty (want a speed up to 102 % (max speed plus twice the reading's expanded uncertainty); check the max speed in the site sheet, and give unit % for a percentage)",
			"readings.csv:6:3: field \"value\": value \"95\": too large (want a ratio to rated speed from 0 to 2; give unit % for a percentage)",
			"readings.csv:7:3: field \"value\": value \"-0.1\": must not be negative (want a ratio to rated speed from 0 to 2; give unit % for a percentage)",
		}},
	{name: "speed reading below a lowered max speed", files: map[string]string{"site.csv": "max speed [%],90\nspeed [%],85\n",
		"readings.csv": "where,quantity,value,unit,instrument,uncertainty\npump,speed,0.905,,pump-display,\npump,speed,0.93,,pump-display,0.005\n"},
		cause: ErrRange,
		want: []string{
			"readings.csv:3:3: field \"value\": value \"0.93\": above the drive's max speed 0.9 by more than the display's uncertainty (want a speed up to 0.91 (max speed plus twice the reading's expanded uncertainty); check the max speed in the site sheet, and give unit % for a percentage)",
		}},
	{name: "bad uncertainty", files: map[string]string{"readings.csv": "where,quantity,value,uncertainty\nA,flow,0.45,about 5\nB,flow,0.4,0\nB,flow,0,5 %\nB,flow,0.41,0.02\n"},
		cause: ErrSyntax,
		want: []string{
			"readings.csv:2:4: field \"uncertainty\": value \"about 5\": not a number (want a percentage such as 5 %, or a number in the row's unit)",
			"readings.csv:3:4: field \"uncertainty\": value \"0\": must be positive (want an uncertainty above 0, or an instrument kind whose default applies)",
			"readings.csv:4:4: field \"uncertainty\": value \"5 %\": a percentage of a zero reading is zero (want an absolute uncertainty in the row's unit, or an instrument kind whose default applies)",
		}},
	{name: "uncertainty column unit", files: map[string]string{"readings.csv": "where,quantity,value,uncertainty [kPa]\nA,flow,0.45,5\n"},
		cause: ErrUnit,
		want: []string{
			"readings.csv:1:4: field \"uncertainty\": value \"kPa\": uncertainty takes % or the row's unit (want \"uncertainty [%]\", or \"uncertainty\" with values in the row's unit)",
		}},
	{name: "pump diff at a branch", files: map[string]string{"readings.csv": rdHead + rdBase + "as-found,B,pump diff,40,kPa,gauge\n"},
		cause: ErrRange,
		want: []string{
			"readings.csv:3:2: field \"where\": value \"B\": pump diff is not read here (want pump, or the id of one of several pumps)",
		}},
	{name: "controlled diff where there is no controller", files: map[string]string{"readings.csv": rdHead + rdBase + "as-found,B,controlled diff,20,kPa,manometer\n"},
		cause: ErrReference,
		want: []string{
			"readings.csv:3:2: field \"where\": value \"B\": branch \"B\" has no differential controller (want a riser with a controller set point in the branches sheet)",
		}},
	{name: "flow at the pump", files: map[string]string{"readings.csv": rdHead + rdBase + "as-found,pump,flow,1.1,l/s,clamp-on\n"},
		cause: ErrRange,
		want: []string{
			"readings.csv:3:2: field \"where\": value \"pump\": flow is not read here (want a branch id)",
		}},
	{name: "valve diff where there is no valve", files: map[string]string{
		"branches.csv": brHead + "A,,0.5,21.6,10,,\nB,,0.4,21.6,12,V15,3\n",
		"readings.csv": rdHead + "as-found,A,valve diff,4,kPa,manometer\n"},
		cause: ErrReference,
		want: []string{
			"readings.csv:2:2: field \"where\": value \"A\": branch \"A\" has no valve (want a valve model for this branch in the branches sheet)",
		}},
	{name: "reading setting outside table", files: map[string]string{"readings.csv": "where,quantity,value,setting,instrument\nA,flow,0.45,5,valve-meter\n"},
		cause: ErrRange,
		want: []string{
			"readings.csv:2:4: field \"setting\": value \"5\": outside the range of valve \"V15\" (want a setting from 0.5 to 4 turns)",
		}},
	{name: "two settings in one state", files: map[string]string{"readings.csv": "state,where,quantity,value,setting,instrument\nafter,A,flow,0.45,2,clamp-on\nafter,A,valve diff,5,2.5,manometer\n"},
		cause: ErrRange,
		want: []string{
			"readings.csv:3:5: field \"setting\": value \"2.5\": differs from the setting on line 2 in the same state (want one setting per valve in a state; give each change its own state)",
		}},
	{name: "no readings", files: map[string]string{"readings.csv": rdHead},
		cause: ErrMissing,
		want: []string{
			"readings.csv:1: warning: no readings: nothing to calibrate (want one row per reading below the header)",
		}},
	{name: "contradictory readings", files: map[string]string{"readings.csv": rdHead + rdBase + "as-found,A,flow,0.60,l/s,clamp-on\nas-found,A,flow,0.46,l/s,clamp-on\nafter-change,A,flow,0.60,l/s,clamp-on\n"},
		cause: ErrRange,
		want: []string{
			"readings.csv:3: warning: field \"value\": value \"0.6 l/s\": disagrees with line 2 (0.45 l/s) by more than 3 standard uncertainties (want readings of one quantity in one state that agree within their uncertainties)",
			"readings.csv:4: warning: field \"value\": value \"0.46 l/s\": disagrees with line 3 (0.6 l/s) by more than 3 standard uncertainties (want readings of one quantity in one state that agree within their uncertainties)",
		}},

	// Site sheet.
	{name: "site unknown and duplicate keys", files: map[string]string{"site.csv": "key,value\nname,Annex\ncolour,blue\ntemprature [degC],12\nname,Annex 2\n"},
		cause: ErrUnknown,
		want: []string{
			"site.csv:3:1: warning: field \"colour\": unknown key, ignored (want one of: name, fluid, glycol, temperature, density, viscosity, kinematic viscosity, header, boundary, speed, max speed, set point, static lift, outlet pressure, pump arrangement, pumps running, sensor, hours, energy price, currency, pump efficiency, motor efficiency, tolerance low, tolerance high, units)",
			"site.csv:4:1: warning: field \"temprature\": unknown key, ignored (want \"temperature\")",
			"site.csv:5:1: field \"name\": key given twice (want one \"name\" line; the first is line 2)",
		}},
	{name: "site without key header", files: map[string]string{"site.csv": "fluid,ethylene-glycol\ntemperature [degF],45\n"},
		cause: ErrMissing,
		want: []string{
			"site.csv:1:2: field \"glycol\": glycol concentration is missing (want a glycol [%] line, e.g. 30)",
		}},
	{name: "water with glycol", files: map[string]string{"site.csv": "fluid,water\nglycol [%],30\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:2:2: field \"glycol\": value \"30\": water takes no glycol (want 0, or fluid ethylene-glycol or propylene-glycol)",
		}},
	{name: "glycol of zero", files: map[string]string{"site.csv": "fluid,propylene-glycol\nglycol,0\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:2:2: field \"glycol\": value \"0\": must be positive for a glycol (want a concentration above 0 %)",
		}},
	{name: "unknown fluid", files: map[string]string{"site.csv": "fluid,brine\n"},
		cause: ErrUnknown,
		want: []string{
			"site.csv:1:2: field \"fluid\": value \"brine\": unknown word (want one of: water, ethylene-glycol, propylene-glycol, other)",
		}},
	{name: "frozen water", files: map[string]string{"site.csv": "temperature [degC],-5\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:1:2: field \"temperature\": value \"-5\": outside the fluid property tables (want water: temperature 268.15 K",
		}, prefix: true},
	{name: "glycol beyond the tables", files: map[string]string{"site.csv": "fluid,ethylene-glycol\nglycol [%],60\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:2:2: field \"glycol\": value \"60\": outside the fluid property tables (want 10 to 50 % by volume)",
		}},
	{name: "glycol below its freezing point", files: map[string]string{"site.csv": "fluid,propylene-glycol\nglycol [%],20\ntemperature [degC],-20\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:3:2: field \"temperature\": value \"-20\": outside the fluid property tables (want propylene-glycol 20 % by volume",
		}, prefix: true},
	{name: "fluid as measured", files: map[string]string{"site.csv": "fluid,other\ntemperature [degC],30\ndensity [kg/m3],1050\nkinematic viscosity [cSt],2.5\n"}},
	{name: "water as measured beyond the tables", files: map[string]string{"site.csv": "temperature [degC],200\ndensity [g/cm3],0.8647\nviscosity [cP],0.1344\n"}},
	{name: "negative density", files: map[string]string{"site.csv": "fluid,other\ndensity [kg/m3],-998\nviscosity [mPa s],1.0\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:2:2: field \"density\": value \"-998\": must be positive (want a density above 0)",
		}},
	{name: "density in lb/ft3 too small", files: map[string]string{"site.csv": "density [lb/ft3],6.2\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:1:2: field \"density\": value \"6.2\": too small (want a density from 24.9712 lb/ft3 to 156.07 lb/ft3)",
		}},
	{name: "other fluid without viscosity", files: map[string]string{"site.csv": "fluid,other\ndensity,1050\n"},
		cause: ErrMissing,
		want: []string{
			"site.csv:1:2: field \"viscosity\": fluid other needs its density and viscosity (want a viscosity [mPa s] or kinematic viscosity [mm2/s] line)",
		}},
	{name: "other fluid without density", files: map[string]string{"site.csv": "fluid,other\nviscosity [mPa s],3\n"},
		cause: ErrMissing,
		want: []string{
			"site.csv:1:2: field \"density\": fluid other needs its density and viscosity (want a density [kg/m3] line)",
		}},
	{name: "both viscosities", files: map[string]string{"site.csv": "density,1050\nviscosity [mPa s],3\nkinematic viscosity [mm2/s],2.9\n"},
		cause: ErrDuplicate,
		want: []string{
			"site.csv:3:2: field \"kinematic viscosity\": value \"2.9\": viscosity given twice (want either viscosity or kinematic viscosity; viscosity is line 2)",
		}},
	{name: "viscosity in a pressure unit", files: map[string]string{"site.csv": "viscosity [kPa],3\n"},
		cause: ErrUnit,
		want: []string{
			"site.csv:1:1: field \"viscosity\": value \"kPa\": unit \"kPa\" is a pressure, not a dynamic viscosity (want a dynamic viscosity unit: mPa s, cP or Pa s)",
		}},
	{name: "open circuit", files: map[string]string{"site.csv": "static lift [ft],24.6\noutlet pressure [psi],2.9\n"}},
	{name: "negative static lift", files: map[string]string{"site.csv": "static lift [m],-4\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:1:2: field \"static lift\": value \"-4\": must not be negative (want a height of 0 or more)",
		}},
	{name: "outlet pressure in metres", files: map[string]string{"site.csv": "outlet pressure [m],3\n"},
		cause: ErrUnit,
		want: []string{
			"site.csv:1:1: field \"outlet pressure\": value \"m\": unit \"m\" is a length, not a pressure (want a pressure unit: kPa, Pa, bar, mbar, mH2O or psi)",
		}},
	{name: "pump boundary without pump", files: map[string]string{"site.csv": "boundary,pump\n"},
		cause: ErrMissing,
		want: []string{
			"site.csv:1:2: field \"boundary\": value \"pump\": pump boundary without a pump curve (want a pump sheet with flow and head, or another boundary)",
		}},
	{name: "constant differential without set point", files: map[string]string{"site.csv": "boundary,constant differential\nsensor,C\n"},
		cause: ErrMissing,
		want: []string{
			"site.csv:1:2: field \"set point\": constant-differential boundary without a set point (want a set point [kPa] line)",
			"site.csv:2:2: field \"sensor\": value \"C\": no branch has this id (want pump or a branch id)",
		}},
	{name: "set point ignored", files: map[string]string{"site.csv": "set point [kPa],40\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:1:2: warning: field \"set point\": value \"40\": set point ignored with boundary measured-differential (want boundary constant-differential)",
		}},
	{name: "speed above max", files: map[string]string{"site.csv": "speed,85 %\nmax speed [%],80\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:1:2: field \"speed\": value \"85 %\": above max speed (want a speed up to the max speed, 0.8)",
		}},
	{name: "speed as a bare percentage", files: map[string]string{"site.csv": "speed,85\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:1:2: field \"speed\": value \"85\": too large (want a ratio to nominal speed from 0.001 to 2; write \"speed [%]\" for a percentage)",
		}},
	{name: "positive low tolerance", files: map[string]string{"site.csv": "tolerance low [%],10\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:1:2: field \"tolerance low\": value \"10\": too large (want a value from -100 % to 0 %, e.g. -10)",
		}},
	{name: "temperature in kPa", files: map[string]string{"site.csv": "temperature [kPa],20\n"},
		cause: ErrUnit,
		want: []string{
			"site.csv:1:1: field \"temperature\": value \"kPa\": unit \"kPa\" is a pressure, not a temperature (want a temperature unit: degC, degF or K)",
		}},

	// Pump and targets.
	{name: "one pump point", files: map[string]string{"pump.csv": "flow [l/s],head [m]\n1,6\n"},
		cause: ErrMissing,
		want: []string{
			"pump.csv:1: pump curve has only one usable point (want at least three flow and head points, for the quadratic fit of the curve)",
		}},
	{name: "two pump points", files: map[string]string{"pump.csv": "flow [l/s],head [m]\n0,6\n2,4\n"},
		cause: ErrMissing,
		want: []string{
			"pump.csv:1: pump curve has only two usable points (want at least three flow and head points, for the quadratic fit of the curve)",
		}},
	{name: "pump flows not rising", files: map[string]string{"pump.csv": "flow [l/s],head [m]\n0,8\n2,7\n1.5,7.5\n3,6.5\n"},
		cause: ErrRange,
		want: []string{
			"pump.csv:4:1: field \"flow\": value \"1.5\": flows must rise down the curve (want a flow above line 3's)",
		}},
	{name: "pump head rising", files: map[string]string{"pump.csv": "flow [l/s],head [m]\n0,8\n1,8.2\n2,7\n"},
		cause: ErrRange,
		want: []string{
			"pump.csv:3:2: warning: field \"head\": value \"8.2\": head rises with flow (want a head at or below line 2's, unless the curve really droops)",
		}},
	{name: "pump head in kPa", files: map[string]string{"pump.csv": "flow [l/s],head [kPa]\n0,80\n2,70\n"},
		cause: ErrUnit,
		want: []string{
			"pump.csv:1:2: field \"head\": value \"kPa\": unit \"kPa\" is a pressure, not a head (want a head unit: m or ft of the pumped fluid; convert a pressure to head with the fluid's density)",
		}},
	{name: "several pumps", files: map[string]string{"site.csv": "pumps running,1\n", "pump.csv": twoPumps,
		"readings.csv": rdHead + rdBase + "after,A,flow,0.5,l/s,clamp-on\nafter,p2,total flow,0.4,l/s,clamp-on\nafter,P1,pump diff,60,kPa,gauge\nafter,P1,speed,0.9,,pump-display\n",
		"states.csv":   "state,pumps running\nafter,2\n"}},
	{name: "one pump's readings", files: map[string]string{"pump.csv": twoPumps,
		"readings.csv": rdHead + rdBase + "as-found,P1,flow,0.5,l/s,clamp-on\nas-found,P2,header diff,30,kPa,gauge\nas-found,P3,pump diff,30,kPa,gauge\n"},
		cause: ErrRange,
		want: []string{
			"readings.csv:3:2: field \"where\": value \"P1\": flow is not read here (want a branch id)",
			"readings.csv:4:2: field \"where\": value \"P2\": header diff is not read here (want a branch id (at its take-off) or header)",
			"readings.csv:5:2: field \"where\": value \"P3\": no branch has this id (want a branch id from the branches sheet, pump or header)",
		}},
	{name: "pump id reserved", files: map[string]string{"pump.csv": strings.ReplaceAll(twoPumps, "P2", "Header")},
		cause: ErrRange,
		want: []string{
			"pump.csv:5:1: field \"pump\": value \"Header\": pump and header are reserved names (want another pump id, e.g. P1)",
			"pump.csv:6:1: field \"pump\": value \"Header\": pump and header are reserved names (want another pump id, e.g. P1)",
			"pump.csv:7:1: field \"pump\": value \"Header\": pump and header are reserved names (want another pump id, e.g. P1)",
		}},
	{name: "pump ids on some rows only", files: map[string]string{"pump.csv": "pump,flow [l/s],head [m]\nP1,0,8\nP1,1,7\n,2,5\nP1,3,2\n"},
		cause: ErrMissing,
		want: []string{
			"pump.csv:4:1: field \"pump\": blank (want the id of the pump this point belongs to; other rows name their pump)",
		}},
	{name: "pump id after rows without one", files: map[string]string{"pump.csv": "pump,flow [l/s],head [m]\n,0,8\n,1,7\n,2,5\nP2,0,6\n"},
		cause: ErrMissing,
		want: []string{
			"pump.csv:5:1: field \"pump\": value \"P2\": a pump id where earlier rows have none (want an id on every row (several pumps), or on none (one pump))",
		}},
	{name: "second pump with two points", files: map[string]string{"pump.csv": "pump,flow [l/s],head [m]\nP1,0,8\nP1,1,7\nP1,2,5\nP2,0,6\nP2,1,5\n"},
		cause: ErrMissing,
		want: []string{
			"pump.csv:1: pump P2: pump curve has only two usable points (want at least three flow and head points, for the quadratic fit of the curve)",
		}},
	{name: "pump flows rise per pump, ids folded", files: map[string]string{"pump.csv": "pump,flow [l/s],head [m],speed\nP1,0,8,0.9\nP2,0,6,\nP1,1,7,0.8\nP2,1,5,\np1,2,5,\nP2,0.5,4,\nP1,2,5,\n"},
		cause: ErrMissing,
		want: []string{
			"pump.csv:1: pump P1: pump curve has only two usable points (want at least three flow and head points, for the quadratic fit of the curve)",
			"pump.csv:1: pump P2: pump curve has only two usable points (want at least three flow and head points, for the quadratic fit of the curve)",
			"pump.csv:4:4: field \"speed\": value \"0.8\": a second speed for this pump (want the speed given on line 2, 0.9, or blank)",
			"pump.csv:6:1: field \"pump\": value \"p1\": pump id differs from \"P1\" on line 2 only in letter case (want names that differ in more than letter case)",
			"pump.csv:7:2: field \"flow\": value \"0.5\": flows must rise down the curve (want a flow above line 5's)",
		}},
	{name: "pumps running beyond the pump sheet", files: map[string]string{"site.csv": "pumps running,3\npump arrangement,series\n", "pump.csv": twoPumps,
		"readings.csv": rdHead + rdBase + "after,A,flow,0.5,l/s,clamp-on\nmore,A,flow,0.5,l/s,clamp-on\n", "states.csv": "state,pumps running\nafter,1.5\nmore,1\n"},
		cause: ErrRange,
		want: []string{
			"site.csv:1:2: field \"pumps running\": value \"3\": more pumps than the pump sheet's 2 (want a count from 1 to 2)",
			"states.csv:2:2: field \"pumps running\": value \"1.5\": not a whole number of pumps (want a count such as 1 or 2)",
			"states.csv:3:2: field \"pumps running\": value \"1\": pumps in series all run (want 2, or pump arrangement parallel (a pump standing by in series still passes the flow))",
		}},
	{name: "own speed of the one pump", files: map[string]string{"pump.csv": "flow [l/s],head [m],speed [%],efficiency [%]\n0,8,90,\n1,7,,60\n2,5,,70\n"},
		cause: ErrRange,
		want: []string{
			"pump.csv:2:3: warning: field \"speed\": value \"0.9\": speed ignored: the one pump runs at the site's speed (want a speed key in the site sheet (or a speed per state); a pump's own speed is for one of several pumps)",
		}},
	{name: "three-port terminal", files: map[string]string{
		"branches.csv": "id,design flow [l/s],pipe bore [mm],pipe length [m],terminal drop [kPa],valve,setting,bypass valve,bypass setting\nA,0.5,21.6,10,20,V15,2,V15,1\nB,0.4,21.6,12,20,V15,3,V15,\n",
		"readings.csv": rdHead[:len(rdHead)-1] + ",position\n" + "as-found,A,flow,0.45,l/s,clamp-on,\nbypassed,A,flow,0.5,l/s,clamp-on,bypass\nbypassed,A,valve diff,9,kPa,manometer,Bypass\n"}},
	{name: "three-port mistakes", files: map[string]string{
		"branches.csv": "id,design flow [l/s],pipe bore [mm],pipe length [m],valve,setting,bypass valve,bypass setting\nA,0.5,21.6,10,V15,2,V51,1\nB,0.4,21.6,12,V15,3,,2\nC,0.4,21.6,12,V15,3,V15,9\n",
		"readings.csv": rdHead[:len(rdHead)-1] + ",position\n" + "as-found,B,flow,0.45,l/s,clamp-on,bypass\nas-found,C,flow,0.5,l/s,clamp-on,bypass\nas-found,C,valve diff,9,kPa,manometer,coil\nas-found,pump,pump diff,9,kPa,gauge,bypass\n"},
		cause: ErrReference,
		want: []string{
			"branches.csv:2:7: field \"bypass valve\": value \"V51\": valve model not defined (want a model defined in the valves sheet; did you mean \"V15\")",
			"branches.csv:3:8: field \"bypass setting\": value \"2\": a bypass setting without a bypass valve (want a bypass valve model, or no bypass setting)",
			"branches.csv:4:8: field \"bypass setting\": value \"9\": outside the range of valve \"V15\" (want a setting from 0.5 to 4 turns)",
			"readings.csv:2:7: field \"position\": value \"bypass\": no bypass here (want a branch with a bypass valve (branches sheet), or coil)",
			"readings.csv:4:7: field \"position\": value \"coil\": differs from the position on line 3 in the same state (want one position of the three-port valve per state (blank is coil); give each change its own state)",
			"readings.csv:5:7: field \"position\": value \"bypass\": no bypass here (want coil or blank: a position belongs to a branch's three-port valve)",
		}},
	{name: "pump named as a branch", files: map[string]string{"pump.csv": strings.ReplaceAll(twoPumps, "P2", "B")},
		cause: ErrDuplicate,
		want: []string{
			"pump.csv:5:1: field \"pump\": value \"B\": a branch has this id (want a pump id no branch uses, so readings can name it)",
		}},
	{name: "states sheet", files: map[string]string{"site.csv": "boundary,pump\n", "pump.csv": pumpCurve,
		"readings.csv": "state,where,quantity,value,unit,instrument\nas-found,A,flow,0.45,l/s,clamp-on\nafter,A,flow,0.4,l/s,clamp-on\n",
		"states.csv":   "state,speed [%],set point [kPa],note\nas-found,90,,\nAfter,80,50,\nafter,70,,\nmoved,85,,\n,80,,\nas-fond,95,,\n"},
		cause: ErrRange,
		want: []string{
			"states.csv:3:3: warning: field \"set point\": value \"50\": set point ignored with boundary pump (want boundary constant-differential)",
			"states.csv:4:1: field \"state\": value \"after\": state given twice (want one row per state; the first is on line 3)",
			"states.csv:5:1: field \"state\": value \"moved\": no reading is in this state (want a state label from the readings sheet: after, as-found)",
			"states.csv:6:1: field \"state\": blank (want a survey state label from the readings sheet)",
			"states.csv:7:1: field \"state\": value \"as-fond\": no reading is in this state (want a state label from the readings sheet: after, as-found; did you mean \"as-found\")",
		}},
	{name: "moves sheet", files: map[string]string{"branches.csv": brHead + "A,,0.5,21.6,10,V15,2\nB,,0.4,21.6,12,V15,3\nC,,0.3,21.6,8,,\n",
		"readings.csv": "state,where,quantity,value,unit,setting,instrument\nas-found,A,flow,0.45,l/s,,clamp-on\nafter,A,flow,0.4,l/s,2.5,clamp-on\n",
		"moves.csv":    "state,branch,setting,note\nafter,B,2.5,\nAfter,B,3,\nmoved,B,2,\nafter,D,2,\nafter,C,1,\nafter,A,3,\nafter,A,2.5,same as read\n,B,1,\nas-found,B,9,\n"},
		cause: ErrDuplicate,
		want: []string{
			`moves.csv:3:2: field "branch": value "B": moved twice in one state (want one setting per valve in a state; the first is on line 2)`,
			`moves.csv:4:1: field "state": value "moved": no reading is in this state (want a state label from the readings sheet: after, as-found)`,
			`moves.csv:5:2: field "branch": value "D": no branch has this id (want a branch id from the branches sheet)`,
			`moves.csv:6:2: field "branch": value "C": branch "C" has no valve (want a valve model for this branch in the branches sheet)`,
			`moves.csv:7:3: field "setting": value "3": differs from the setting 2.5 read in the same state (readings.csv:3) (want one setting per valve in a state; give each change its own state)`,
			`moves.csv:9:1: field "state": blank (want a survey state label from the readings sheet)`,
			`moves.csv:10:3: field "setting": value "9": outside the range of valve "V15" (want a setting from 0.5 to 4 turns)`,
		}},
	{name: "state speed above max", files: map[string]string{"site.csv": "boundary,pump\nmax speed,0.9\nspeed,0.8\n", "pump.csv": pumpCurve,
		"states.csv": "state,speed\nas-found,0.95\n"},
		cause: ErrRange,
		want: []string{
			"states.csv:2:2: field \"speed\": value \"0.95\": above max speed (want a speed up to the max speed, 0.9)",
		}},
	{name: "state speed with a set point boundary", files: map[string]string{"site.csv": "boundary,constant-differential\nset point [kPa],40\n", "pump.csv": pumpCurve,
		"states.csv": "state,speed,set point [kPa]\nas-found,0.9,35\n"},
		cause: ErrRange,
		want: []string{
			"states.csv:2:2: warning: field \"speed\": value \"0.9\": speed ignored with boundary constant-differential (want boundary pump; a drive holding a set point finds its own speed)",
		}},
	{name: "state set point out of range", files: map[string]string{"site.csv": "boundary,constant-differential\nset point [kPa],40\n",
		"states.csv": "state,set point [kPa],speed\nas-found,0,120\n"},
		cause: ErrRange,
		want: []string{
			"states.csv:2:2: field \"set point\": value \"0\": must be positive (want a pressure difference above 0)",
			"states.csv:2:3: field \"speed\": value \"120\": too large (want a ratio to nominal speed from 0.001 to 2; write \"speed [%]\" for a percentage)",
		}},
	{name: "states sheet without a state column", files: map[string]string{"states.csv": "label,speed\nas-found,0.9\n"},
		cause: ErrMissing,
		want: []string{
			"states.csv:1: field \"state\": column is missing (want a column named \"state\")",
			"states.csv:1:1: warning: field \"label\": unknown column, ignored (want one of: state, speed, set point, pumps running, note)",
		}},
	{name: "header legs without sizes", files: map[string]string{"site.csv": "header,reverse-return\n",
		"branches.csv": "id,design flow [l/s],pipe bore [mm],pipe length [m],supply length [m],return length [m],header standard,header bore [mm],return standard,return size,return bore [mm]\n" +
			"A,0.5,21.6,10,5,5,,40,,DN32,\n" + // a return size with no standard to look it up in
			"B,0.4,21.6,12,0,5,,,en10255-m,,\n" + // a return standard alone, and no header pipe
			"C,0.4,21.6,12,5,5,,,,,35\n" + // the supply leg has no pipe
			"D,0.4,21.6,12,5,5,en10255-m,40,,DN32,\n" + // return DN32 in the header's standard: fine
			"E,0.4,21.6,12,5,5,,40,,,35\n"}, // its own return bore: fine
		cause: ErrMissing,
		want: []string{
			"branches.csv:2:10: field \"return size\": value \"DN32\": return size given without a pipe standard (want a return or header standard to look the size up in, or a return bore)",
			"branches.csv:3:10: field \"return size\": return length given without the return leg's size (want a return size with a header or return standard, or a return bore)",
			"branches.csv:4: field \"header size\": header length given without the header's size (want a header standard and size, or a header bore)",
		}},
	{name: "header leg roughness out of range", files: map[string]string{"site.csv": "header,direct-return\n",
		"branches.csv": "id,design flow [l/s],pipe bore [mm],pipe length [m],supply length [m],return length [m],header bore [mm],header roughness [mm],return roughness [mm],supply k,return k\n" +
			"A,0.5,21.6,10,5,5,40,0.05,20,1,-1\nB,0.4,21.6,12,5,5,40,,,,\n"},
		cause: ErrRange,
		want: []string{
			"branches.csv:2:9: field \"return roughness\": value \"20\": too large (want a roughness up to 10 mm)",
			"branches.csv:2:11: field \"return k\": value \"-1\": must not be negative (want a loss coefficient of 0 or more)",
		}},
	{name: "target of zero", files: map[string]string{"targets.csv": "branch,target flow [l/s]\nA,0\nB,0.00001\n"},
		cause: ErrRange,
		want: []string{
			"targets.csv:2:2: field \"target flow\": value \"0\": must be positive (want a flow above 0)",
			"targets.csv:3:2: field \"target flow\": value \"0.00001\": too small (want a flow from 0.0001 l/s to 10000 l/s)",
		}},
	{name: "target for unknown branch", files: map[string]string{"targets.csv": "branch,target flow [l/s]\nA,0.5\nC,0.3\nA,0.45\n"},
		cause: ErrReference,
		want: []string{
			"targets.csv:3:1: field \"branch\": value \"C\": no branch has this id (want a branch id from the branches sheet)",
			"targets.csv:4:1: field \"branch\": value \"A\": target given twice (want one target per branch; the first is on line 2)",
		}},
}
