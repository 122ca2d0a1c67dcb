package cli

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"unicode/utf16"

	"github.com/xuri/excelize/v2"

	"flowset/internal/calibrate"
	"flowset/internal/diagnose"
	"flowset/internal/site"
)

// num is a float that encodes NaN and infinities as JSON null, so outputs
// never carry values other programs cannot parse.
type num float64

func (n num) MarshalJSON() ([]byte, error) {
	f := float64(n)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, f, 'g', 10, 64), nil
}

// cell neutralises a text cell a spreadsheet would run as a formula (OWASP
// "CSV Injection": a leading = + - @ tab or carriage return). A cell that is
// a plain number is left alone, so negative values stay numbers.
func cell(s string) string {
	if s == "" {
		return s
	}
	if _, err := strconv.ParseFloat(s, 64); err == nil {
		return s
	}
	return safeCell(s)
}

func writeCSV(w io.Writer, header []string, rows [][]string) error {
	cw := csv.NewWriter(w)
	clean := func(r []string) []string {
		out := make([]string, len(r))
		for i, c := range r {
			out[i] = cell(c)
		}
		return out
	}
	if err := cw.Write(clean(header)); err != nil {
		return err
	}
	for _, r := range rows {
		if err := cw.Write(clean(r)); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}

// writeWorkbook writes a field sheet workbook: the plan on the first tab and
// the headline lines and cautions on a second. Numbers go in as numbers,
// user text as (neutralised) text cells, never as formulas.
func writeWorkbook(w io.Writer, header []string, rows [][]string, about []string) error {
	f := excelize.NewFile()
	defer f.Close()
	const sheet = "field sheet"
	if err := f.SetSheetName("Sheet1", sheet); err != nil {
		return err
	}
	put := func(sh string, col, row int, v string) error {
		ref, err := excelize.CoordinatesToCellName(col, row)
		if err != nil {
			return err
		}
		if x, err := strconv.ParseFloat(v, 64); err == nil && !math.IsNaN(x) && !math.IsInf(x, 0) {
			return f.SetCellValue(sh, ref, x)
		}
		text := cell(v)
		// The workbook library cuts a longer text short without a word;
		// the site's limits keep every cell below it, so this is a bug.
		if n := len(utf16.Encode([]rune(text))); n > excelize.TotalCellChars {
			return fmt.Errorf("%s %s: text of %d characters does not fit a workbook cell", sh, ref, n)
		}
		return f.SetCellStr(sh, ref, text)
	}
	for c, h := range header {
		if err := put(sheet, c+1, 1, h); err != nil {
			return err
		}
	}
	for r, row := range rows {
		for c, v := range row {
			if err := put(sheet, c+1, r+2, v); err != nil {
				return err
			}
		}
	}
	if _, err := f.NewSheet("about"); err != nil {
		return err
	}
	for r, line := range about {
		if err := put("about", 1, r+1, line); err != nil {
			return err
		}
	}
	_, err := f.WriteTo(w)
	return err
}

// controllerFitJSON is the set point a differential controller held as
// found, fitted.
type controllerFitJSON struct {
	ID         string `json:"riser"`
	Recorded   num    `json:"recorded_set_point_pa"`
	Held       num    `json:"held_set_point_pa"`
	Lo95       num    `json:"held_lo95_pa"`
	Hi95       num    `json:"held_hi95_pa"`
	LogSD      num    `json:"held_log_sd"`
	Determined bool   `json:"determined"`
}

// calibrationJSON is the calibrated model as written to calibration.json.
type calibrationJSON struct {
	Site             string              `json:"site"`
	Generated        string              `json:"generated"`
	Status           string              `json:"status"`
	Converged        bool                `json:"converged"`
	Iterations       int                 `json:"iterations"`
	ChiSquare        num                 `json:"chi_square"`
	ReducedChiSquare num                 `json:"reduced_chi_square"`
	DOF              int                 `json:"degrees_of_freedom"`
	Header           paramJSON           `json:"header_multiplier"`
	Pump             paramJSON           `json:"pump_head_multiplier"`
	Branches         []branchFitJSON     `json:"branches"`
	Controllers      []controllerFitJSON `json:"differential_controllers,omitempty"`
	Readings         []readingFitJSON    `json:"readings"`
	Findings         []findingJSON       `json:"findings"`
	Notes            []string            `json:"notes"`
	States           []string            `json:"states"`
	Units            map[string]string   `json:"units"`
}

type paramJSON struct {
	Fitted     bool `json:"fitted"`
	Ratio      num  `json:"ratio"`
	Lo95       num  `json:"lo95"`
	Hi95       num  `json:"hi95"`
	Determined bool `json:"determined"`
}

type branchFitJSON struct {
	ID          string `json:"branch"`
	Fitted      bool   `json:"fitted"`
	Ratio       num    `json:"resistance_ratio"`
	Lo95        num    `json:"ratio_lo95"`
	Hi95        num    `json:"ratio_hi95"`
	SDLn        num    `json:"sd_ln_ratio"`
	Determined  bool   `json:"determined"`
	KvFitted    bool   `json:"kv_fitted"`
	KvScale     num    `json:"kv_scale"`
	KvLo95      num    `json:"kv_scale_lo95"`
	KvHi95      num    `json:"kv_scale_hi95"`
	Valve       string `json:"valve_hypothesis"`
	Flags       string `json:"flags"`
	FlowAsFound num    `json:"fitted_flow_as_found_l_s"`
	// MeterOff is, for a valve found set elsewhere on one flow reading
	// that a meter reading off would explain as well, that explanation;
	// absent where it was not weighed.
	MeterOff *meterOffJSON `json:"flow_meter_off,omitempty"`
}

// meterOffJSON is the other explanation of a valve found set elsewhere: the
// valve on its table and its flow reading off (calibrate.ValveVerdict's
// MeterWeight and MeterRatio).
type meterOffJSON struct {
	Probability num `json:"probability"`
	Ratio       num `json:"resistance_ratio_if_so"`
}

type readingFitJSON struct {
	Where      string `json:"source"`
	State      string `json:"state"`
	At         string `json:"at"`
	Quantity   string `json:"quantity"`
	Value      num    `json:"value_si"`
	Predicted  num    `json:"predicted_si"`
	Residual   num    `json:"residual_si"`
	Normalised num    `json:"normalised_residual"`
	// Sigma is the sd the fit weighed the reading at (absent where it was
	// not fitted in its own quantity), ModelSD the header model's part.
	Sigma    num  `json:"sigma_si,omitempty"`
	ModelSD  num  `json:"header_model_sd_si,omitempty"`
	Outlier  bool `json:"outlier"`
	Boundary bool `json:"boundary"`
}

type findingJSON struct {
	Code       string `json:"code"`
	Severity   string `json:"severity"`
	Branch     string `json:"branch,omitempty"`
	Reading    string `json:"reading,omitempty"`
	Message    string `json:"message"`
	Evidence   string `json:"evidence"`
	Confidence num    `json:"confidence"`
	Action     string `json:"action"`
}

func findingsJSON(fs []diagnose.Finding) []findingJSON {
	out := make([]findingJSON, len(fs))
	for i, f := range fs {
		out[i] = findingJSON{f.Code.String(), f.Severity.String(), f.Branch, f.Reading, f.Message, f.Evidence, num(f.Confidence), f.Action}
	}
	return out
}

// flagsOf is the codes of branch id's findings (not those on a reading),
// space-separated; "" when it has none.
func (j *job) flagsOf(id string) string {
	if j.flags == nil {
		j.flags = map[string]string{}
		for _, f := range j.Findings {
			if f.Reading == "" {
				if s := j.flags[f.Branch]; s != "" {
					j.flags[f.Branch] = s + " " + f.Code.String()
				} else {
					j.flags[f.Branch] = f.Code.String()
				}
			}
		}
	}
	return j.flags[id]
}

func paramOut(p calibrate.ParamFit) paramJSON {
	return paramJSON{p.Fitted, num(p.Ratio), num(p.Lo), num(p.Hi), p.Determined}
}

func (j *job) calibrationOut(generated string) calibrationJSON {
	c := j.Cal
	out := calibrationJSON{Site: j.L.Site.Name, Generated: generated, Findings: findingsJSON(j.Findings),
		Units: map[string]string{"flow": "m3/s", "differential": "Pa", "ratios": "fitted over design"}}
	out.Notes = append(out.Notes, "Ratios multiply the design resistance of each branch's fixed parts (pipe, fittings, terminal, control valve); kv_scale multiplies the balancing valve's tabulated Kv.")
	if c == nil {
		out.Status = "not calibrated: the site has no readings"
		return out
	}
	out.Status, out.Converged, out.Iterations = c.Status.String(), c.Converged, c.Iterations
	out.ChiSquare, out.ReducedChiSquare, out.DOF = num(c.ChiSquare), num(c.ReducedChiSquare), c.DOF
	if c.DOF <= 0 {
		out.ReducedChiSquare = num(nan()) // undefined without degrees of freedom
	}
	if w := fitWarning(c); w != "" {
		out.Notes = append(out.Notes, w)
	}
	out.Header, out.Pump, out.States = paramOut(c.Header), paramOut(c.Pump), c.States
	for _, cf := range c.Controllers {
		out.Controllers = append(out.Controllers, controllerFitJSON{ID: cf.ID, Recorded: num(cf.Recorded), Held: num(cf.Held), Lo95: num(cf.Lo),
			Hi95: num(cf.Hi), LogSD: num(cf.LogSD), Determined: cf.Determined})
	}
	for i, b := range c.Branches {
		out.Branches = append(out.Branches, branchFitJSON{ID: b.ID, Fitted: b.Fitted, Ratio: num(b.Ratio), Lo95: num(b.Lo), Hi95: num(b.Hi),
			SDLn: num(b.SD), Determined: b.Determined, KvFitted: b.KvFitted, KvScale: num(b.KvScale), KvLo95: num(b.KvLo), KvHi95: num(b.KvHi),
			Valve: valveWord(b.Valve), Flags: j.flagsOf(b.ID), FlowAsFound: num(j.Before.Flow(i) * 1000)})
		if b.Held {
			out.Branches[len(out.Branches)-1].Valve = heldWord(&c.Branches[i])
		}
		if v := b.Valve; v.MeterWeight > 0 {
			out.Branches[len(out.Branches)-1].MeterOff = &meterOffJSON{Probability: num(v.MeterWeight), Ratio: num(v.MeterRatio)}
		}
	}
	for _, r := range c.Readings {
		sr := j.L.Site.Readings[r.Index]
		out.Readings = append(out.Readings, readingFitJSON{Where: r.Pos.String(), State: sr.State, At: sr.Where, Quantity: sr.What.String(),
			Value: num(r.Value), Predicted: num(r.Predicted), Residual: num(r.Residual), Normalised: num(r.Normalised), Sigma: num(r.Sigma), ModelSD: num(r.ModelSD), Outlier: r.Outlier, Boundary: r.Boundary})
	}
	return out
}

// fitRows is the branch table of the fit, for CSV and the terminal.
func (j *job) fitRows() ([]string, [][]string) {
	header := []string{"branch", "resistance ratio", "95% low", "95% high", "determined", "valve", "kv scale", "flow as found [l/s]", "flow as found from", "design [l/s]", "flags"}
	var rows [][]string
	for i, b := range j.L.Model.Branches {
		// The reading where there is one; the model's value, marked as
		// such, where the survey read no flow on the branch.
		found, from := j.Before.Flow(i), "model"
		if q, ok := j.flowRead(b.ID); ok {
			found, from = q, "reading"
		}
		r := []string{b.ID, "", "", "", "", "", "", f3(found * 1000), from, f3(b.Design * 1000), j.flagsOf(b.ID)}
		if j.Cal != nil {
			bf := j.Cal.Branches[i]
			if bf.Fitted {
				r[1], r[2], r[3] = f2(bf.Ratio), f2(bf.Lo), f2(bf.Hi)
				r[4] = yesNo(bf.Determined)
			}
			if b.Valve != nil {
				r[5] = valveWord(bf.Valve)
			}
			if bf.Held {
				r[5] = heldWord(&bf)
			}
			if bf.KvFitted {
				r[6] = f2(bf.KvScale)
			}
		}
		rows = append(rows, r)
	}
	return header, rows
}

func (j *job) findingRows() ([]string, [][]string) {
	header := []string{"severity", "finding", "branch", "reading", "what", "evidence", "confidence", "action"}
	var rows [][]string
	for _, f := range j.Findings {
		conf := ""
		if !math.IsNaN(f.Confidence) && f.Confidence > 0 {
			conf = fmt.Sprintf("%.0f %%", 100*f.Confidence)
		}
		rows = append(rows, []string{f.Severity.String(), f.Code.String(), f.Branch, f.Reading, f.Message, f.Evidence, conf, f.Action})
	}
	return header, rows
}

func (j *job) readingRows() ([]string, [][]string) {
	header := []string{"source", "state", "at", "quantity", "instrument", "value", "model", "unit", "normalised residual", "note"}
	var rows [][]string
	if j.Cal == nil {
		return header, rows
	}
	for _, r := range j.Cal.Readings {
		sr := j.L.Site.Readings[r.Index]
		scale, unit := 1e-3, "kPa"
		switch {
		case sr.What.IsFlow():
			scale, unit = 1e3, "l/s"
		case sr.What == site.Speed:
			scale, unit = 1, "ratio" // to rated speed, as the drive shows it
		}
		note := ""
		switch {
		case r.Outlier:
			note = "left out as an outlier"
		case r.Boundary:
			note = "sets the boundary"
		case r.AsValveDiff:
			note = "fitted as the valve differential the meter read"
		case r.ModelSD > 0:
			note = fmt.Sprintf("weighed at ±%.2f %s (1 sd): its gauge and the header model's error in the drop to the branch (±%.2f)",
				r.Sigma*scale, unit, r.ModelSD*scale)
		}
		rows = append(rows, []string{r.Pos.String(), sr.State, sr.Where, sr.What.String(), sr.Instrument,
			f3(r.Value * scale), f3(r.Predicted * scale), unit, f2(r.Normalised), note})
	}
	return header, rows
}

func f2(x float64) string { return fmtNum(x, 2) }
func f3(x float64) string { return fmtNum(x, 3) }

func fmtNum(x float64, d int) string {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return ""
	}
	return strconv.FormatFloat(x, 'f', d, 64)
}

func yesNo(b bool) string {
	if b {
		return "yes"
	}
	return "no"
}

// valveWord says what the fit found of a valve: its hypothesis, and where
// that was taken on the prior rather than tested by the readings (a valve
// read at its test points alone whose branch would otherwise be far freer
// than designed), that it was assumed.
func valveWord(v calibrate.ValveVerdict) string {
	if v.Assumed {
		return v.Hypothesis.String() + " (assumed: its test points alone cannot tell)"
	}
	return v.Hypothesis.String()
}

// heldWord says what the fit found of a pressure-independent valve: whether
// it held its flow in every state or was starved in some.
func heldWord(bf *calibrate.BranchFit) string {
	var starved []string
	for _, st := range bf.HeldStates {
		if st.Starved {
			starved = append(starved, st.State)
		}
	}
	if len(starved) == 0 {
		return "pressure-independent, holds its flow"
	}
	return "pressure-independent, starved in " + strings.Join(starved, ", ")
}
