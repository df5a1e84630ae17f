package sequences

import (
	"fmt"
	"math"
	"slices"
)

// ---------------------------------------------------------------------------
// GUM uncertainty budget

// UComponent is one standard uncertainty of a budget (sensitivity 1: every
// component is already in pF at the trip point).
type UComponent struct {
	Name   string  `json:"name"`
	Source string  `json:"source"`
	U      float64 `json:"u_pf"` // standard uncertainty, pF
}

// Budget is a combined and expanded uncertainty per GUM (JCGM 100:2008):
// u_c = √Σu_i² for uncorrelated inputs of unit sensitivity, U = k·u_c.
type Budget struct {
	Components []UComponent `json:"components"`
	UC         float64      `json:"u_c_pf"`
	K          float64      `json:"k"`
	U          float64      `json:"U_pf"`
}

// Combine returns the budget of comps with coverage factor k (JCGM 100:2008
// eq. (10) with unit sensitivities, and §6.2: U = k·u_c).
func Combine(comps []UComponent, k float64) Budget {
	var ss float64
	for _, c := range comps {
		ss += c.U * c.U
	}
	b := Budget{Components: slices.Clone(comps), K: k}
	b.UC = math.Sqrt(ss)
	b.U = k * b.UC
	return b
}

// ResolutionU is the standard uncertainty of a reading quantised in steps of
// delta: a rectangular distribution of half-width δ/2, u = δ/√12 (JCGM
// 100:2008 F.2.2.1).
func ResolutionU(delta float64) float64 { return delta / math.Sqrt(12) }

// StationBudgetInput are the figures a station's GUM budget is built from.
type StationBudgetInput struct {
	// StepPF is the local ladder step at the trip point (about the smallest
	// rung): the quantisation of a single probe.
	StepPF float64
	// CalPF is one rung's calibration standard uncertainty; ClosedRungs is
	// how many rungs are closed at the working point (their calibration
	// errors add: u = CalPF·√ClosedRungs).
	CalPF       float64
	ClosedRungs int
	// RepeatPF is the repeatability (and reproducibility) standard deviation
	// from the latest study, and RepeatSource names it; 0 = no study yet.
	RepeatPF     float64
	RepeatSource string
	// OffsetUPF is the standard uncertainty of the fixture offset the
	// station corrects trip points by (FixtureOffset.At at the working
	// point; 0: no offset), OffsetSource the check it came from. The
	// corrected trip carries the offset's uncertainty in place of the
	// rungs' calibration: the offset holds the stray's and the rungs'
	// errors as the reference units measured them.
	OffsetUPF    float64
	OffsetSource string
}

// StationBudget builds the station's budget: ladder resolution δ/√12, rung
// calibration (or, when the station corrects by a fixture offset, the
// offset's uncertainty), repeatability from the latest study; k = 2.
func StationBudget(in StationBudgetInput) Budget {
	n := max(in.ClosedRungs, 1)
	comps := []UComponent{
		{Name: "ladder resolution", Source: fmt.Sprintf("δ/√12, δ = %.3g pF", in.StepPF), U: ResolutionU(in.StepPF)},
		{Name: "rung calibration", Source: fmt.Sprintf("%.3g pF per rung × √%d rungs closed", in.CalPF, n), U: in.CalPF * math.Sqrt(float64(n))},
	}
	if in.OffsetUPF > 0 {
		comps[1] = UComponent{Name: "fixture offset", Source: in.OffsetSource, U: in.OffsetUPF}
	}
	if in.RepeatPF > 0 {
		comps = append(comps, UComponent{Name: "repeatability", Source: in.RepeatSource, U: in.RepeatPF})
	}
	return Combine(comps, 2)
}
