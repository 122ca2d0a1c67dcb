package cli

import (
	"math"
	"slices"

	"flowset/internal/plant"
)

// planJSON is the plan as written to plan.json, in SI units.
type planJSON struct {
	Site       string `json:"site"`
	Generated  string `json:"generated"`
	DesignOnly bool   `json:"design_only"`
	Rounding   string `json:"rounding"`
	Share      string `json:"share"`
	// States are the survey states the plan was made from: trim takes
	// every other state as read after setting, its valves where the plan
	// put them unless a reading records them elsewhere.
	States        []string         `json:"states"`
	Index         string           `json:"index_circuit"`
	IndexPath     []string         `json:"index_path"`
	LeastPa       num              `json:"least_differential_pa"`
	RequiredPa    num              `json:"required_differential_pa"`
	TotalFlow     num              `json:"total_flow_m3_s"`
	ToleranceLow  num              `json:"tolerance_low"`
	ToleranceHigh num              `json:"tolerance_high"`
	Pump          pumpJSON         `json:"pump"`
	Remedies      []remedyJSON     `json:"remedies"`
	LeastRemedied num              `json:"least_differential_remedied_pa"`
	Branches      []branchPlanJSON `json:"branches"`
	Controllers   []controllerJSON `json:"differential_controllers,omitempty"`
	Unmet         []shortfallJSON  `json:"unmet"`
	Warnings      []string         `json:"warnings"`
	Summary       []string         `json:"summary"`
}

type pumpJSON struct {
	Boundary          string   `json:"boundary"`
	BeforeFlow        num      `json:"before_flow_m3_s"`
	BeforeDiff        num      `json:"before_differential_pa"`
	AfterFlow         num      `json:"after_flow_m3_s"`
	AfterDiff         num      `json:"after_differential_pa"`
	SpeedRatio        num      `json:"speed_ratio"`
	NeededSpeed       num      `json:"needed_speed_ratio"`
	MaxSpeed          num      `json:"max_speed_ratio"`
	NeededPa          num      `json:"needed_differential_pa"`
	AvailablePa       num      `json:"available_differential_pa"`
	Short             bool     `json:"short"`
	TrimRatio         num      `json:"impeller_trim_ratio"`
	Sensor            string   `json:"sensor"`
	SetPoint          num      `json:"set_point_pa"`
	HydraulicBeforeW  num      `json:"hydraulic_power_before_w"`
	HydraulicAfterW   num      `json:"hydraulic_power_after_w"`
	ElectricBeforeW   num      `json:"electrical_power_before_w"`
	ElectricAfterW    num      `json:"electrical_power_after_w"`
	AnnualEnergyKWh   num      `json:"annual_energy_saving_kwh"`
	AnnualCostSaving  num      `json:"annual_cost_saving"`
	Currency          string   `json:"currency"`
	EfficiencyAssumed []string `json:"assumptions"`
	// Pumps is there for a site of several pumps only.
	Pumps *pumpsJSON `json:"pumps,omitempty"`
}

// pumpsJSON is the plan of several pumps: which run, each one's share of
// the duty, and one pump fewer.
type pumpsJSON struct {
	Arrangement string      `json:"arrangement"`
	OnSheet     int         `json:"on_pump_sheet"`
	Running     int         `json:"running"`
	Duties      []dutyJSON  `json:"duties"`
	OneFewer    *optionJSON `json:"one_fewer,omitempty"`
}

type dutyJSON struct {
	ID         string `json:"pump"`
	Flow       num    `json:"flow_m3_s"`
	Head       num    `json:"head_m"`
	Speed      num    `json:"speed_ratio"`
	Efficiency num    `json:"efficiency"`
	Given      bool   `json:"efficiency_from_pump_sheet"`
}

type optionJSON struct {
	Running     int        `json:"running"`
	Serves      bool       `json:"serves"`
	AvailablePa num        `json:"available_differential_pa"`
	Speed       num        `json:"speed_ratio"`
	ElectricW   num        `json:"electrical_power_w"`
	AnnualKWh   num        `json:"annual_energy_saving_kwh"`
	Duties      []dutyJSON `json:"duties"`
	// FlatOut* are, where they do not serve, the branches still in
	// tolerance with these pumps flat out at the plan's settings.
	FlatOutInBand   int `json:"flat_out_branches_in_tolerance"`
	FlatOutBranches int `json:"flat_out_branches"`
	FlatOutLowest   num `json:"flat_out_lowest_percent_of_target"`
}

func dutiesOut(ds []plant.PumpDuty) []dutyJSON {
	out := make([]dutyJSON, len(ds))
	for i, d := range ds {
		out[i] = dutyJSON{d.ID, num(d.Flow), num(d.Head), num(d.Speed), num(d.Efficiency), d.Given}
	}
	return out
}

// The values of plan.json's planned_on: the calibrated model's
// resistance, design's (held until a flow read another way confirms the
// fit's), or one between two explanations of the readings.
const (
	plannedOnFit    = "fit"
	plannedOnDesign = "design, held"
	plannedOnHedge  = "hedge"
)

// plannedOn is branch id's planned_on in plan.json.
func (j *job) plannedOn(id string) string {
	switch {
	case j.Cal == nil:
		return ""
	case slices.Contains(j.unconfirmed, id):
		return plannedOnDesign
	case j.hedged[id]:
		return plannedOnHedge
	}
	return plannedOnFit
}

type branchPlanJSON struct {
	ID              string   `json:"branch"`
	Parent          string   `json:"parent,omitempty"`
	OnIndex         bool     `json:"on_index_path"`
	Valve           string   `json:"valve,omitempty"`
	Unit            string   `json:"setting_unit,omitempty"`
	Current         num      `json:"as_found_setting"`
	Exact           num      `json:"exact_setting"`
	New             num      `json:"new_setting"`
	KvRequired      num      `json:"kv_required"`
	Target          num      `json:"target_m3_s"`
	Predicted       num      `json:"predicted_m3_s"`
	Percent         num      `json:"percent_of_target"`
	BandLow         num      `json:"band_low_percent"`
	BandHigh        num      `json:"band_high_percent"`
	InTolerance     bool     `json:"in_tolerance"`
	BandInTolerance bool     `json:"band_in_tolerance"`
	ValveDiff       num      `json:"check_valve_differential_pa"`
	BranchDiff      num      `json:"branch_differential_pa"`
	Authority       num      `json:"authority"`
	Notes           []string `json:"notes"`
	// PlannedOn is the branch resistance the setting was worked out on
	// (plannedOnFit, plannedOnDesign, plannedOnHedge); empty in a plan
	// from design data only. trim reads it: a reading after setting far
	// from a prediction made on the fit is doubted, one far from a
	// prediction the plan hedged is not.
	PlannedOn string `json:"planned_on,omitempty"`
	// Bypass is there for a three-port terminal only.
	Bypass *bypassJSON `json:"bypass,omitempty"`
}

// bypassJSON is a three-port terminal's bypass valve in the plan.
type bypassJSON struct {
	Valve     string `json:"valve"`
	Unit      string `json:"setting_unit"`
	Current   num    `json:"as_found_setting"`
	New       num    `json:"new_setting"`
	Kv        num    `json:"kv_required"`
	CheckDiff num    `json:"check_valve_differential_pa"`
	Short     bool   `json:"fully_open_passes_less"`
}

type controllerJSON struct {
	ID       string   `json:"riser"`
	Current  num      `json:"as_found_set_point_pa"`
	SetPoint num      `json:"new_set_point_pa"`
	Least    num      `json:"span_needs_pa"`
	Min      num      `json:"range_low_pa"`
	Max      num      `json:"range_high_pa"`
	OpenDrop num      `json:"valve_open_drop_pa"`
	Throttle num      `json:"valve_throttles_pa"`
	Span     num      `json:"check_span_differential_pa"`
	Holding  bool     `json:"holding"`
	Notes    []string `json:"notes"`
}

type shortfallJSON struct {
	ID           string `json:"branch"`
	Target       num    `json:"target_m3_s"`
	Predicted    num    `json:"predicted_m3_s"`
	Percent      num    `json:"percent_of_target"`
	Reason       string `json:"reason"`
	Remedy       string `json:"remedy,omitempty"`
	SavesPa      num    `json:"remedy_saves_pa"`
	AnnualEnergy num    `json:"remedy_saves_kwh_a_year"`
}

type remedyJSON struct {
	ID           string `json:"branch,omitempty"`
	Kind         string `json:"kind"`
	Action       string `json:"action"`
	Ratio        num    `json:"resistance_ratio"`
	NeedPa       num    `json:"branch_needs_pa"`
	NeedAfterPa  num    `json:"branch_needs_after_pa"`
	LeastPa      num    `json:"least_differential_pa"`
	LeastAfterPa num    `json:"least_differential_after_pa"`
	SavesPa      num    `json:"saves_pa"`
	PowerW       num    `json:"saves_electrical_w"`
	AnnualEnergy num    `json:"saves_kwh_a_year"`
	Starved      bool   `json:"starved"`
	Serves       bool   `json:"pump_then_serves_every_target"`
}

func (j *job) planOut(generated string) planJSON {
	p := j.Plan
	pp := p.Pump
	out := planJSON{Site: j.L.Site.Name, Generated: generated, DesignOnly: p.DesignOnly, Rounding: p.Rounding.String(), Share: p.Share.String(),
		States:        j.L.Model.StateLabels(),
		LeastRemedied: num(p.LeastRemedied),
		Index:         p.Index, IndexPath: p.IndexPath, LeastPa: num(p.Least), RequiredPa: num(p.Required), TotalFlow: num(p.TotalFlow),
		ToleranceLow: num(p.ToleranceLow), ToleranceHigh: num(p.ToleranceHigh), Warnings: p.Warnings, Summary: p.Summary(),
		Pump: pumpJSON{Boundary: pp.Boundary.String(), BeforeFlow: num(pp.Before.Flow), BeforeDiff: num(pp.Before.Differential),
			AfterFlow: num(pp.After.Flow), AfterDiff: num(pp.After.Differential), SpeedRatio: num(pp.SpeedRatio), NeededSpeed: num(pp.NeededSpeed),
			MaxSpeed: num(pp.MaxSpeed), NeededPa: num(pp.Needed), AvailablePa: num(pp.Available), Short: pp.Short,
			TrimRatio: num(pp.TrimRatio), Sensor: pp.Sensor, SetPoint: num(pp.SetPoint),
			HydraulicBeforeW: num(pp.HydraulicBefore), HydraulicAfterW: num(pp.HydraulicAfter),
			ElectricBeforeW: num(pp.ElectricalBefore), ElectricAfterW: num(pp.ElectricalAfter),
			AnnualEnergyKWh: num(pp.AnnualEnergySaving), AnnualCostSaving: num(pp.AnnualCostSaving), Currency: pp.Currency, EfficiencyAssumed: pp.Assumptions}}
	if !pp.HaveBefore {
		out.Pump.BeforeFlow, out.Pump.BeforeDiff = num(nan()), num(nan())
	}
	if len(pp.Duties) > 0 {
		ps := &pumpsJSON{Arrangement: "parallel", OnSheet: pp.Pumps, Running: pp.Running, Duties: dutiesOut(pp.Duties)}
		if pp.Series {
			ps.Arrangement = "series"
		}
		if o := pp.Fewer; o != nil {
			ps.OneFewer = &optionJSON{Running: o.Running, Serves: o.Serves, AvailablePa: num(o.Available), Speed: num(o.Speed),
				ElectricW: num(o.Electrical), AnnualKWh: num(o.AnnualEnergySaving), Duties: dutiesOut(o.Duties),
				FlatOutInBand: o.FlatOutInBand, FlatOutBranches: o.FlatOutBranches, FlatOutLowest: num(o.FlatOutLowest)}
		}
		out.Pump.Pumps = ps
	}
	for _, b := range p.Branches {
		out.Branches = append(out.Branches, branchPlanJSON{ID: b.ID, Parent: b.Parent, OnIndex: b.OnIndex, Valve: b.Valve, Unit: b.Unit,
			Current: num(b.Current), Exact: num(b.Exact), New: num(b.New), KvRequired: num(b.KvRequired), Target: num(b.Target),
			Predicted: num(b.Predicted), Percent: num(b.Percent), BandLow: num(b.BandLow), BandHigh: num(b.BandHigh),
			InTolerance: b.InTolerance, BandInTolerance: b.BandInTolerance, ValveDiff: num(b.ValveDiff), BranchDiff: num(b.BranchDiff),
			Authority: num(b.Authority), Notes: b.Notes, PlannedOn: j.plannedOn(b.ID)})
		if b.Bypass != "" {
			out.Branches[len(out.Branches)-1].Bypass = &bypassJSON{Valve: b.Bypass, Unit: b.BypassUnit, Current: num(b.BypassNow),
				New: num(b.BypassNew), Kv: num(b.BypassKv), CheckDiff: num(b.BypassDiff), Short: b.BypassShort}
		}
	}
	for _, c := range p.Controllers {
		out.Controllers = append(out.Controllers, controllerJSON{ID: c.ID, Current: num(c.Current), SetPoint: num(c.SetPoint), Least: num(c.Least),
			Min: num(c.Min), Max: num(c.Max), OpenDrop: num(c.OpenDrop), Throttle: num(c.Throttle), Span: num(c.Span), Holding: c.Holding, Notes: c.Notes})
	}
	for _, u := range p.Unmet {
		out.Unmet = append(out.Unmet, shortfallJSON{u.ID, num(u.Target), num(u.Predicted), num(u.Percent), u.Reason, u.Remedy, num(u.Saves), num(u.AnnualEnergy)})
	}
	for _, r := range p.Remedies {
		out.Remedies = append(out.Remedies, remedyJSON{ID: r.ID, Kind: r.Kind.String(), Action: r.Action, Ratio: num(r.Ratio),
			NeedPa: num(r.Need), NeedAfterPa: num(r.NeedAfter), LeastPa: num(r.Least), LeastAfterPa: num(r.LeastAfter), SavesPa: num(r.Saves),
			PowerW: num(r.Power), AnnualEnergy: num(r.AnnualEnergy), Starved: r.Starved, Serves: r.Serves})
	}
	return out
}

func nan() float64 { return math.NaN() }
