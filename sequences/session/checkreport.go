package session

import (
	"fmt"
	"io"
	"strings"
	"time"
)

func fmtPF(p *float64) string {
	if p == nil {
		return "—"
	}
	return fmt.Sprintf("%.3f", *p)
}

// WriteCheck prints a reference check for people, with when the next one
// is due.
func WriteCheck(w io.Writer, rep CheckReport, st *Station) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
	p("station check  %s / fixture %s   (%s, sha256 %.12s; plan timing of %s)", rep.Station, rep.Fixture, rep.StationFile, rep.StationHash, rep.Variant)
	for _, c := range rep.References {
		verdict := "ok"
		if !c.OK {
			verdict = "FAULT"
		}
		p("")
		p("reference %s: trip %s pF ± %s (registered %.3f, allowed ±%.2f): deviation %s pF   %s   [%d searches, fixture time %.2f s]",
			c.Serial, fmtPF(c.MeasuredPF), fmtPF(c.SEPF), c.TripPF, c.AllowedDevPF, fmtPF(c.DevPF), verdict, c.Searches, c.FixtureTime.Seconds())
		for _, f := range c.Faults {
			p("  fault: %s", f)
		}
		if c.Suspects != "" {
			p("  suspects: %s", c.Suspects)
		}
	}
	p("")
	p("ladder self-test (all reference units)")
	p("  rung  entered pF  status        how")
	for _, f := range rep.Ladder {
		p("  %4d  %10.2f  %-12s  %s", f.Rung, f.EnteredPF, f.Status, f.Test)
	}
	p("")
	p("fixture time %.2f s for %d reference unit(s) (target < 30 s)", rep.FixtureS, len(rep.References))
	if rep.OK && rep.OffsetPF != nil && rep.OffsetU != nil {
		p("fixture offset %+.3f ± %.3f pF at %s's nominal trip, from %d reference unit(s) with lab trip points: added to every trip point until the next check",
			*rep.OffsetPF, *rep.OffsetU, rep.Variant, len(rep.Offset.Refs))
	}
	for _, sc := range rep.Sites {
		if rep.OK && sc.OffsetPF != nil && sc.OffsetU != nil {
			p("site %d: fixture offset %+.3f ± %.3f pF at %s's nominal trip, from %d reference unit(s) with lab trip points: added to the site's trip points until the next check",
				sc.Site, *sc.OffsetPF, *sc.OffsetU, rep.Variant, len(sc.Offset.Refs))
		}
	}
	if rep.OK {
		var due []string
		if n := st.Trust.CheckEveryUnits; n > 0 {
			due = append(due, fmt.Sprintf("%d units", n))
		}
		if h := st.Trust.CheckEveryHours; h > 0 {
			due = append(due, rep.Time.Add(time.Duration(h*float64(time.Hour))).Local().Format("15:04 Jan 2"))
		}
		next := ""
		if len(due) > 0 {
			next = "; next check due after " + strings.Join(due, " or at ")
		}
		p("PASSED (check %d): the station may test production units%s", rep.CheckID, next)
		return
	}
	p("REFUSED (check %d): %s", rep.CheckID, strings.Join(rep.Faults, "; "))
	p("'padline run' will test no production unit on fixture %s until a check passes. Repair the fixture (or correct the station file) and check again.", rep.Fixture)
}
