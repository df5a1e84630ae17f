package main

import (
	"fmt"
	"io"
	"math"
	"strings"

	"padline/sequences/timing"
)

// writeGate prints the gate effects the model includes at the nominal point.
func writeGate(w io.Writer, r timing.Report) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
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
func writeSensitivity(w io.Writer, r timing.Report) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
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
		p("            %-15s %14s %20s %+7.2f pF %5.1f %%", s.Input, fmtQty(s.Tol, s.Unit), fmtQty(s.PerUnit, "pF/"+s.Unit), s.PF, 100*s.Share)
	}
	if len(none) > 0 {
		p("            no effect on the trip point: %s", strings.Join(none, ", "))
	}
}

// fmtQty formats a value with its unit compactly.
func fmtQty(v float64, unit string) string {
	return fmt.Sprintf("%.4g %s", v, unit)
}
