package session

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strings"

	"padline/sequences/timing"
)

// LimitsQuery is what 'padline limits' asks for: the variant, where the
// guard band U comes from, and the Monte Carlo's size and seed.
type LimitsQuery struct {
	Variant string
	// UncertaintyPF is U when UncertaintyGiven (--uncertainty-pf).
	UncertaintyPF    float64
	UncertaintyGiven bool
	// Station and ShiftLog: otherwise U is the station's, from the study
	// in its shift log, else its station file, else the stand-in.
	Station, ShiftLog string
	Draws             int
	Seed              uint64
}

// LimitsReport is a variant's limits: its identity, the timing report and
// where U came from; it prints as one JSON object ('limits --json').
type LimitsReport struct {
	Variant    string `json:"variant"`
	Source     string `json:"source"`
	ConfigHash string `json:"config_hash"`
	// USource says where the guard band U came from.
	USource string `json:"uncertainty_source"`
	timing.Report
	v *Variant
}

// VariantLimits computes the limits q asks for. U is, first found:
// q.UncertaintyPF when given, the station's (Uncertainty), the stand-in.
func VariantLimits(ctx context.Context, q LimitsQuery) (LimitsReport, error) {
	if q.Draws < 1 {
		return LimitsReport{}, fmt.Errorf("limits: --draws must be ≥ 1, got %d", q.Draws)
	}
	v, err := LoadVariant(q.Variant)
	if err != nil {
		return LimitsReport{}, err
	}
	lr := LimitsReport{Variant: v.Name, Source: v.Source.Name, ConfigHash: v.Source.Hash, v: v}
	u, from := DefaultUncertaintyPF, "stand-in (no --station, no --uncertainty-pf)"
	switch {
	case q.UncertaintyGiven:
		u, from = q.UncertaintyPF, "--uncertainty-pf"
	case q.Station != "":
		st, err := LoadStation(q.Station)
		if err != nil {
			return lr, err
		}
		if u, from, err = Uncertainty(ctx, q.ShiftLog, st); err != nil {
			return lr, err
		}
	}
	lr.USource = from
	lr.Report, err = v.Limits(timing.Options{Draws: q.Draws, Seed: q.Seed, UncertaintyPF: u})
	return lr, err
}

// WriteWarnings prints the variant file's warnings (unusual values), one
// line each.
func (lr LimitsReport) WriteWarnings(w io.Writer) {
	if lr.v != nil {
		for _, msg := range lr.v.Warnings {
			fmt.Fprintln(w, "warning:", msg)
		}
	}
}

// WriteJSON prints the report as one indented JSON object.
func (lr LimitsReport) WriteJSON(w io.Writer) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(lr); err != nil {
		return fmt.Errorf("limits: write json: %w", err)
	}
	return nil
}

// cornerPF prints a corner trip point; a negative one is not a capacitance
// but a unit that trips with nothing at the pad, and is said so.
func cornerPF(pf float64) string {
	if pf < 0 {
		return "below 0 pF (such a unit trips with nothing at the pad)"
	}
	return fmt.Sprintf("%.2f", pf)
}

// WriteText prints the report for a person ('padline limits').
func (lr LimitsReport) WriteText(w io.Writer) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
	v, r := lr.v, lr.Report
	p("variant     %s — %s", v.Name, v.Description)
	p("file        %s (sha256 %.12s)", v.Source.Name, v.Source.Hash)
	p("")
	p("clock       nominal %.1f Hz   corners %.1f … %.1f Hz   (half periods %.3f / %.3f ms)",
		r.Clock.Nominal, r.Clock.CornerLow, r.Clock.CornerHigh, 1e3*r.Clock.HighS, 1e3*r.Clock.LowS)
	p("trip point  nominal %.2f pF   corners %s … %.2f pF", r.Trip.Nominal, cornerPF(r.Trip.CornerLow), r.Trip.CornerHigh)
	if n := r.Trip.NoTripCorners; n > 0 {
		p("            at %d of %d corners the unit cannot trip (the flip-flop samples before the sense node can fall)", n, r.Trip.Corners)
	}
	p("            Monte Carlo (%d draws, seed %d): mean %.2f pF, sd %.2f pF", r.Draws, r.Seed, r.Trip.MCMean, r.Trip.MCSD)
	p("            percentiles 0.135 %% %.2f   50 %% %.2f   99.865 %% %.2f pF", r.Trip.MCP00135, r.Trip.MCP50, r.Trip.MCP99865)
	writeGate(p, r)
	p("")
	writeSensitivity(p, r)
	p("")
	p("spec window no trip at ≤ %.2f pF, trip by %.2f pF", r.Spec.NoTripAtPF, r.Spec.TripByPF)
	p("model       %.2f … %.2f pF (worst-case corners)", r.ModelLimits.Low, r.ModelLimits.High)
	p("guard band  %.2f pF each side (U, k = 2; ISO 14253-1 acceptance zone)", r.GuardBandPF)
	p("test limits %.2f … %.2f pF", r.TestLimits.Low, r.TestLimits.High)
	p("")
	p("predicted   Cpk %.2f   yield %.4f %% (Monte Carlo)   %.4f %% (normal model)",
		r.Predicted.Cpk, 100*r.Predicted.Yield, 100*r.Predicted.YieldNormal)
	if len(r.Warnings) == 0 {
		p("warnings    none")
	}
	for _, msg := range r.Warnings {
		p("WARNING     %s", msg)
	}
	p("U from      %s", lr.USource)
}

// writeGate prints the gate effects the model includes at the nominal point.
func writeGate(p func(string, ...any), r timing.Report) {
	g := r.Gate
	if g.ROhm == 0 && g.EdgeNS == 0 && len(g.BySupply) == 0 {
		p("gates       ideal: the variant states no gate output resistance or edge time;")
		p("            4000-series gates add a few hundred Ω to R_s and R_o (see README, \"What the timing model includes\")")
	} else {
		p("gates       R_out %.0f Ω in series with R_s and R_o; clock edge %.0f ns (10–90 %%)", g.ROhm, g.EdgeNS)
		p("            ideal gates would give trip %.2f pF (%+.2f pF) and clock %.1f Hz (%+.1f Hz)",
			g.IdealTripPF, g.IdealTripPF-r.Trip.Nominal, g.IdealClockHz, g.IdealClockHz-r.Clock.Nominal)
	}
	if len(g.BySupply) > 0 {
		p("by supply   %s interpolated linearly at the supply", strings.Join(g.BySupply, ", "))
	}
	if g.EdgeNS > 0 {
		p("race        %.0f ns from CK crossing the threshold to the sample = %.1f edge times", g.RaceNS, g.RaceEdges)
	} else {
		p("race        %.0f ns from CK's edge to the sample", g.RaceNS)
	}
}

// writeSensitivity prints the ranking of what moves the trip point.
func writeSensitivity(p func(string, ...any), r timing.Report) {
	if len(r.Sensitivity) == 0 {
		p("sensitivity no toleranced input")
		return
	}
	p("sensitivity what moves the trip point: ∂trip/∂input × tolerance (3σ where the file gives sd), largest first")
	p("            %-15s %14s %20s %10s %6s", "input", "± tolerance", "∂trip/∂input", "trip", "share")
	var none []string
	for _, s := range r.Sensitivity {
		if math.Abs(s.PF) < 1e-6 {
			none = append(none, s.Input)
			continue
		}
		p("            %-15s %14s %20s %+7.2f pF %5.1f %%", s.Input, fmt.Sprintf("%.4g %s", s.Tol, s.Unit),
			fmt.Sprintf("%.4g pF/%s", s.PerUnit, s.Unit), s.PF, 100*s.Share)
	}
	if len(none) > 0 {
		p("            no effect on the trip point: %s", strings.Join(none, ", "))
	}
}
