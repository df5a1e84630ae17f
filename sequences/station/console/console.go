// Package console is the terminal's consumer of a station session's
// events ('padline run'): what the operator must read goes to standard
// output (the station's screen), the log to standard error; with JSON,
// standard output carries one object per tested or refused unit.
package console

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"padline/sequences"
	"padline/sequences/session"
	"strings"
)

// Options say where and how a run is shown.
type Options struct {
	Stdout, Stderr io.Writer
	// JSON prints one JSON object per tested or refused unit on Stdout;
	// prompts and the log go to Stderr.
	JSON bool
	// Colour paints the verdict banners (a terminal).
	Colour bool
}

// Print shows the session's events until the channel closes; it returns
// the errors of writing JSON lines.
func Print(events <-chan session.Event, o Options) error {
	p := &printer{Options: o, enc: json.NewEncoder(o.Stdout)}
	for e := range events {
		p.event(e)
	}
	return p.err
}

// printer is one run's terminal.
type printer struct {
	Options
	enc *json.Encoder
	err error
}

// operator writes a line the operator reads, unless JSON lines own stdout.
func (p *printer) operator(format string, args ...any) {
	if !p.JSON {
		fmt.Fprintf(p.Stdout, format, args...)
	}
}

// jsonLine writes one JSON line.
func (p *printer) jsonLine(v any) { p.err = errors.Join(p.err, p.enc.Encode(v)) }

// event shows one event.
func (p *printer) event(e session.Event) {
	switch e.Kind {
	case session.KindSessionStarted:
		if !p.JSON {
			WriteBanner(p.Stdout, e.Started)
		}
	case session.KindStationRefused:
		p.operator("STATION LOCKED  %s: %s\n", e.Refused.Why, e.Refused.Fix)
	case session.KindStationHalted:
		// Both the screen (stdout) and the log (stderr): nobody may miss a
		// station that holds an unsaved unit.
		if p.JSON {
			p.jsonLine(map[string]string{"halted": e.Refused.Why, "fix": e.Refused.Fix})
		} else {
			fmt.Fprintf(p.Stdout, "STATION HALTED  %s: %s\n", e.Refused.Why, e.Refused.Fix)
		}
		fmt.Fprintf(p.Stderr, "padline: station halted: %s\n", e.Refused.Why)
	case session.KindStationResumed:
		fmt.Fprintf(p.Stderr, "padline: shift log writable again: the run of %s is saved\n", e.Scan.Serial)
	case session.KindCheckDue:
		p.operator("waiting for the shift-start check: run it from the station screen\n")
	case session.KindCheckProgress:
		fmt.Fprintf(p.Stderr, "shift-start check: %s\n", e.Check.Message)
	case session.KindCheckResult:
		if !p.JSON {
			WriteCheckResult(p.Stdout, e.Check.Report)
		}
	case session.KindBadgeScanned:
		p.operator("%s set to %s\n", e.Badge.Kind, e.Badge.Value)
	case session.KindScanRefused:
		if p.JSON {
			p.jsonLine(map[string]string{"serial": e.ScanRefused.Raw, "refused": e.ScanRefused.Reason})
		} else {
			fmt.Fprintf(p.Stdout, "NOT TESTED  %s\n", e.ScanRefused.Reason)
		}
	case session.KindLidWait:
		w := p.Stdout
		if p.JSON {
			w = p.Stderr
		}
		if e.Scan.Prompt != "" {
			fmt.Fprintln(w, e.Scan.Prompt)
		} else {
			fmt.Fprintln(w, "close the lid to start the test")
		}
	case session.KindUnitAborted:
		fmt.Fprintf(p.Stderr, "\nstopped: %s was not finished; it has no verdict and nothing was logged. Fixture halted.\n", e.Scan.Serial)
	case session.KindVerdictCommitted:
		if p.JSON {
			p.jsonLine(e.Verdict.Record())
		} else {
			WriteVerdict(p.Stdout, e.Verdict, p.Colour)
		}
	case session.KindRelayWear:
		fmt.Fprintf(p.Stderr, "relay wear: rung %d has %d of %.0f rated operations (%.0f %%): plan its replacement\n",
			e.Wear.Rung, e.Wear.Operations, e.Wear.Rated, 100*e.Wear.Fraction)
	case session.KindDriftAlarm:
		fmt.Fprintf(p.Stderr, "drift alarm: %s\n", e.Drift.Message)
	case session.KindSessionEnded:
		p.ended(e.Ended)
	}
}

// ended closes the run: a halted station says so where the verdicts
// appear (the operator reads the screen, not the log), then the count.
func (p *printer) ended(e *session.Ended) {
	switch e.Reason {
	case session.EndRefused:
		return
	case session.EndInput, session.EndStopped:
	default:
		if p.JSON {
			p.jsonLine(map[string]string{"halted": e.Reason})
		} else {
			fmt.Fprintf(p.Stdout, "STATION HALTED  %s\n", e.Reason)
		}
	}
	if p.JSON {
		fmt.Fprintf(p.Stderr, "%d unit(s) tested; fixture halted.\n", e.Tested)
	} else {
		fmt.Fprintf(p.Stdout, "\n%d unit(s) tested; fixture halted.\n", e.Tested)
	}
}

// WriteBanner says what the session tests, where, against which limits,
// and whether the station is simulated.
func WriteBanner(w io.Writer, s *session.Started) {
	sim := ""
	if s.Simulated {
		sim = " SIMULATED station (driver sim): these runs are not real units;"
	}
	fmt.Fprintf(w, "padline run: %s on station %s, fixture %s;%s trip limits %.2f … %.2f pF (guard band %.2f pF from %s); shift log %s\n",
		s.Variant, s.Station, s.Fixture, sim, s.Limits.TripLowPF, s.Limits.TripHighPF, s.UncertaintyPF, s.UncertaintyFrom, s.ShiftLog)
	if s.Plant != "" {
		fmt.Fprintf(w, "forwarding to plant store %s ('padline plant status --station FILE' shows its backlog and last error)\n", s.Plant)
	}
	fmt.Fprintln(w, "CAUTION: unit supply up to 15 V, station GPIO 3.3 V: level-shift every input; keep hands clear of the clamp.")
}

// WriteVerdict prints the verdict large and plain, after the commit; in
// colour (as well as in words) when colour is set: on a terminal only.
func WriteVerdict(w io.Writer, v *session.Verdict, colour bool) {
	r, lim := v.Run, v.Limits
	trip := "no trip point"
	for _, x := range r.Measurements {
		if x.Name == sequences.MeasTripPF && !math.IsNaN(x.Value) {
			trip = fmt.Sprintf("trip %.2f pF (limits %.2f … %.2f pF)", x.Value, lim.TripLowPF, lim.TripHighPF)
		}
	}
	switch r.Verdict {
	case sequences.Pass:
		flag := ""
		if v.PriorFails > 0 {
			flag = fmt.Sprintf("   (pass after %d fail(s): flagged in the shift log)", v.PriorFails)
		}
		fmt.Fprintf(w, "%s   %s   %s%s\n", r.Serial, Paint("======== PASS ========", r.Verdict, colour), trip, flag)
	case sequences.Fail:
		fmt.Fprintf(w, "%s   %s   %s   %s\n", r.Serial, Paint("######## FAIL ########", r.Verdict, colour), r.FailCode, trip)
	default:
		fmt.Fprintf(w, "%s   %s   %s: the station, not the unit, failed; see the station before retesting\n", r.Serial, Paint("???? STATION FAULT ????", r.Verdict, colour), r.FailCode)
		if v.StationError != "" {
			fmt.Fprintf(w, "   station fault: %s\n", v.StationError)
		}
	}
	if v.PriorPasses > 0 {
		fmt.Fprintf(w, "   repeat: %s passed %d time(s) before; this run is logged beside those\n", r.Serial, v.PriorPasses)
	}
	if v.Action != "" && r.Verdict != sequences.Pass {
		fmt.Fprintf(w, "   what to do: %s\n", v.Action)
	}
}

// WriteCheckResult prints the end of a shift-start check run from the
// station screen.
func WriteCheckResult(w io.Writer, rep *session.CheckReport) {
	if rep.OK {
		fmt.Fprintf(w, "shift-start check passed (check %d): testing goes on\n", rep.CheckID)
		return
	}
	fmt.Fprintf(w, "shift-start check REFUSED the station (check %d): %s\n", rep.CheckID, strings.Join(rep.Faults, "; "))
}

// Paint colours a verdict banner for a terminal (ECMA-48 SGR: bold, then
// black on green for a pass, white on red for a fail, black on yellow for a
// station fault); the words stay, so colour only adds to them.
func Paint(banner string, v sequences.Verdict, on bool) string {
	if !on {
		return banner
	}
	sgr := "1;30;43"
	switch v {
	case sequences.Pass:
		sgr = "1;30;42"
	case sequences.Fail:
		sgr = "1;97;41"
	}
	return "\x1b[" + sgr + "m" + banner + "\x1b[0m"
}
