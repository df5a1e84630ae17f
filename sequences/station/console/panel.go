package console

import (
	"encoding/json"
	"fmt"
	"io"

	"padline/sequences"
	"padline/sequences/session"
)

// Panel is the terminal's view of a panel run: the panel map and what to
// do per site that did not pass, or with JSON one object per site.
func Panel(o Options) session.PanelView {
	return &panelView{Options: o, enc: json.NewEncoder(o.Stdout)}
}

type panelView struct {
	Options
	enc *json.Encoder
}

var _ session.PanelView = (*panelView)(nil)

// log is where prompts and the closing count go: stdout unless JSON
// lines own it.
func (p *panelView) log() io.Writer {
	if p.JSON {
		return p.Stderr
	}
	return p.Stdout
}

func (p *panelView) Started(r *session.PanelRig, shiftLog string) {
	if p.JSON {
		return
	}
	st, lim, sim := r.Station, r.PlanConfig.Limits, ""
	if r.Sim != nil {
		sim = " SIMULATED station (driver sim): these runs are not real units;"
	}
	ladder := "own"
	if st.Sites.Ganged {
		ladder = "ganged"
	}
	fmt.Fprintf(p.Stdout, "padline run: %s on panel station %s, fixture %s, %d sites (%s ladder);%s trip limits %.2f … %.2f pF (guard band %.2f pF from %s); shift log %s\n",
		r.Variant.Name, st.Name, st.Fixture, r.Sites(), ladder, sim, lim.TripLowPF, lim.TripHighPF, r.UncertaintyPF, r.UncertaintyFrom, shiftLog)
	fmt.Fprintln(p.Stdout, "CAUTION: unit supply up to 15 V, station GPIO 3.3 V: level-shift every input; keep hands clear of the clamp.")
}

func (p *panelView) Locked(why error, fix string) {
	if !p.JSON {
		fmt.Fprintf(p.Stdout, "STATION LOCKED  %v: %s\n", why, fix)
	}
}

func (p *panelView) Refused(line string, why error) error {
	if p.JSON {
		return p.enc.Encode(map[string]string{"panel": line, "refused": why.Error()})
	}
	_, err := fmt.Fprintf(p.Stdout, "NOT TESTED  %v\n", why)
	return err
}

func (p *panelView) Prompt(msg string) { fmt.Fprintln(p.log(), msg) }

func (p *panelView) Tested(oc *session.PanelOutcome, lim sequences.Limits, stationErr error) error {
	if !p.JSON {
		WritePanel(p.Stdout, oc, lim)
		if stationErr != nil {
			fmt.Fprintf(p.Stdout, "   station fault: %v\n", stationErr)
		}
		return nil
	}
	for i, run := range oc.Runs {
		m := map[string]any{"panel": oc.Panel, "site": i + 1, "serial": oc.Serials[i], "verdict": "not-tested", "fail_code": "x_out"}
		if run != nil {
			m = (&session.Verdict{Run: *run, ID: oc.IDs[i]}).Record()
			m["panel"], m["site"] = oc.Panel, i+1
		}
		if err := p.enc.Encode(m); err != nil {
			return err
		}
	}
	return nil
}

func (p *panelView) Aborted(label string) {
	fmt.Fprintf(p.Stderr, "\nstopped: panel %s was not finished; no site has a verdict and nothing was logged. Fixture halted.\n", label)
}

func (p *panelView) Ended(tested int) {
	fmt.Fprintf(p.log(), "\n%d panel(s) tested; fixture halted.\n", tested)
}

// WritePanel prints the panel map, then one line per site that did not
// pass with what to do.
func WritePanel(w io.Writer, oc *session.PanelOutcome, lim sequences.Limits) {
	pass, tested := 0, 0
	for _, r := range oc.Runs {
		if r != nil {
			tested++
			if r.Verdict == sequences.Pass {
				pass++
			}
		}
	}
	fmt.Fprintf(w, "panel %s   %d of %d tested sites pass (trip limits %.2f … %.2f pF; P pass, F fail, S station fault, X x-out: not tested)\n",
		oc.Panel, pass, tested, lim.TripLowPF, lim.TripHighPF)
	fmt.Fprint(w, session.PanelMap(oc))
	for i, r := range oc.Runs {
		if r == nil || r.Verdict == sequences.Pass {
			continue
		}
		what := sequences.FailAction(r.FailCode)
		if r.Verdict == sequences.StationFault {
			what = "the station, not the unit, failed at this site; see the station before retesting"
		}
		fmt.Fprintf(w, "   site %02d %s  %s %s: %s\n", i+1, r.Serial, r.Verdict, r.FailCode, what)
	}
}
