package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"sort"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"padline/fixture"
	"padline/fixture/sim"
	"padline/sequences"
	"padline/sequences/timing"
	"padline/store"
)

// Station trust: 'padline station check|study|status', the station file's
// reference units, and the gate 'padline run' passes before every unit.

const (
	// defaultCalUncertaintyPF is one rung's calibration standard
	// uncertainty when the station file does not state it: the σ of an
	// LCR-meter reading at these values (DESIGN.md §12).
	defaultCalUncertaintyPF = 0.05
	// defaultRelayWarnFraction is the fraction of rated relay life at which
	// status warns.
	defaultRelayWarnFraction = 0.8
	// exitStationRefused is the exit status of a refused check and of a run
	// the gate refused.
	exitStationRefused = 3
)

// errNotReady is wrapped by every refusal of the gate.
var errNotReady = errors.New("station not ready")

// StationRef is one reference unit of a station file.
type StationRef struct {
	sequences.Reference
	// SimDefects are the simulator defects the unit is built with (driver
	// sim only): a high-trip reference is a QM-205 board with a slowed
	// clock path, which the simulator models as its slow_gate defect.
	SimDefects []string
}

// readStationTrust reads reference_units, check_every_units,
// check_every_hours and relay_warn_fraction. A reference trip must lie at
// least sequences.CheckWindowPF inside the ladder's range (stray to stray + every
// rung), where the check can search it.
func readStationTrust(d *doc, lad StationLadder) StationTrust {
	tr := StationTrust{RelayWarnFraction: defaultRelayWarnFraction}
	if v, ok := d.lookup("reference_units"); ok {
		items, isList := v.([]any)
		if !isList {
			d.fail("reference_units", "want a list of {serial, trip_pf, allowed_dev_pf}, got %s", describeValue(v))
		}
		seen := map[string]bool{}
		for i, it := range items {
			key := fmtIndex("reference_units", i)
			m, isMap := it.(map[string]any)
			if !isMap {
				d.fail(key, "want {serial, trip_pf, allowed_dev_pf}, got %s", describeValue(it))
				continue
			}
			keys := make([]string, 0, len(m))
			for k := range m {
				keys = append(keys, k)
			}
			sort.Strings(keys)
			for _, k := range keys {
				if !slices.Contains([]string{"serial", "trip_pf", "allowed_dev_pf", "sim_defects"}, k) {
					d.fail(key, "unknown key %s (want serial, trip_pf, allowed_dev_pf, sim_defects)", k)
				}
			}
			var r StationRef
			serial, isStr := m["serial"].(string)
			switch {
			case m["serial"] == nil:
				d.fail(key, "missing key serial")
			case !isStr || strings.TrimSpace(serial) == "":
				d.fail(key+".serial", "want the reference unit's serial, got %s", describeValue(m["serial"]))
			case seen[serial]:
				d.fail(key+".serial", "%s is registered twice", serial)
			}
			seen[serial] = true
			r.Serial = serial
			num := func(k string) float64 {
				x, present := m[k]
				if !present || x == nil {
					d.fail(key, "missing key %s", k)
					return 0
				}
				f, isNum := asNumber(x)
				if !isNum || f <= 0 {
					d.fail(key+"."+k, "want a number > 0, got %s", describeValue(x))
				}
				return f
			}
			r.TripPF = num("trip_pf")
			r.AllowedDevPF = num("allowed_dev_pf")
			if lo, hi := lad.StrayPF+sequences.CheckWindowPF, lad.StrayPF+sumPF(lad.RungsPF)-sequences.CheckWindowPF; len(lad.RungsPF) > 0 && r.TripPF > 0 && (r.TripPF < lo || r.TripPF > hi) {
				d.fail(key+".trip_pf", "%g pF is outside the ladder's reach for a check (%.2f to %.2f pF: %g pF inside stray and full ladder)", r.TripPF, lo, hi, sequences.CheckWindowPF)
			}
			if x, present := m["sim_defects"]; present {
				l, isList := x.([]any)
				if !isList {
					d.fail(key+".sim_defects", "want a list of simulator defect names, got %s", describeValue(x))
				}
				for j, e := range l {
					name, _ := e.(string)
					if !slices.Contains(sim.DefectNames(), name) {
						d.fail(fmtIndex(key+".sim_defects", j), "want one of %s, got %s", strings.Join(sim.DefectNames(), ", "), describeValue(e))
					}
					r.SimDefects = append(r.SimDefects, name)
				}
			}
			tr.References = append(tr.References, r)
		}
	}
	tr.CheckEveryUnits = d.count("check_every_units", 1, 0)
	tr.CheckEveryHours = d.positive("check_every_hours", false, 0)
	if f, ok := d.num("relay_warn_fraction", false, defaultRelayWarnFraction); ok {
		if !(f > 0 && f <= 1) {
			d.fail("relay_warn_fraction", "must be a fraction in (0, 1], got %g", f)
		}
		tr.RelayWarnFraction = f
	}
	return tr
}

func sumPF(xs []float64) float64 {
	var s float64
	for _, x := range xs {
		s += x
	}
	return s
}

// stationRefArg is how a command line names the station: the path, or the
// built-in's name.
func stationRefArg(st *Station) string { return strings.TrimPrefix(st.Source.Name, "built-in ") }

// checkHint is the command that clears a refusal.
func checkHint(variant string, st *Station, dbPath string) string {
	return fmt.Sprintf("run 'padline station check --variant %s --station %s --db %s'", variant, stationRefArg(st), dbPath)
}

// stationReady is the gate in front of production units: it refuses when
// the shift log holds no check of this station and fixture, the last check
// refused the station, the station file changed since, the check is older
// than check_every_hours, or check_every_units runs were tested since it.
func stationReady(ctx context.Context, db *store.DB, st *Station, now time.Time) error {
	// The gate is two quick reads; a stop request must not turn it into
	// an error (the caller checks for one before every unit anyway).
	ctx = context.WithoutCancel(ctx)
	c, err := db.LastCheck(ctx, st.Name, st.Fixture)
	if errors.Is(err, store.ErrNotFound) {
		return fmt.Errorf("%w: station %s fixture %s has no reference check in the shift log", errNotReady, st.Name, st.Fixture)
	}
	if err != nil {
		return err
	}
	at := c.Time.Local().Format("2006-01-02 15:04")
	switch {
	case !c.OK:
		return fmt.Errorf("%w: the reference check of %s refused station %s fixture %s", errNotReady, at, st.Name, st.Fixture)
	case c.StationHash != st.Source.Hash:
		return fmt.Errorf("%w: the station file %s changed since the reference check of %s", errNotReady, st.Source.Name, at)
	}
	if h := st.Trust.CheckEveryHours; h > 0 && now.Sub(c.Time) > time.Duration(h*float64(time.Hour)) {
		return fmt.Errorf("%w: the reference check of %s is older than %g h", errNotReady, at, h)
	}
	if n := st.Trust.CheckEveryUnits; n > 0 {
		since, err := db.RunsSince(ctx, st.Name, st.Fixture, c.LastRunID)
		if err != nil {
			return err
		}
		if since >= int64(n) {
			return fmt.Errorf("%w: %d units tested since the reference check of %s (a check is due every %d)", errNotReady, since, at, n)
		}
	}
	return nil
}

// stationRefused prints the gate's refusal on the operator's screen (not
// with --json: stdout is JSON then, and main prints the error on stderr) and
// returns it as exit status 3.
func (a *app) stationRefused(err error, variant string, st *Station, dbPath string, asJSON bool) error {
	if !errors.Is(err, errNotReady) {
		return err
	}
	err = fmt.Errorf("%w: %s", err, checkHint(variant, st, dbPath))
	if !asJSON {
		fmt.Fprintf(a.stdout, "STATION REFUSED  %v\n", err)
	}
	return &exitError{code: exitStationRefused, err: err}
}

// stationUncertainty is the guard band U a station applies, and where it
// came from: the uncertainty stored in its shift log by 'padline station
// study', else the station file's uncertainty_pf, else the stand-in. A
// shift log that does not exist yet is not created.
func stationUncertainty(ctx context.Context, dbPath string, st *Station) (float64, string) {
	if _, err := os.Stat(dbPath); err == nil {
		if db, err := store.Open(dbPath); err == nil {
			u, err := db.LastUncertainty(ctx, st.Name, st.Fixture)
			db.Close()
			if err == nil {
				return u.UPF, fmt.Sprintf("shift log %s (station %s fixture %s, %s, %s)", dbPath, st.Name, st.Fixture,
					u.Time.Local().Format("2006-01-02 15:04"), u.Source)
			}
		}
	}
	return stationU(st)
}

// stationCmd builds `padline station`.
func (a *app) stationCmd() *cobra.Command {
	cmd := &cobra.Command{
		Use:   "station",
		Short: "Prove the station measures right: reference check, studies, status",
		Long: `station looks after the fixture itself.

  check   tests the station file's reference units and self-tests the ladder;
          'padline run' refuses production units until a check passes, and
          again after check_every_units units or check_every_hours hours, or
          when the station file changes.
  study   a type-1 study (one reference unit n times) or a gauge R&R study
          (AIAG average-and-range); stores the result and the station's GUM
          uncertainty U, which 'padline limits --station' and 'padline run'
          take as their guard band.
  status  the last check, the last studies, U, and relay wear per rung.`,
	}
	cmd.AddCommand(a.stationCheckCmd(), a.stationStudyCmd(), a.stationStatusCmd())
	return cmd
}

// rig is a station opened for a trust command: variant, station, limits,
// fixture, the simulated line (nil on gpio) and the shift log.
type rig struct {
	a      *app
	v      *Variant
	st     *Station
	rep    timing.Report
	plan   sequences.PlanConfig
	fx     *fixture.Fixture
	clk    fixture.Clock
	line   *sim.Line
	db     *store.DB
	dbPath string
	loaded bool
	quiet  bool // --json: prompts go to stderr
}

func (a *app) openRig(ctx context.Context, variant, station, dbPath string, quiet bool) (*rig, error) {
	v, err := loadVariant(variant)
	if err != nil {
		return nil, err
	}
	st, err := loadStation(station)
	if err != nil {
		return nil, err
	}
	u, _ := stationUncertainty(ctx, dbPath, st)
	rep, err := v.Limits(timing.Options{Draws: timing.DefaultDraws, Seed: 1, UncertaintyPF: u})
	if err != nil {
		return nil, err
	}
	pc, err := planConfig(v, rep, st.Pins.Clock != "", "")
	if err != nil {
		return nil, err
	}
	pins, clk, line, err := openPins(st, v)
	if err != nil {
		return nil, err
	}
	fx, err := newFixture(st, pins, clk)
	if err != nil {
		return nil, err
	}
	db, err := store.Open(dbPath)
	if err != nil {
		_ = fx.Halt()
		return nil, err
	}
	r := &rig{a: a, v: v, st: st, rep: rep, plan: pc, fx: fx, clk: clk, line: line, db: db, dbPath: dbPath, quiet: quiet}
	if ops, err := db.LoadRelayOps(ctx, st.Fixture); err == nil && len(ops) == len(st.Ladder.RungsPF) {
		if err := fx.SetRelayOps(ops); err != nil {
			r.close(ctx)
			return nil, err
		}
	}
	return r, nil
}

// close halts the fixture, saves the relay counts and closes the log.
func (r *rig) close(ctx context.Context) error {
	herr := r.fx.Halt()
	serr := r.db.SaveRelayOps(context.WithoutCancel(ctx), r.st.Fixture, r.fx.RelayOps())
	cerr := r.db.Close()
	if err := errors.Join(herr, serr, cerr); err != nil {
		return fmt.Errorf("close station: %w", err)
	}
	return nil
}

func (r *rig) msg() io.Writer {
	if r.quiet {
		return r.a.stderr
	}
	return r.a.stdout
}

// load puts the unit with serial in the fixture: the simulated line loads
// it (with defects, for a purpose-built reference); on hardware the
// operator is asked to, and the lid must open and close again.
func (r *rig) load(ctx context.Context, serial string, simDefects []string, what string) error {
	if r.line != nil {
		if err := r.line.ForceDefects(serial, simDefects...); err != nil {
			return err
		}
		r.line.Load(serial)
		return nil
	}
	fmt.Fprintf(r.msg(), "load %s into fixture %s and close the lid\n", what, r.st.Fixture)
	if r.loaded {
		if err := r.fx.WaitLid(ctx, false, 50*time.Millisecond, 0); err != nil {
			return err
		}
	}
	r.loaded = true
	return waitLid(ctx, r.fx, 0, r.msg())
}

// checkConfig is the reference check's configuration on this station.
func (r *rig) checkConfig() sequences.CheckConfig {
	return sequences.CheckConfig{
		RungsPF: r.st.Ladder.RungsPF, StrayPF: r.st.Ladder.StrayPF, CalPF: r.st.Ladder.CalUncertaintyPF,
		PowerSettle: r.plan.PowerSettle, Period: r.plan.Period,
	}
}

// checkReport is what a check records and prints with --json.
type checkReport struct {
	Station     string                  `json:"station"`
	Fixture     string                  `json:"fixture"`
	StationFile string                  `json:"station_file"`
	StationHash string                  `json:"station_hash"`
	Variant     string                  `json:"variant"`
	Time        time.Time               `json:"time"`
	OK          bool                    `json:"ok"`
	Faults      []string                `json:"faults"`
	FixtureS    float64                 `json:"fixture_time_s"`
	References  []sequences.RefCheck    `json:"references"`
	Ladder      []sequences.RungFinding `json:"ladder"`
	CheckID     int64                   `json:"check_id"`
}

func (a *app) stationCheckCmd() *cobra.Command {
	var variant, station string
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "check --variant V --station FILE",
		Short: "Test the reference units and self-test the ladder; refuse the station on any fault",
		Long: `check tests every reference unit the station file registers (reference_units):
it measures each one's trip point and compares it with the registered value,
and self-tests the ladder on it. Per rung, a pair of levels that straddles
the trip (without the rung and with it) must read apart by the rung's value;
a stuck rung makes them one circuit. Readings are scored against the healthy
ladder and every single stuck rung, allowing for the rungs' calibration
uncertainty (ladder.cal_uncertainty_pf); unclear pairs are re-probed, and a
stuck rung is named only when it explains the readings a million times
better than a healthy ladder. A latch that never reads high finds an open pad
or latch pogo pin. A deviation beyond the allowance (close calls pool more
searches) is explained by least squares over all reference units: the rung,
the stray or the reference unit that fits, or the group they cannot tell
apart.

The result is recorded in the shift log. Any fault puts the station in the
refused state: 'padline run' tests no production unit until a check passes.
Exit status 3 when the station is refused.

With driver: sim the simulated line loads each reference unit itself; with
driver: gpio the operator is asked to load each one and close the lid.`,
		Example: `  padline station check --variant QM-205 --station demo-sim --db shift.db
  padline station check --variant QM-205 --station /etc/padline/station.yaml --json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			dbPath, err := shiftLogPath(cmd, station)
			if err != nil {
				return err
			}
			return a.stationCheck(cmd.Context(), variant, station, dbPath, asJSON)
		},
	}
	f := cmd.Flags()
	f.StringVar(&variant, "variant", "", "variant whose plan timing the check uses: a .yaml file or a built-in name (required)")
	f.StringVar(&station, "station", "", "station file: a .yaml file or a built-in name (required)")
	addShiftLogFlag(f)
	f.BoolVar(&asJSON, "json", false, "print the check as one JSON object")
	_ = cmd.MarkFlagRequired("variant")
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

func (a *app) stationCheck(ctx context.Context, variant, station, dbPath string, asJSON bool) (err error) {
	r, err := a.openRig(ctx, variant, station, dbPath, asJSON)
	if err != nil {
		return err
	}
	defer func() {
		if cerr := r.close(ctx); cerr != nil && err == nil {
			err = cerr
		}
	}()
	st := r.st
	if len(st.Trust.References) == 0 {
		return fmt.Errorf("station file %s registers no reference_units: measure a kept good unit on this station and add {serial, trip_pf, allowed_dev_pf} under reference_units", st.Source.Name)
	}
	lastRun, err := r.db.LastRunID(ctx)
	if err != nil {
		return err
	}
	rep := checkReport{Station: st.Name, Fixture: st.Fixture, StationFile: st.Source.Name, StationHash: st.Source.Hash,
		Variant: r.v.Name, Time: time.Now().UTC()}
	cfg := r.checkConfig()
	var total time.Duration
	for _, ref := range st.Trust.References {
		if err := r.load(ctx, ref.Serial, ref.SimDefects, "reference unit "+ref.Serial); err != nil {
			return fmt.Errorf("station check: %w", err)
		}
		res, err := sequences.CheckReference(ctx, r.fx, r.clk, ref.Reference, cfg)
		if r.line != nil {
			r.line.Unload()
		}
		if err != nil {
			return fmt.Errorf("station check: reference unit %s: %w", ref.Serial, err)
		}
		total += res.FixtureTime
		rep.References = append(rep.References, res)
	}
	rep.Ladder, rep.Faults = sequences.CombineChecks(rep.References)
	rep.OK = len(rep.Faults) == 0
	rep.FixtureS = total.Seconds()
	details, err := json.Marshal(rep)
	if err != nil {
		return err
	}
	rep.CheckID, err = r.db.RecordCheck(ctx, store.StationCheck{
		Time: rep.Time, Station: st.Name, Fixture: st.Fixture, StationHash: st.Source.Hash,
		OK: rep.OK, LastRunID: lastRun, Details: details,
	})
	if err != nil {
		return fmt.Errorf("station check not recorded: %w", err)
	}
	if asJSON {
		enc := json.NewEncoder(a.stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(rep); err != nil {
			return err
		}
	} else {
		writeCheck(a.stdout, rep, st)
	}
	if !rep.OK {
		return &exitError{code: exitStationRefused, err: fmt.Errorf("station %s fixture %s refused: %s", st.Name, st.Fixture, strings.Join(rep.Faults, "; "))}
	}
	return nil
}

func fmtPF(p *float64) string {
	if p == nil {
		return "—"
	}
	return fmt.Sprintf("%.3f", *p)
}

func writeCheck(w io.Writer, rep checkReport, st *Station) {
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
