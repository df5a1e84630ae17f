package main

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"strings"
	"time"

	"padline/fixture"
	"padline/fixture/hostpins"
	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
)

// panelStation loads the station file and reports whether it describes a
// panel (a `sites:` section).
func panelStation(ref string) (*session.Station, bool) {
	st, err := session.LoadStation(ref)
	if err != nil {
		return nil, false // the single-unit path reports the error
	}
	return st, st.Sites != nil
}

// openPanel builds the panel rig and opens the shift log for a panel
// station.
func openPanel(ctx context.Context, variant, station, dbPath, search string) (*session.PanelRig, *store.DB, string, error) {
	v, st, err := session.Load(variant, station)
	if err != nil {
		return nil, nil, "", err
	}
	u, from, err := session.Uncertainty(ctx, dbPath, st)
	if err != nil {
		return nil, nil, "", err
	}
	r, err := session.NewPanelRig(v, st, session.RigOptions{UncertaintyPF: u, UncertaintyFrom: from, Strategy: search,
		PanelGPIO: openPanelGPIO})
	if err != nil {
		return nil, nil, "", err
	}
	db, err := store.Open(dbPath)
	if err != nil {
		return nil, nil, "", errors.Join(err, r.Halt())
	}
	hash, err := db.PutVariant(ctx, v.Name, v.Source.Raw)
	if err == nil {
		err = r.LoadRelayWear(ctx, db)
	}
	if err != nil {
		return nil, nil, "", errors.Join(err, r.Halt(), db.Close())
	}
	return r, db, hash, nil
}

// runPanel is 'padline run' on a panel station: one line per panel (the
// panel label, or every site's label with --station's sites.serials: scan),
// one run per site in the shift log.
func (a *app) runPanel(ctx context.Context, o runOptions, dbPath string) (err error) {
	r, db, hash, err := openPanel(ctx, o.variant, o.station, dbPath, o.search)
	if err != nil {
		return err
	}
	defer func() {
		err = errors.Join(err, r.Halt(), r.SaveRelayWear(ctx, db), db.Close())
	}()
	st := r.Station
	if err := session.Ready(ctx, db, st, time.Now()); err != nil {
		if !o.asJSON {
			fmt.Fprintf(a.stdout, "STATION LOCKED  %v: run 'padline station check --variant %s --station %s --db %s'\n",
				err, r.Variant.Name, o.station, dbPath)
		}
		return &exitError{code: exitStationRefused, err: err}
	}
	lim := r.PlanConfig.Limits
	if !o.asJSON {
		simulated := ""
		if r.Sim != nil {
			simulated = " SIMULATED station (driver sim): these runs are not real units;"
		}
		fmt.Fprintf(a.stdout, "padline run: %s on panel station %s, fixture %s, %d sites (%s ladder);%s trip limits %.2f … %.2f pF (guard band %.2f pF from %s); shift log %s\n",
			r.Variant.Name, st.Name, st.Fixture, r.Sites(), map[bool]string{true: "ganged", false: "own"}[st.Sites.Ganged], simulated,
			lim.TripLowPF, lim.TripHighPF, r.UncertaintyPF, r.UncertaintyFrom, dbPath)
		fmt.Fprintln(a.stdout, "CAUTION: unit supply up to 15 V, station GPIO 3.3 V: level-shift every input; keep hands clear of the clamp.")
	}
	tmpl := sequences.Run{Variant: r.Variant.Name, ConfigHash: hash, Station: st.Name, Fixture: st.Fixture,
		Operator: o.operator, Lot: o.lot, Software: softwareVersion(), Driver: string(st.Driver)}
	lines := []string{o.serial}
	if o.xout != "" {
		lines[0] += " x:" + o.xout
	}
	if o.serial == "" {
		lines = nil
		sc := bufio.NewScanner(a.stdin)
		for sc.Scan() {
			if s := strings.TrimSpace(sc.Text()); s != "" {
				lines = append(lines, s)
			}
		}
	}
	enc := json.NewEncoder(a.stdout)
	tested := 0
	for _, line := range lines {
		if ctx.Err() != nil {
			break
		}
		label, serials, xout, perr := parsePanelLine(r, line)
		if perr != nil {
			if o.asJSON {
				if err := enc.Encode(map[string]string{"panel": line, "refused": perr.Error()}); err != nil {
					return err
				}
				continue
			}
			fmt.Fprintf(a.stdout, "NOT TESTED  %v\n", perr)
			continue
		}
		if r.Sim != nil {
			if _, err := r.Sim.Load(serials); err != nil {
				return err
			}
		} else if err := a.waitPanel(ctx, r, label, tested > 0, o); err != nil {
			if ctx.Err() != nil {
				return nil
			}
			return err
		}
		oc, terr := r.TestPanel(ctx, db, tmpl, label, serials, xout, time.Now)
		if r.Sim != nil {
			r.Sim.Unload()
		}
		if errors.Is(terr, sequences.ErrAborted) {
			fmt.Fprintf(a.stderr, "\nstopped: panel %s was not finished; no site has a verdict and nothing was logged. Fixture halted.\n", label)
			return nil
		}
		if oc == nil || errors.Is(terr, sequences.ErrNotSaved) {
			return terr
		}
		tested++
		if o.asJSON {
			for i, run := range oc.Runs {
				m := map[string]any{"panel": label, "site": i + 1, "serial": oc.Serials[i], "verdict": "not-tested", "fail_code": "x_out"}
				if run != nil {
					m = (&session.Verdict{Run: *run, ID: oc.IDs[i]}).Record()
					m["panel"], m["site"] = label, i+1
				}
				if err := enc.Encode(m); err != nil {
					return err
				}
			}
			continue
		}
		writePanel(a.stdout, oc, lim)
		if terr != nil {
			fmt.Fprintf(a.stdout, "   station fault: %v\n", terr)
		}
	}
	fmt.Fprintf(map[bool]io.Writer{true: a.stderr, false: a.stdout}[o.asJSON], "\n%d panel(s) tested; fixture halted.\n", tested)
	return nil
}

// waitPanel asks the operator to put the panel into the fixture: the lid
// must open after the panel before and close again.
func (a *app) waitPanel(ctx context.Context, r *session.PanelRig, label string, after bool, o runOptions) error {
	w := a.stdout
	if o.asJSON {
		w = a.stderr
	}
	fx := r.Panel.Site(0)
	if after {
		fmt.Fprintln(w, "open the lid and take the panel out")
		if err := fx.WaitLid(ctx, false, 50*time.Millisecond, o.lidTimeout); err != nil {
			return err
		}
	}
	fmt.Fprintf(w, "load panel %s and close the lid\n", label)
	return fx.WaitLid(ctx, true, 50*time.Millisecond, o.lidTimeout)
}

// openPanelGPIO opens a gpio panel station's lines through
// fixture/hostpins.
func openPanelGPIO(st *session.Station) (fixture.PanelPins, error) {
	roles := hostpins.PanelRoleMap{Lid: st.Pins.Lid, PassLamp: st.Pins.PassLamp, FailLamp: st.Pins.FailLamp}
	if st.Sites.SharedPower {
		roles.Power = st.Pins.Power
	}
	if st.Sites.Ganged {
		roles.Ladder = st.Pins.Ladder
	}
	for _, s := range st.Sites.List {
		roles.Sites = append(roles.Sites, hostpins.SiteRoles{Latch: s.Latch, Clock: s.Clock, Power: s.Power, Ladder: s.Ladder})
	}
	return hostpins.OpenPanel(roles)
}

// parsePanelLine reads one scanned panel: "LABEL [x:2,5]" with serials from
// the variant's panel_serial, or, with sites.serials: scan, one label per
// site where "-" marks an x-out.
func parsePanelLine(r *session.PanelRig, line string) (label string, serials []string, xout []bool, err error) {
	f := strings.Fields(line)
	n := r.Sites()
	if r.Station.Sites.ScanEach {
		if len(f) != n {
			return "", nil, nil, fmt.Errorf("%q: want %d site labels (\"-\" for an x-out), got %d", line, n, len(f))
		}
		xout = make([]bool, n)
		scanned := make([]string, n)
		for i, s := range f {
			if s == "-" {
				xout[i], scanned[i] = true, "-"
				continue
			}
			scanned[i] = s
		}
		label = "panel-" + scanned[firstTested(xout)]
		serials, err = session.PanelSerials(r.Variant, n, label, scanned, xout)
		return label, serials, xout, err
	}
	if len(f) == 0 || len(f) > 2 {
		return "", nil, nil, fmt.Errorf("%q: want a panel label, optionally followed by x:SITES (x-outs, e.g. x:2,5)", line)
	}
	label = f[0]
	xs := ""
	if len(f) == 2 {
		var ok bool
		if xs, ok = strings.CutPrefix(f[1], "x:"); !ok {
			return "", nil, nil, fmt.Errorf("%q: want x:SITES after the label, got %q", line, f[1])
		}
	}
	if xout, err = session.ParseXOuts(xs, n); err != nil {
		return "", nil, nil, err
	}
	serials, err = session.PanelSerials(r.Variant, n, label, nil, xout)
	return label, serials, xout, err
}

func firstTested(xout []bool) int {
	for i, x := range xout {
		if !x {
			return i
		}
	}
	return 0
}

// writePanel prints the panel map, then one line per site that did not
// pass with what to do.
func writePanel(w io.Writer, oc *session.PanelOutcome, lim sequences.Limits) {
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

// stationCheckPanel is 'padline station check' on a panel station.
func (a *app) stationCheckPanel(ctx context.Context, variant, station, dbPath string, asJSON bool) (err error) {
	r, db, _, err := openPanel(ctx, variant, station, dbPath, "")
	if err != nil {
		return err
	}
	defer func() { err = errors.Join(err, r.Halt(), r.SaveRelayWear(ctx, db), db.Close()) }()
	rep, err := session.RunPanelCheck(ctx, r, db, nil)
	if err != nil {
		return err
	}
	if asJSON {
		enc := json.NewEncoder(a.stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(rep); err != nil {
			return err
		}
	} else {
		session.WriteCheck(a.stdout, rep, r.Station)
	}
	if !rep.OK {
		return &exitError{code: exitStationRefused, err: fmt.Errorf("station %s fixture %s refused: %s", r.Station.Name, r.Station.Fixture, strings.Join(rep.Faults, "; "))}
	}
	return nil
}
