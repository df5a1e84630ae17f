package main

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"padline/fixture"
	"padline/fixture/hostpins"
	"padline/fixture/sim"
	"padline/sequences"
	"padline/sequences/timing"
	"padline/store"
)

type runOptions struct {
	variant, station string
	serial           string
	operator, lot    string
	search           string
	asJSON           bool
	lidTimeout       time.Duration
	plantURL         string // forward to this plant store (station_plant.go)
}

// runCmd builds `padline run`.
func (a *app) runCmd() *cobra.Command {
	var o runOptions
	cmd := &cobra.Command{
		Use:   "run --variant V --station FILE",
		Short: "Test units: scan a serial, close the lid, read the verdict",
		Long: `run tests production units on this station, one after another.

Serials come one per line on standard input (a barcode scanner types them like
a keyboard), or a single one from --serial. A serial that does not match the
variant's serial_pattern is refused before anything touches the unit. For each
serial padline waits for the lid, powers the unit, runs the variant's plan
(clock, idle check, release check, trip search), commits the run to the shift
log, and only then shows the verdict and lights the lamp.

Ctrl-C or SIGTERM stops cleanly: the fixture opens every rung and removes unit
power, and a unit stopped half-way gets no verdict and no log entry.

A station file with driver: sim runs against the built-in simulated line;
driver: gpio drives the real pins named in the station file.

CAUTION: the unit's supply may be up to 15 V while the station's GPIO is 3.3 V:
every input must be level-shifted. Products that switch mains must be tested
with their logic board unpowered from mains; follow local electrical codes and
your safety engineer. Keep hands clear of the fixture clamp.`,
		Example: `  padline run --variant QM-205 --station /etc/padline/station.yaml
  padline run --variant QM-205 --station demo-sim --serial QM205-000123
  printf 'QM205-000001\nQM205-000002\n' | padline run --variant QM-205 --station demo-sim --db shift.db`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			db, err := shiftLogPath(cmd, o.station)
			if err != nil {
				return err
			}
			return a.run(cmd.Context(), o, db)
		},
	}
	f := cmd.Flags()
	f.StringVar(&o.variant, "variant", "", "variant to test: a .yaml file or a built-in name (required)")
	f.StringVar(&o.station, "station", "", "station file: a .yaml file or a built-in name (required)")
	addShiftLogFlag(f)
	f.StringVar(&o.serial, "serial", "", "test this one serial instead of reading serials from stdin")
	f.StringVar(&o.operator, "operator", "", "operator name recorded with every run")
	f.StringVar(&o.lot, "lot", "", "lot recorded with every run")
	f.StringVar(&o.search, "search", "", "trip search: bracket or staircase (default: the variant's plan)")
	f.BoolVar(&o.asJSON, "json", false, "print one JSON object per tested unit instead of the verdict banner")
	f.DurationVar(&o.lidTimeout, "lid-timeout", 0, "give up on a unit whose lid stays open this long (0: wait until stopped)")
	f.StringVar(&o.plantURL, "plant-url", "", "forward every committed run to this plant store, postgres://… (default: the station file's plant.url)")
	_ = cmd.MarkFlagRequired("variant")
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

// openPins opens the station's pins: the simulated line's, or the real
// GPIO lines named in the station file.
func openPins(st *Station, v *Variant) (fixture.Pins, fixture.Clock, *sim.Line, error) {
	if st.Driver == "sim" {
		line, err := newSimLine(st, v)
		if err != nil {
			return fixture.Pins{}, nil, nil, err
		}
		return line.Pins(), line.Clock(), line, nil
	}
	p := st.Pins
	pins, err := hostpins.Open(hostpins.RoleMap{
		Latch: p.Latch, Power: p.Power, Clock: p.Clock, Lid: p.Lid,
		PassLamp: p.PassLamp, FailLamp: p.FailLamp, Ladder: p.Ladder,
	})
	if err != nil {
		return fixture.Pins{}, nil, nil, fmt.Errorf("station %s: %w", st.Source.Name, err)
	}
	return pins, fixture.WallClock{}, nil, nil
}

func (a *app) run(ctx context.Context, o runOptions, dbPath string) (err error) {
	v, err := loadVariant(o.variant)
	if err != nil {
		return err
	}
	st, err := loadStation(o.station)
	if err != nil {
		return err
	}
	u, uFrom := stationUncertainty(ctx, dbPath, st)
	rep, err := v.Limits(timing.Options{Draws: timing.DefaultDraws, Seed: 1, UncertaintyPF: u})
	if err != nil {
		return err
	}
	pins, clk, line, err := openPins(st, v)
	if err != nil {
		return err
	}
	fx, err := newFixture(st, pins, clk)
	if err != nil {
		return err
	}
	// Every exit path leaves every rung open and unit power off.
	defer func() {
		if herr := fx.Halt(); herr != nil && err == nil {
			err = fmt.Errorf("halt fixture: %w", herr)
		}
	}()
	cfg, err := planConfig(v, rep, st.Pins.Clock != "", o.search)
	if err != nil {
		return err
	}
	plan, err := sequences.NewPlan(cfg, fx.Ladder().Distinct())
	if err != nil {
		return err
	}
	db, err := store.Open(dbPath)
	if err != nil {
		return err
	}
	defer db.Close()
	fwd := a.startForwarding(ctx, db, st, o.plantURL)
	defer fwd.stop()
	// Setting up is quick and must not be cut half-way by a stop request;
	// the loop below checks for one before every unit.
	setup := context.WithoutCancel(ctx)
	hash, err := db.PutVariant(setup, v.Name, v.Source.Raw)
	if err != nil {
		return err
	}
	if ops, err := db.LoadRelayOps(setup, st.Fixture); err == nil && len(ops) == len(st.Ladder.RungsPF) {
		if err := fx.SetRelayOps(ops); err != nil {
			return err
		}
	}
	// Relay wear is saved after every unit (a power cut loses at most the
	// unit in progress) and once more on the way out.
	saveOps := func() { _ = db.SaveRelayOps(context.WithoutCancel(ctx), st.Fixture, fx.RelayOps()) }
	defer saveOps()

	sess := &sequences.Session{
		Plan: plan, Station: fx, Clock: clk, Recorder: db,
		Template: sequences.Run{
			Variant: v.Name, ConfigHash: hash, Station: st.Name, Fixture: st.Fixture,
			Operator: o.operator, Lot: o.lot, Software: softwareVersion(),
		},
		CheckSerial: func(s string) error { return validSerial(v.Serial, s) },
		WallClock:   time.Now,
		Retest:      &sequences.RetestPolicy{Max: v.Plan.Retest.Max, FlagPassAfterFail: v.Plan.Retest.FlagPassAfterFail},
	}
	// What the operator must read goes to stdout (the station's screen);
	// stderr is for the log.
	if !o.asJSON {
		fmt.Fprintf(a.stdout, "padline run: %s on station %s, fixture %s; trip limits %.2f … %.2f pF (guard band %.2f pF from %s); shift log %s\n",
			v.Name, st.Name, st.Fixture, rep.TestLimits.Low, rep.TestLimits.High, u, uFrom, dbPath)
		fmt.Fprintln(a.stdout, "CAUTION: unit supply up to 15 V, station GPIO 3.3 V: level-shift every input; keep hands clear of the clamp.")
	}

	// The station gate (station_cmd.go): no production unit without a
	// current, passing reference check; asked again before every unit.
	if err := stationReady(ctx, db, st, time.Now()); err != nil {
		return a.stationRefused(err, v.Name, st, dbPath, o.asJSON)
	}
	next := serialSource(ctx, a.stdin, o.serial)
	tested := 0
	for {
		if ctx.Err() != nil {
			break
		}
		if o.serial == "" && !o.asJSON && isTerminal(a.stdin) {
			fmt.Fprint(a.stdout, "scan serial> ")
		}
		raw, ok, err := next()
		if err != nil {
			return fmt.Errorf("read serials: %w", err)
		}
		if !ok {
			break
		}
		if strings.TrimSpace(raw) == "" {
			continue
		}
		serial, err := cleanSerial(v.Serial, raw)
		if err != nil {
			a.refused(o.asJSON, raw, fmt.Sprintf("%v (unit not tested; scan again)", err))
			continue
		}
		if err := stationReady(ctx, db, st, time.Now()); err != nil {
			return a.stationRefused(err, v.Name, st, dbPath, o.asJSON)
		}
		if line != nil {
			line.Load(serial)
		}
		var lidMsg io.Writer = a.stdout
		if o.asJSON {
			lidMsg = a.stderr
		}
		if err := waitLid(ctx, fx, o.lidTimeout, lidMsg); err != nil {
			if line != nil {
				line.Unload()
			}
			if errors.Is(err, context.Canceled) {
				break
			}
			a.refused(o.asJSON, serial, fmt.Sprintf("not tested: %v", err))
			continue
		}
		oc, err := sess.Test(ctx, serial)
		if line != nil {
			line.Unload()
		}
		switch {
		case errors.Is(err, sequences.ErrAborted):
			fmt.Fprintf(a.stderr, "\nstopped: %s was not finished; it has no verdict and nothing was logged. Fixture halted.\n", serial)
			return nil
		case errors.Is(err, sequences.ErrRetestLimit):
			a.refused(o.asJSON, serial, err.Error())
			continue
		case oc == nil:
			// Not saved: never show a verdict.
			return err
		}
		tested++
		saveOps()
		fwd.kick()
		if o.asJSON {
			if err := json.NewEncoder(a.stdout).Encode(unitJSON(oc)); err != nil {
				return err
			}
		} else {
			writeVerdict(a.stdout, oc, cfg.Limits)
		}
	}
	if o.asJSON {
		fmt.Fprintf(a.stderr, "%d unit(s) tested; fixture halted.\n", tested)
	} else {
		fmt.Fprintf(a.stdout, "\n%d unit(s) tested; fixture halted.\n", tested)
	}
	return nil
}

// refused tells the operator a scan was not tested: a plain line, or with
// --json an object {"serial": …, "refused": reason}, so the output stays
// one JSON object per line.
func (a *app) refused(asJSON bool, serial, reason string) {
	if asJSON {
		_ = json.NewEncoder(a.stdout).Encode(map[string]string{"serial": serial, "refused": reason})
		return
	}
	fmt.Fprintf(a.stdout, "REFUSED  %s\n", reason)
}

// serialSource yields the one --serial, or the lines of r as scanned; a
// read error (or a line over 1 MiB) ends the source with that error. A stop
// request ends it at once, even while a read is blocked waiting for a scan.
func serialSource(ctx context.Context, r io.Reader, one string) func() (string, bool, error) {
	if one != "" {
		done := false
		return func() (string, bool, error) {
			if done {
				return "", false, nil
			}
			done = true
			return one, true, nil
		}
	}
	type line struct {
		text string
		err  error
	}
	lines := make(chan line)
	go func() {
		defer close(lines)
		sc := bufio.NewScanner(r)
		sc.Buffer(make([]byte, 64*1024), 1<<20)
		for sc.Scan() {
			select {
			case lines <- line{text: sc.Text()}:
			case <-ctx.Done():
				return
			}
		}
		if err := sc.Err(); err != nil {
			select {
			case lines <- line{err: err}:
			case <-ctx.Done():
			}
		}
	}()
	return func() (string, bool, error) {
		select {
		case l, ok := <-lines:
			if !ok {
				return "", false, nil
			}
			if l.err != nil {
				return "", false, l.err
			}
			return l.text, true, nil
		case <-ctx.Done():
			return "", false, nil
		}
	}
}

// waitLid asks for the lid to be closed, once, and waits until it is.
func waitLid(ctx context.Context, fx *fixture.Fixture, timeout time.Duration, msg io.Writer) error {
	if closed, err := fx.LidClosed(); err != nil || closed {
		return err
	}
	fmt.Fprintln(msg, "close the lid to start the test")
	return fx.WaitLid(ctx, true, 50*time.Millisecond, timeout)
}

// unitJSON is one tested unit for --json.
func unitJSON(oc *sequences.Outcome) map[string]any {
	r := oc.Run
	m := map[string]any{
		"id": oc.ID, "serial": r.Serial, "verdict": r.Verdict, "fail_code": r.FailCode,
		"fixture_ms": ms(r.Finished.Sub(r.Started)), "prior_fails": oc.PriorFails,
	}
	for _, x := range r.Measurements {
		if x.Name == "trip_pf" || x.Name == "trip_se_pf" || x.Name == "spread_pf" || x.Name == "clock_hz" {
			m[x.Name] = jsonNum(x.Value)
		}
	}
	return m
}

// jsonNum is f for JSON, or nil (null) when f is NaN.
func jsonNum(f float64) any {
	if math.IsNaN(f) {
		return nil
	}
	return f
}

// writeVerdict prints the verdict large and plain, after the commit.
func writeVerdict(w io.Writer, oc *sequences.Outcome, lim sequences.Limits) {
	r := oc.Run
	trip := "no trip point"
	for _, x := range r.Measurements {
		if x.Name == "trip_pf" && !math.IsNaN(x.Value) {
			trip = fmt.Sprintf("trip %.2f pF (limits %.2f … %.2f pF)", x.Value, lim.TripLowPF, lim.TripHighPF)
		}
	}
	switch r.Verdict {
	case sequences.Pass:
		flag := ""
		if oc.PriorFails > 0 {
			flag = fmt.Sprintf("   (pass after %d fail(s): flagged in the shift log)", oc.PriorFails)
		}
		fmt.Fprintf(w, "%s   ======== PASS ========   %s%s\n", r.Serial, trip, flag)
	case sequences.Fail:
		fmt.Fprintf(w, "%s   ######## FAIL ########   %s   %s\n", r.Serial, r.FailCode, trip)
	default:
		fmt.Fprintf(w, "%s   ???? STATION FAULT ????   %s: the station, not the unit, failed; see the station before retesting\n", r.Serial, r.FailCode)
	}
}
