package report

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"
)

// A large site's report (more than maxStaticBranches branches, or a table
// longer than maxStaticRows) keeps every branch findable without writing
// thousands of table rows and per-branch charts into the page: its long
// tables and the branch figures are stored once, in the JSON data block,
// as columns of short arrays, and assets/report.js shows them a page at a
// time with a search box, sorting and a flagged-only filter. The page
// itself (and so its printout) holds the first page of each, in an order
// that puts the flagged and worst branches first, and says which files
// hold the rest.
const (
	maxStaticBranches = 100
	maxStaticRows     = 200
	// pageRows is the rows a long table shows (and prints) at a time.
	pageRows = 40
	// fixRows is the fixes shown at a time: the first printed page must
	// still reach the pump step after them.
	fixRows = 5
)

// maxWarnings is the most warnings of one kind listed; the rest are counted.
const maxWarnings = 3

// large reports whether in gets the large-site form.
func large(in *Input) bool {
	if len(in.Branches) > maxStaticBranches {
		return true
	}
	for _, t := range []*Table{&in.Plan, &in.Diagnosis, &in.Readings, &in.Visit.Settings, &in.Visit.Remedied, &in.Visit.Prove} {
		if len(t.Rows) > maxStaticRows {
			return true
		}
	}
	return in.Trim != nil && (len(in.Trim.Branches) > maxStaticRows || len(in.Trim.Trims.Rows) > maxStaticRows)
}

// viewTable is a Table as the page writes it: all its rows, or, when
// Data >= 0, the first page of them with the whole table stored as data
// table number Data.
type viewTable struct {
	Table
	Data  int // index in the data block's tables, -1 when written whole
	Total int // rows in the whole table
}

// Paged reports whether the table is shown a page at a time.
func (v viewTable) Paged() bool { return v.Data >= 0 }

// warnGroup is the warnings of one kind: how many, and the first few.
type warnGroup struct {
	Kind  string
	Count int
	First []string
	More  int
}

// groupWarnings groups ws by kind, in order of each kind's first warning.
func groupWarnings(ws []Warning) []warnGroup {
	var out []warnGroup
	at := map[string]int{}
	for _, w := range ws {
		k, ok := at[w.Kind]
		if !ok {
			k = len(out)
			at[w.Kind] = k
			out = append(out, warnGroup{Kind: w.Kind})
		}
		g := &out[k]
		g.Count++
		if len(g.First) < maxWarnings {
			g.First = append(g.First, w.Text)
		} else {
			g.More++
		}
	}
	return out
}

// dataSet is what the JSON data block holds. Text is every distinct
// string the tables and the branch finder refer to by index; Charts are the
// chart options drawn at load.
type dataSet struct {
	Charts []chart     `json:"charts"`
	Text   []string    `json:"text,omitempty"`
	Finder *finderData `json:"finder,omitempty"`
	Tables []dataTable `json:"tables,omitempty"`
	Page   int         `json:"page,omitempty"`
}

// finderData holds one entry per branch in each array (the branch finder's
// columns); numbers are in display units or percent of design, null when
// not available; text fields are indices into dataSet.Text.
type finderData struct {
	ID     []int           `json:"id"`     // branch name
	Design json.RawMessage `json:"q"`      // design flow
	Before json.RawMessage `json:"f0"`     // flow as found, % of design
	After  json.RawMessage `json:"f1"`     // flow after the plan, % of design
	Low    json.RawMessage `json:"lo"`     // 95 % interval of After, % of design
	High   json.RawMessage `json:"hi"`     //
	Ratio  json.RawMessage `json:"r"`      // fitted ÷ design resistance
	RLow   json.RawMessage `json:"rl"`     // its 95 % interval
	RHigh  json.RawMessage `json:"rh"`     //
	Now    []int           `json:"sn"`     // valve setting now
	Set    []int           `json:"sp"`     // valve setting planned
	Flags  []int           `json:"fl"`     // flags, "" when none
	Charts []int           `json:"charts"` // branches with a chart, in chart order (fs-branch-1, -2, ...)
}

// dataTable is one long table stored by columns. Each column is either
// indices into dataSet.Text ("i") or its strings ("v") after a prefix
// common to all of them ("p").
type dataTable struct {
	Rows int          `json:"n"`
	Cols []dataColumn `json:"c"`
	// WriteIn is the number of blank write-in columns after the data.
	WriteIn int `json:"w,omitempty"`
	// Page is the rows shown at a time.
	Page int `json:"s"`
}

type dataColumn struct {
	Same   *int     `json:"k,omitempty"` // every row holds Text[*Same]
	Global []int    `json:"g,omitempty"` // row r holds Text[Global[r]]
	Dict   []string `json:"d,omitempty"` // row r holds Dict[Index[r]]
	Index  []int    `json:"i,omitempty"`
	Values []string `json:"v,omitempty"` // row r holds Prefix + Values[r]
	Prefix string   `json:"p,omitempty"`
	// Row r holds Prefix and Fixed[r] / 10^Decimals written with
	// Decimals decimals ("" where null): a column of numbers all written
	// alike.
	Fixed    json.RawMessage `json:"n,omitempty"`
	Decimals int             `json:"f,omitempty"`
}

// texts is the data block's string table.
type texts struct {
	list []string
	at   map[string]int
}

func (t *texts) index(s string) int {
	if t.at == nil {
		t.at = map[string]int{}
	}
	if k, ok := t.at[s]; ok {
		return k
	}
	t.list = append(t.list, s)
	t.at[s] = len(t.list) - 1
	return len(t.list) - 1
}

// column stores one table column the shortest of four ways: one value for
// all rows; indices into the string table when the values are already in
// it (branch names); a dictionary of its own, most frequent value first,
// when values repeat (valve models, settings, units); its strings after
// their common prefix otherwise.
func (t *texts) column(vals []string) dataColumn {
	freq := map[string]int{}
	known := 0
	for _, v := range vals {
		freq[v]++
		if _, ok := t.at[v]; ok {
			known++
		}
	}
	switch {
	case len(freq) == 1:
		k := t.index(vals[0])
		return dataColumn{Same: &k}
	case 10*known >= 9*len(vals):
		c := dataColumn{Global: make([]int, len(vals))}
		for i, v := range vals {
			c.Global[i] = t.index(v)
		}
		return c
	}
	fixed, ok := fixedColumn(vals)
	if ok && 2*len(freq) > len(vals) {
		return fixed
	}
	switch {
	case 2*len(freq) <= len(vals):
		c := dataColumn{Index: make([]int, len(vals))}
		for v := range freq {
			c.Dict = append(c.Dict, v)
		}
		sort.Slice(c.Dict, func(a, b int) bool {
			if fa, fb := freq[c.Dict[a]], freq[c.Dict[b]]; fa != fb {
				return fa > fb
			}
			return c.Dict[a] < c.Dict[b]
		})
		at := make(map[string]int, len(c.Dict))
		for k, v := range c.Dict {
			at[v] = k
		}
		for i, v := range vals {
			c.Index[i] = at[v]
		}
		if ok && len(fixed.Fixed) < dictSize(c) {
			return fixed
		}
		return c
	}
	p := commonPrefix(vals)
	c := dataColumn{Prefix: p, Values: make([]string, len(vals))}
	for i, v := range vals {
		c.Values[i] = v[len(p):]
	}
	if p != "" {
		// "readings.csv:12", "readings.csv:13", ...
		if f, ok := fixedColumn(c.Values); ok && !slices.Contains(c.Values, "") {
			f.Prefix = p
			return f
		}
	}
	return c
}

// dictSize is about the length of c, a dictionary column, in JSON.
func dictSize(c dataColumn) int {
	n := 0
	for _, v := range c.Dict {
		n += len(v) + 3
	}
	for _, k := range c.Index {
		n += len(strconv.Itoa(k)) + 1
	}
	return n
}

// fixedColumn stores vals as integers with a common number of decimals,
// when every value is a number written so ("12.50", "-0.30", "7") or
// empty, and each is written back exactly from its integer: by
// strconv.FormatFloat(n/10^d, 'f', d), which rounds as JavaScript's
// toFixed does.
func fixedColumn(vals []string) (dataColumn, bool) {
	d := -1
	for _, v := range vals {
		if v == "" {
			continue
		}
		k := 0
		if i := strings.IndexByte(v, '.'); i >= 0 {
			k = len(v) - i - 1
		}
		if d >= 0 && k != d {
			return dataColumn{}, false
		}
		d = k
	}
	if d < 0 || d > 6 {
		return dataColumn{}, false
	}
	scale := math.Pow(10, float64(d))
	var b bytes.Buffer
	b.WriteByte('[')
	for i, v := range vals {
		if i > 0 {
			b.WriteByte(',')
		}
		if v == "" {
			b.WriteString("null")
			continue
		}
		n, err := strconv.ParseInt(strings.Replace(v, ".", "", 1), 10, 64)
		if err != nil || n > 1<<50 || n < -(1<<50) || strconv.FormatFloat(float64(n)/scale, 'f', d, 64) != v {
			return dataColumn{}, false
		}
		b.WriteString(strconv.FormatInt(n, 10))
	}
	b.WriteByte(']')
	return dataColumn{Fixed: b.Bytes(), Decimals: d}, true
}

// commonPrefix is the longest prefix of every string in ss that ends on a
// character boundary.
func commonPrefix(ss []string) string {
	if len(ss) == 0 {
		return ""
	}
	p := ss[0]
	for _, s := range ss[1:] {
		n := 0
		for n < len(p) && n < len(s) && p[n] == s[n] {
			n++
		}
		p = p[:n]
		if p == "" {
			return ""
		}
	}
	// Back off to the start of a UTF-8 sequence.
	for len(p) > 0 && p[len(p)-1]&0xC0 == 0x80 {
		p = p[:len(p)-1]
	}
	if len(p) > 0 && p[len(p)-1] >= 0xC0 {
		p = p[:len(p)-1]
	}
	return p
}

// addTable stores t's rows (cleaned) in d when it has more than page, and
// returns its view: the first page of rows and the data table's index.
func (d *dataSet) addTable(t Table, page int, tx *texts) viewTable {
	v := viewTable{Table: t, Data: -1, Total: len(t.Rows)}
	if len(t.Rows) <= page {
		return v
	}
	dt := dataTable{Rows: len(t.Rows), WriteIn: len(t.WriteIn), Page: page}
	ncol := len(t.Columns)
	if ncol == 0 && len(t.Rows) > 0 {
		ncol = len(t.Rows[0])
	}
	vals := make([]string, len(t.Rows))
	for c := range ncol {
		for r, row := range t.Rows {
			vals[r] = ""
			if c < len(row) {
				vals[r] = Clean(row[c])
			}
		}
		dt.Cols = append(dt.Cols, tx.column(vals))
	}
	d.Tables = append(d.Tables, dt)
	v.Data = len(d.Tables) - 1
	v.Rows = t.Rows[:page]
	return v
}

// numbers writes vs as a JSON array of numbers rounded to digits
// significant digits, null for NaN.
func numbers(vs []float64, digits int) json.RawMessage {
	var b bytes.Buffer
	b.Grow(8 * len(vs))
	b.WriteByte('[')
	for i, v := range vs {
		if i > 0 {
			b.WriteByte(',')
		}
		if !finite(v) {
			b.WriteString("null")
			continue
		}
		r, err := strconv.ParseFloat(strconv.FormatFloat(v, 'g', digits, 64), 64)
		if err != nil {
			r = v
		}
		b.WriteString(strconv.FormatFloat(r, 'f', -1, 64))
	}
	b.WriteByte(']')
	return b.Bytes()
}

// finder builds the branch finder's data: every branch once.
func finder(bs []Branch, charted []int, tx *texts) *finderData {
	n := len(bs)
	f := &finderData{ID: make([]int, n), Now: make([]int, n), Set: make([]int, n), Flags: make([]int, n), Charts: charted}
	q, f0, f1, lo, hi := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
	r, rl, rh := make([]float64, n), make([]float64, n), make([]float64, n)
	for i := range bs {
		b := &bs[i]
		f.ID[i] = tx.index(Clean(b.ID))
	}
	for i := range bs {
		b := &bs[i]
		q[i] = b.Design
		f0[i], f1[i] = pct(b.Before, b.Design), pct(b.After, b.Design)
		lo[i], hi[i] = pct(b.AfterLow, b.Design), pct(b.AfterHigh, b.Design)
		r[i], rl[i], rh[i] = b.RatioFit, b.RatioLow, b.RatioHigh
		f.Now[i] = tx.index(Clean(b.SettingNow))
		f.Set[i] = tx.index(Clean(b.SettingPlanned))
		f.Flags[i] = tx.index(Clean(strings.Join(b.Flags, "; ")))
	}
	f.Design = numbers(q, 4)
	f.Before, f.After, f.Low, f.High = numbers(f0, 4), numbers(f1, 4), numbers(lo, 4), numbers(hi, 4)
	f.Ratio, f.RLow, f.RHigh = numbers(r, 3), numbers(rl, 3), numbers(rh, 3)
	if f.Charts == nil {
		f.Charts = []int{}
	}
	return f
}

// flagged counts the branches with a flag.
func flagged(bs []Branch) int {
	n := 0
	for i := range bs {
		if len(bs[i].Flags) > 0 {
			n++
		}
	}
	return n
}

// thousands writes n with thousands separators ("10,000").
func thousands(n int) string {
	s := strconv.Itoa(n)
	if n < 0 {
		return "-" + thousands(-n)
	}
	for i := len(s) - 3; i > 0; i -= 3 {
		s = s[:i] + "," + s[i:]
	}
	return s
}

// pagedNote says what a long table shows and where the rest is.
func pagedNote(v viewTable) string {
	s := fmt.Sprintf("The first %d of %s rows; on screen, search, sort (click a heading) and page through them all.", len(v.Rows), thousands(v.Total))
	if v.File != "" {
		s += " The whole table is in " + v.File + " beside this report."
	}
	return s
}
