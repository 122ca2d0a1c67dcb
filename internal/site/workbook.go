package site

import (
	"archive/zip"
	"context"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	"github.com/xuri/excelize/v2"
)

// ReadWorkbook reads a site from an .xlsx workbook of size bytes, with one
// tab per sheet named as the CSV files are without ".csv" (site, branches,
// valves, pump, readings, states, targets; any case). name is used in messages,
// which read "name[tab]:row:column: ...". Results are as for ReadDir.
func ReadWorkbook(r io.ReaderAt, size int64, name string) (s *Site, probs Problems, err error) {
	return ReadWorkbookContext(context.Background(), r, size, name)
}

// ReadWorkbookContext is ReadWorkbook that stops, returning ctx's error,
// once ctx is done. A workbook is a zip archive; its parts are checked
// against MaxPartBytes and MaxUnpackedBytes from the archive's directory
// before anything is unpacked (the zip reader refuses a part that unpacks
// to more than its directory says).
func ReadWorkbookContext(ctx context.Context, r io.ReaderAt, size int64, name string) (s *Site, probs Problems, err error) {
	defer func() {
		// The workbook library is not hardened against every malformed
		// file; a panic there must not cross this package's boundary.
		if v := recover(); v != nil {
			probs = Problems{{File: name, Err: ErrSyntax, Msg: fmt.Sprintf("workbook cannot be read: %v", v), Want: "a workbook saved as .xlsx"}}
			s, err = nil, probs.Err()
		}
	}()
	if size > MaxWorkbookBytes {
		probs = Problems{{File: name, Err: ErrRange, Msg: "workbook is larger than " + mib(MaxWorkbookBytes), Want: "a workbook of at most " + mib(MaxWorkbookBytes)}}
		return nil, probs, probs.Err()
	}
	if p := checkParts(r, size, name); p != nil {
		probs = Problems{p}
		return nil, probs, probs.Err()
	}
	if err := ctx.Err(); err != nil {
		return nil, nil, err
	}
	f, ferr := excelize.OpenReader(io.NewSectionReader(r, 0, size), excelize.Options{UnzipSizeLimit: MaxUnpackedBytes, UnzipXMLSizeLimit: MaxPartBytes})
	if ferr != nil {
		probs = Problems{{File: name, Err: ErrSyntax, Msg: "not a readable .xlsx workbook", Want: "a workbook saved as .xlsx", Cause: ferr}}
		return nil, probs, probs.Err()
	}
	defer f.Close()
	base := name
	if i := strings.LastIndexAny(base, `/\`); i >= 0 {
		base = base[i+1:]
	}
	base = strings.TrimSuffix(base, ".xlsx")
	in := input{tables: map[string]*table{}, present: map[string]bool{}, src: Source{Path: name, Format: "xlsx"}, name: base,
		label: func(sheet string) string { return name + "[" + sheet + "]" }}
	tabs := map[string]string{}
	for _, tab := range f.GetSheetList() {
		key := strings.ToLower(strings.TrimSpace(tab))
		if prev, dup := tabs[key]; dup {
			in.probs.add(&Error{File: name + "[" + Printable(tab) + "]", Err: ErrDuplicate, Msg: fmt.Sprintf("a second tab for the sheet of tab %q", prev),
				Want: "one tab per sheet: remove or rename one of them"})
			continue
		}
		tabs[key] = tab
	}
	var known []string
	for _, sc := range sheets {
		known = append(known, sc.name)
		tab, ok := tabs[sc.name]
		if !ok {
			continue
		}
		delete(tabs, sc.name)
		if err := ctx.Err(); err != nil {
			return nil, nil, err
		}
		t, p, terr := readTab(f, tab, name+"["+tab+"]")
		if terr != nil {
			return nil, nil, fmt.Errorf("read workbook %s: %w", name, terr)
		}
		in.probs = append(in.probs, p...)
		in.present[sc.name] = true
		in.tables[sc.name] = t
	}
	for _, lower := range sortedKeys(tabs) {
		tab := tabs[lower]
		want := "one of: " + strings.Join(known, ", ")
		if sg := suggest(tab, known); sg != "" {
			want = fmt.Sprintf("%q", sg)
		}
		in.probs.add(&Error{File: name + "[" + tab + "]", Severity: SeverityWarning, Err: ErrUnknown, Msg: "unknown sheet, ignored", Want: want})
	}
	return in.finish(ctx)
}

// checkParts refuses a workbook whose parts unpack to more than the limits,
// or that is not a zip archive at all, from the archive's directory alone.
func checkParts(r io.ReaderAt, size int64, name string) *Error {
	zr, err := zip.NewReader(r, size)
	if err != nil {
		return &Error{File: name, Err: ErrSyntax, Msg: "not a readable .xlsx workbook", Want: "a workbook saved as .xlsx", Cause: err}
	}
	if len(zr.File) > maxParts {
		return &Error{File: name, Err: ErrRange, Msg: fmt.Sprintf("workbook has %d parts", len(zr.File)), Want: fmt.Sprintf("a workbook of at most %d parts", maxParts)}
	}
	var total uint64
	for _, zf := range zr.File {
		if zf.UncompressedSize64 > MaxPartBytes {
			return &Error{File: name + "[" + Printable(zf.Name) + "]", Err: ErrRange,
				Msg:  fmt.Sprintf("workbook part unpacks to %d MiB", zf.UncompressedSize64>>20),
				Want: "parts of at most " + mib(MaxPartBytes) + " unpacked"}
		}
		total += zf.UncompressedSize64
		if total > MaxUnpackedBytes {
			return &Error{File: name, Err: ErrRange, Msg: "workbook unpacks to more than " + mib(MaxUnpackedBytes),
				Want: "a workbook of at most " + mib(MaxUnpackedBytes) + " unpacked"}
		}
	}
	return nil
}

// readTab reads one tab into a table. A cell's shown text is used for text
// and its stored value for numbers, so number formats cannot round a
// value; a percentage-formatted cell keeps its percent.
func readTab(f *excelize.File, tab, file string) (*table, Problems, error) {
	shown, err := f.GetRows(tab)
	if err != nil {
		return nil, nil, err
	}
	raw, err := f.GetRows(tab, excelize.Options{RawCellValue: true})
	if err != nil {
		return nil, nil, err
	}
	var probs Problems
	at := func(col, row int) string { ref, _ := excelize.CoordinatesToCellName(col, row); return ref }
	// Merged cells hold one value shown across several: the others read
	// blank, which would be taken for values not given.
	merged, err := f.GetMergeCells(tab)
	if err != nil {
		return nil, nil, err
	}
	for _, mc := range merged {
		col, row, err := excelize.CellNameToCoordinates(mc.GetStartAxis())
		if err != nil {
			continue
		}
		probs = append(probs, &Error{File: file, Line: row, Column: col, Err: ErrSyntax,
			Msg: fmt.Sprintf("cells %s:%s are merged", mc.GetStartAxis(), mc.GetEndAxis()), Want: "one value in each cell: unmerge them"})
	}
	width := 0
	for _, cells := range shown {
		width = max(width, len(cells))
	}
	if dim, err := f.GetSheetDimension(tab); err == nil {
		if _, end, ok := strings.Cut(dim, ":"); ok {
			if col, _, err := excelize.CellNameToCoordinates(end); err == nil {
				width = max(width, min(col, 1024))
			}
		}
	}
	t := &table{file: file}
	for i, cells := range shown {
		rc := make([]string, len(cells))
		for j := range cells {
			cells[j] = strings.TrimSpace(cells[j])
			rc[j] = cells[j]
			if i < len(raw) && j < len(raw[i]) {
				rc[j] = strings.TrimSpace(raw[i][j])
			}
			if len(cells[j]) > MaxCellBytes {
				probs = append(probs, &Error{File: file, Line: i + 1, Column: j + 1, Err: ErrRange,
					Msg: fmt.Sprintf("cell is longer than %d characters", MaxCellBytes), Want: "a shorter cell"})
				cells[j], rc[j] = "", ""
				continue
			}
			if rc[j] == cells[j] {
				continue
			}
			if strings.HasSuffix(cells[j], "%") {
				if v, err := strconv.ParseFloat(rc[j], 64); err == nil && !math.IsInf(v, 0) && !math.IsNaN(v) {
					rc[j] = strconv.FormatFloat(v*100, 'g', 12, 64) + " %"
				}
				continue
			}
			// A cell that shows other than a number holds one only by the
			// spreadsheet's way of storing it: a true/false or a date is
			// read as what it shows, which no number column takes.
			if cellKind(f, tab, at(j+1, i+1)) != "" {
				rc[j] = cells[j]
			}
		}
		// A formula saved without its value (by a program that does not
		// calculate) shows blank: say so rather than read it as blank.
		for j := range width {
			if j < len(cells) && cells[j] != "" {
				continue
			}
			if fm, err := f.GetCellFormula(tab, at(j+1, i+1)); err == nil && fm != "" {
				probs = append(probs, &Error{File: file, Line: i + 1, Column: j + 1, Value: "=" + fm, Err: ErrMissing,
					Msg: "formula without a saved value", Want: "the workbook saved by a spreadsheet program that calculates it, or the value typed in"})
			}
		}
		if isComment(cells) || isBlank(cells) {
			continue
		}
		if t.header == nil {
			t.header, t.headerLine = cells, i+1
			continue
		}
		t.rows = append(t.rows, row{line: i + 1, cells: cells, raw: rc})
	}
	if t.header == nil {
		probs = append(probs, &Error{File: file, Err: ErrMissing, Msg: "sheet is empty", Want: "a header row naming the columns"})
		return nil, probs, nil
	}
	return t, probs, nil
}

// cellKind returns "a true/false cell" or "a date or time" for a cell
// whose stored number is not what it shows, and "" otherwise.
func cellKind(f *excelize.File, tab, ref string) string {
	if ct, err := f.GetCellType(tab, ref); err == nil && ct == excelize.CellTypeBool {
		return "a true/false cell"
	}
	idx, err := f.GetCellStyle(tab, ref)
	if err != nil {
		return ""
	}
	st, err := f.GetStyle(idx)
	if err != nil || st == nil {
		return ""
	}
	if st.CustomNumFmt != nil {
		if dateFormat(*st.CustomNumFmt) {
			return "a date or time"
		}
		return ""
	}
	switch n := st.NumFmt; {
	case n >= 14 && n <= 22, n >= 27 && n <= 36, n >= 45 && n <= 47, n >= 50 && n <= 58:
		return "a date or time"
	}
	return ""
}

// dateFormat reports whether a custom number format shows a date or a
// time: a y, m, d, h or s outside quoted text and bracketed sections.
func dateFormat(code string) bool {
	quoted, bracket := false, false
	for _, c := range strings.ToLower(code) {
		switch {
		case c == '"':
			quoted = !quoted
		case quoted:
		case c == '[':
			bracket = true
		case c == ']':
			bracket = false
		case bracket:
		case strings.ContainsRune("ymdhs", c):
			return true
		}
	}
	return false
}

// WriteWorkbook writes s as an .xlsx workbook with one tab per sheet.
func WriteWorkbook(s *Site, w io.Writer) error {
	if s == nil {
		return errNoSite
	}
	return writeWorkbook(siSheets.render(s), w)
}

// WriteTemplateWorkbook writes a blank site workbook: every tab with its
// header row and a comment row explaining each column.
func WriteTemplateWorkbook(w io.Writer) error {
	return writeWorkbook(template(), w)
}

func writeWorkbook(sheets []outSheet, w io.Writer) error {
	f := excelize.NewFile()
	defer f.Close()
	first := f.GetSheetName(0)
	for i, o := range sheets {
		if i == 0 {
			if err := f.SetSheetName(first, o.name); err != nil {
				return fmt.Errorf("write workbook: %w", err)
			}
		} else if _, err := f.NewSheet(o.name); err != nil {
			return fmt.Errorf("write workbook: %w", err)
		}
		rows := [][]any{}
		hdr := make([]any, len(o.header))
		for j, h := range o.header {
			hdr[j] = h
		}
		rows = append(rows, hdr)
		if o.help != nil {
			h := make([]any, len(o.help))
			for j, x := range o.help {
				h[j] = x
			}
			rows = append(rows, h)
		}
		rows = append(rows, o.rows...)
		for ri, r := range rows {
			for ci, v := range r {
				if v == nil {
					continue
				}
				if x, ok := v.(float64); ok && math.IsNaN(x) {
					continue
				}
				cell, err := excelize.CoordinatesToCellName(ci+1, ri+1)
				if err != nil {
					return fmt.Errorf("write workbook: %w", err)
				}
				if err := f.SetCellValue(o.name, cell, v); err != nil {
					return fmt.Errorf("write workbook %s %s: %w", o.name, cell, err)
				}
			}
		}
	}
	if err := f.Write(w); err != nil {
		return fmt.Errorf("write workbook: %w", err)
	}
	return nil
}
