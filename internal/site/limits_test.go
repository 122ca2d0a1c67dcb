package site

import (
	"archive/zip"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"testing/fstest"

	"github.com/xuri/excelize/v2"
)

// TestReadDirFileKinds gives sheets that are not regular files: each must
// be refused by name, without reading it (a pipe blocks for ever, a device
// reads without end), and the other sheets still checked in the same pass.
func TestReadDirFileKinds(t *testing.T) {
	for _, c := range []struct {
		name string
		file *fstest.MapFile
		want string
	}{
		{"named pipe", &fstest.MapFile{Mode: fs.ModeNamedPipe}, "readings.csv: is a named pipe, not a sheet, so it is not read (want a CSV file)"},
		{"device", &fstest.MapFile{Mode: fs.ModeDevice | fs.ModeCharDevice}, "readings.csv: is a device, not a sheet, so it is not read (want a CSV file)"},
		{"socket", &fstest.MapFile{Mode: fs.ModeSocket}, "readings.csv: is a socket, not a sheet, so it is not read (want a CSV file)"},
		{"folder", &fstest.MapFile{Mode: fs.ModeDir}, "readings.csv: is a folder, not a sheet (want a CSV file)"},
	} {
		t.Run(c.name, func(t *testing.T) {
			fsys := mapFS(map[string]string{"readings.csv": del, "branches.csv": brHead + "A,,lots,21.6,10,V15,2\n"})
			fsys["readings.csv"] = c.file
			_, p, err := ReadDir(fsys, ".")
			got := problemStrings(p)
			want := []string{`branches.csv:2:3: field "design flow": value "lots": not a number (want a number such as 1.5)`, c.want}
			if strings.Join(got, "\n") != strings.Join(want, "\n") {
				t.Errorf("ReadDir problems:\n%s\nwant:\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
			}
			if err == nil {
				t.Error("ReadDir: no error")
			}
		})
	}
}

// TestLoadLimits gives Load sheets and workbooks beyond the stated limits:
// each must be refused with the file and the limit named, quickly (the
// files are sparse or compress well, so the test itself stays small).
func TestLoadLimits(t *testing.T) {
	dir := t.TempDir()
	site := filepath.Join(dir, "big")
	if err := os.Mkdir(site, 0o755); err != nil {
		t.Fatal(err)
	}
	for n, text := range base {
		if err := os.WriteFile(filepath.Join(site, n), []byte(text), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	if err := os.Truncate(filepath.Join(site, "readings.csv"), MaxSheetBytes+1); err != nil {
		t.Fatal(err)
	}
	_, p, err := Load(context.Background(), site)
	if want := filepath.Join(site, "readings.csv") + ": file is larger than 64 MiB (want a sheet of at most 64 MiB; split the survey into several sites)"; err == nil || len(p) != 1 || p[0].Error() != want {
		t.Errorf("Load(a 64 MiB sheet): %v\n%v\nwant %s", err, p, want)
	}

	bomb := func(part string, size int) []byte {
		var b bytes.Buffer
		zw := zip.NewWriter(&b)
		w, err := zw.Create(part)
		if err != nil {
			t.Fatal(err)
		}
		chunk := make([]byte, 1<<20)
		for range size >> 20 {
			w.Write(chunk)
		}
		if err := zw.Close(); err != nil {
			t.Fatal(err)
		}
		return b.Bytes()
	}
	for _, c := range []struct {
		name string
		data []byte
		want string
	}{
		{"one part too large", bomb("xl/worksheets/sheet1.xml", MaxPartBytes+(1<<20)), "[xl/worksheets/sheet1.xml]: workbook part unpacks to 17 MiB (want parts of at most 16 MiB unpacked)"},
		{"not a zip", []byte("just text"), ": not a readable .xlsx workbook (want a workbook saved as .xlsx)"},
	} {
		t.Run(c.name, func(t *testing.T) {
			book := filepath.Join(dir, "book.xlsx")
			if err := os.WriteFile(book, c.data, 0o644); err != nil {
				t.Fatal(err)
			}
			_, p, err := Load(context.Background(), book)
			if err == nil || len(p) != 1 || p[0].Error() != book+c.want {
				t.Errorf("Load(%s): %v\n%v\nwant %s", c.name, err, p, book+c.want)
			}
		})
	}
	// Many parts, each within its limit, adding up beyond the total.
	var b bytes.Buffer
	zw := zip.NewWriter(&b)
	chunk := make([]byte, 1<<20)
	for i := range 4 {
		w, _ := zw.Create(fmt.Sprintf("xl/media/image%d.bin", i))
		for range 15 {
			w.Write(chunk)
		}
	}
	zw.Close()
	_, p, err = ReadWorkbook(bytes.NewReader(b.Bytes()), int64(b.Len()), "many.xlsx")
	if want := "many.xlsx: workbook unpacks to more than 48 MiB (want a workbook of at most 48 MiB unpacked)"; err == nil || len(p) != 1 || p[0].Error() != want {
		t.Errorf("ReadWorkbook(60 MiB in 4 parts): %v\n%v\nwant %s", err, p, want)
	}
}

// TestLoadCancelled checks that Load stops with the context's error.
func TestLoadCancelled(t *testing.T) {
	dir := t.TempDir()
	for n, text := range base {
		if err := os.WriteFile(filepath.Join(dir, n), []byte(text), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, _, err := Load(ctx, dir); !errors.Is(err, context.Canceled) {
		t.Errorf("Load with a cancelled context: %v, want context.Canceled", err)
	}
}

// TestCheckAgreementLarge gives one flow read many times, in agreement but
// for one reading: the warnings are those of comparing every pair, wherever
// it stands, also in groups beyond those compared pair by pair.
func TestCheckAgreementLarge(t *testing.T) {
	for _, c := range []struct {
		name     string
		n, wrong int
	}{
		{"small group, wrong one last", 5, 4},
		{"large group, wrong one first", 1000, 0},
		{"large group, wrong one in the middle", 1000, 500},
		{"large group, wrong one last", 1000, 999},
	} {
		t.Run(c.name, func(t *testing.T) {
			rs := make([]Reading, c.n)
			for i := range rs {
				rs[i] = Reading{State: "s", Where: "A", What: Flow, Value: 1e-3 * (1 + 1e-4*float64(i%7)), Sigma: 1e-5, Setting: math.NaN(), Pos: Pos{File: "readings.csv", Line: i + 2}}
			}
			rs[c.wrong].Value = 2e-3
			var p Problems
			checkAgreement(rs, &p)
			// As pair by pair: the wrong reading disagrees with those
			// before it, and each later one with the wrong one.
			want, first := c.n-c.wrong, c.wrong+2
			if c.wrong == 0 {
				want, first = c.n-1, 3
			}
			if len(p) != want || p[0].Line != first {
				t.Errorf("%d warnings, the first on line %d; want %d from line %d", len(p), p[0].Line, want, first)
			}
		})
	}
}

// BenchmarkCheckAgreement measures the check on one flow read n times
// (once quadratic: 100,000 readings took 29 s).
func BenchmarkCheckAgreement(b *testing.B) {
	for _, n := range []int{10_000, 100_000, 1_000_000} {
		b.Run(fmt.Sprint(n), func(b *testing.B) {
			rs := make([]Reading, n)
			for i := range rs {
				rs[i] = Reading{State: "s", Where: "A", What: Flow, Value: 1e-3, Sigma: 1e-5, Setting: math.NaN()}
			}
			b.ReportAllocs()
			for b.Loop() {
				var p Problems
				checkAgreement(rs, &p)
			}
		})
	}
}

// TestWorkbookCells gives workbooks whose cells show other than they hold:
// merged cells, a formula saved without its value, a true/false and a date
// in number columns. Each must be reported at its cell.
func TestWorkbookCells(t *testing.T) {
	for _, c := range []struct {
		name string
		edit func(f *excelize.File)
		want string
	}{
		{"merged cells", func(f *excelize.File) { f.MergeCell("branches", "B3", "C3") },
			"w.xlsx[branches]:3:2: cells B3:C3 are merged (want one value in each cell: unmerge them)"},
		{"formula without a saved value", func(f *excelize.File) { f.SetCellFormula("branches", "H2", "A3") },
			`w.xlsx[branches]:2:8: value "=A3": formula without a saved value (want the workbook saved by a spreadsheet program that calculates it, or the value typed in)`},
		{"true/false in a number column", func(f *excelize.File) { f.SetCellBool("branches", "C2", true) },
			`w.xlsx[branches]:2:3: field "design flow": value "TRUE": not a number (want a number such as 1.5)`},
		{"date in a number column", func(f *excelize.File) {
			f.SetCellValue("branches", "C2", 45000.0)
			st, _ := f.NewStyle(&excelize.Style{NumFmt: 14})
			f.SetCellStyle("branches", "C2", "C2", st)
		}, `w.xlsx[branches]:2:3: field "design flow": value "03-15-23": not a number (want a number such as 1.5)`},
		{"custom date format in a number column", func(f *excelize.File) {
			f.SetCellValue("branches", "C2", 45000.0)
			code := `dd"."mm"."yyyy`
			st, _ := f.NewStyle(&excelize.Style{CustomNumFmt: &code})
			f.SetCellStyle("branches", "C2", "C2", st)
		}, `w.xlsx[branches]:2:3: field "design flow": value "15.03.2023": not a number (want a number such as 1.5)`},
	} {
		t.Run(c.name, func(t *testing.T) {
			s, _, err := ReadDir(mapFS(nil), ".")
			if err != nil {
				t.Fatal(err)
			}
			var buf bytes.Buffer
			if err := WriteWorkbook(s, &buf); err != nil {
				t.Fatal(err)
			}
			f, err := excelize.OpenReader(&buf)
			if err != nil {
				t.Fatal(err)
			}
			c.edit(f)
			buf.Reset()
			if err := f.Write(&buf); err != nil {
				t.Fatal(err)
			}
			_, p, _ := ReadWorkbook(bytes.NewReader(buf.Bytes()), int64(buf.Len()), "w.xlsx")
			got := strings.Join(problemStrings(p), "\n")
			if !strings.Contains(got, c.want) {
				t.Errorf("ReadWorkbook problems:\n%s\nwant among them:\n%s", got, c.want)
			}
		})
	}
}

// TestNotesMadeSafe gives a note with a line break, a terminal escape and
// a right-to-left override: the note is kept, with each of them a space.
func TestNotesMadeSafe(t *testing.T) {
	fsys := mapFS(map[string]string{"branches.csv": "id,design flow [l/s],pipe bore [mm],pipe length [m],note\nA,0.5,21.6,10,\"east\nlow \x1b[31mend\u202e\"\nB,0.4,21.6,12,\n"})
	s, p, err := ReadDir(fsys, ".")
	if err != nil {
		t.Fatalf("ReadDir: %v\n%v", err, p)
	}
	if got, want := s.Branches[0].Note, "east low  [31mend "; got != want {
		t.Errorf("note %q, want %q", got, want)
	}
}
