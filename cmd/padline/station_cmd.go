package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"math/bits"
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
// least refMarginPF inside the ladder's range (stray to stray + every
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
			if lo, hi := lad.StrayPF+refMarginPF, lad.StrayPF+sumPF(lad.RungsPF)-refMarginPF; len(lad.RungsPF) > 0 && r.TripPF > 0 && (r.TripPF < lo || r.TripPF > hi) {
				d.fail(key+".trip_pf", "%g pF is outside the ladder's reach for a check (%.2f to %.2f pF: %g pF inside stray and full ladder)", r.TripPF, lo, hi, refMarginPF)
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

// refMarginPF is how far inside the ladder's range a reference trip must
// lie: the check searches ±2.5 pF around it.
const refMarginPF = 2.5

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
		if err := waitLidOpen(ctx, r.fx, r.clk); err != nil {
			return err
		}
	}
	r.loaded = true
	return waitLid(ctx, r.fx, r.clk, 0, r.msg())
}

// waitLidOpen waits until the lid opens (the operator takes a unit out).
func waitLidOpen(ctx context.Context, fx *fixture.Fixture, clk fixture.Clock) error {
	for {
		closed, err := fx.LidClosed()
		if err != nil || !closed {
			return err
		}
		if ctx.Err() != nil {
			return ctx.Err()
		}
		clk.Sleep(50 * time.Millisecond)
	}
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
	f.String("db", "", "shift log (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
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

// ---------------------------------------------------------------------------
// Studies

type studyOptions struct {
	variant, station, ref string
	type1, grr            bool
	n                     int
	parts, trials, apprs  int
	serials               []string
	asJSON                bool
}

func (a *app) stationStudyCmd() *cobra.Command {
	var o studyOptions
	cmd := &cobra.Command{
		Use:   "study --variant V --station FILE (--type1 [--n 25] | --grr [--parts 10 --trials 3 --appraisers 3])",
		Short: "Type-1 or gauge R&R study of the station; stores it and the station's uncertainty U",
		Long: `study measures the station as a measurement system, with the variant's own
production plan (the same trip search every unit gets).

--type1  one reference unit (the first in the station file, or --ref) measured
         n times (n ≥ 25): bias against its registered trip, repeatability sd,
         Cg = 0.2·T/(6·s) and Cgk = (0.1·T − |bias|)/(3·s), T = the width of the
         variant's test limits (both ≥ 1.33 wanted).
--grr    gauge R&R by the AIAG average-and-range method (MSA 4th ed.): parts ×
         appraisers × trials; EV, AV, GRR, PV, TV, %GRR, ndc and the verdict
         (< 10 % acceptable, 10–30 % conditional, > 30 % not). Parts are
         different good units (--serials, or on the simulated line the first
         good serials of the variant). On the simulated line an appraiser is a
         separate round of loads: the sim has no operators, so AV measures
         load-to-load reproducibility only.

After either study the station's GUM budget is recomputed and stored: ladder
resolution δ/√12 (δ = the smallest rung), rung calibration
(cal_uncertainty_pf × √(rungs closed at the variant's nominal trip)), and
repeatability from the latest type-1 study (else the latest GRR);
U = 2·u_c. 'padline limits --station' and 'padline run' use U as the guard
band from then on.`,
		Example: `  padline station study --variant QM-205 --station demo-sim --db shift.db --type1
  padline station study --variant QM-205 --station demo-sim --db shift.db --grr --json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			if o.type1 == o.grr {
				return errors.New("station study: give exactly one of --type1 or --grr")
			}
			if o.type1 && o.n < 25 {
				return fmt.Errorf("station study: --n must be at least 25 for a type-1 study, got %d", o.n)
			}
			dbPath, err := shiftLogPath(cmd, o.station)
			if err != nil {
				return err
			}
			return a.stationStudy(cmd.Context(), o, dbPath)
		},
	}
	f := cmd.Flags()
	f.StringVar(&o.variant, "variant", "", "variant whose plan and test limits the study uses (required)")
	f.StringVar(&o.station, "station", "", "station file: a .yaml file or a built-in name (required)")
	f.String("db", "", "shift log (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
	f.BoolVar(&o.type1, "type1", false, "type-1 study of one reference unit")
	f.IntVar(&o.n, "n", 25, "type-1: measurements of the reference unit")
	f.StringVar(&o.ref, "ref", "", "type-1: the reference unit's serial (default: the first in the station file)")
	f.BoolVar(&o.grr, "grr", false, "gauge R&R study (AIAG average-and-range)")
	f.IntVar(&o.parts, "parts", 10, "GRR: parts (2–10)")
	f.IntVar(&o.trials, "trials", 3, "GRR: trials per part and appraiser (2–3)")
	f.IntVar(&o.apprs, "appraisers", 3, "GRR: appraisers (2–3; on the simulated line, rounds of loads)")
	f.StringSliceVar(&o.serials, "serials", nil, "GRR: the parts' serials (default on the simulated line: the first good serials)")
	f.BoolVar(&o.asJSON, "json", false, "print the study as one JSON object")
	_ = cmd.MarkFlagRequired("variant")
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

// measure runs the variant's production plan on the unit in the fixture and
// returns its trip point; nothing is recorded as a run.
func (r *rig) measure(ctx context.Context, pl *sequences.Plan, serial string) (float64, error) {
	run := &sequences.Run{Serial: serial, Variant: r.v.Name, Station: r.st.Name, Fixture: r.st.Fixture}
	t, err := pl.Execute(ctx, r.fx, r.clk, run)
	if err != nil {
		return 0, fmt.Errorf("%s: %w", serial, err)
	}
	if t.Trip == nil || !t.Trip.Found || t.Trip.Below {
		return 0, fmt.Errorf("%s: no trip point (%s %s): a study needs units that trip inside the ladder", serial, run.Verdict, run.FailCode)
	}
	return t.Trip.TripPF, nil
}

// studyReport is what a study records and prints with --json.
type studyReport struct {
	Kind        string                 `json:"kind"`
	Station     string                 `json:"station"`
	Fixture     string                 `json:"fixture"`
	Variant     string                 `json:"variant"`
	Time        time.Time              `json:"time"`
	TolPF       float64                `json:"tolerance_pf"`
	Note        string                 `json:"note,omitempty"`
	Serials     []string               `json:"serials"`
	Readings    any                    `json:"readings"`
	Type1       *sequences.Type1Result `json:"type1,omitempty"`
	GRR         *sequences.GRRResult   `json:"grr,omitempty"`
	StudyID     int64                  `json:"study_id"`
	Uncertainty *uncertaintyReport     `json:"uncertainty"`
}

type uncertaintyReport struct {
	sequences.Budget
	Source string `json:"source"`
}

func (a *app) stationStudy(ctx context.Context, o studyOptions, dbPath string) (err error) {
	r, err := a.openRig(ctx, o.variant, o.station, dbPath, o.asJSON)
	if err != nil {
		return err
	}
	defer func() {
		if cerr := r.close(ctx); cerr != nil && err == nil {
			err = cerr
		}
	}()
	pl, err := sequences.NewPlan(r.plan, levels(r.fx.Ladder()))
	if err != nil {
		return err
	}
	tol := r.rep.TestLimits.High - r.rep.TestLimits.Low
	rep := studyReport{Station: r.st.Name, Fixture: r.st.Fixture, Variant: r.v.Name, Time: time.Now().UTC(), TolPF: tol}
	if o.type1 {
		rep.Kind = store.StudyType1
		var ref *StationRef
		for i := range r.st.Trust.References {
			if o.ref == "" || r.st.Trust.References[i].Serial == o.ref {
				ref = &r.st.Trust.References[i]
				break
			}
		}
		if ref == nil {
			return fmt.Errorf("station study: station file %s registers no reference unit %q", r.st.Source.Name, o.ref)
		}
		rep.Serials = []string{ref.Serial}
		xs := make([]float64, 0, o.n)
		for i := range o.n {
			if r.line != nil || i == 0 {
				if err := r.load(ctx, ref.Serial, ref.SimDefects, "reference unit "+ref.Serial); err != nil {
					return err
				}
			}
			x, err := r.measure(ctx, pl, ref.Serial)
			if err != nil {
				return fmt.Errorf("station study: %w", err)
			}
			xs = append(xs, x)
		}
		res, err := sequences.Type1(xs, ref.TripPF, tol)
		if err != nil {
			return fmt.Errorf("station study: %w", err)
		}
		rep.Readings, rep.Type1 = xs, &res
		if r.line != nil {
			rep.Note = "simulated line: the reference unit was reloaded for every measurement"
		}
	} else {
		rep.Kind = store.StudyGRR
		serials := o.serials
		if len(serials) == 0 {
			if r.line == nil {
				return errors.New("station study: --serials is required on a gpio station (the parts' serials)")
			}
			serials = goodSerials(r.line, r.v, o.parts)
		}
		if len(serials) != o.parts {
			return fmt.Errorf("station study: %d serials for %d parts", len(serials), o.parts)
		}
		rep.Serials = serials
		data := make([][][]float64, o.apprs)
		for ap := range data {
			data[ap] = make([][]float64, o.parts)
			for tr := range o.trials {
				for p, s := range serials {
					what := fmt.Sprintf("part %d (%s) for appraiser %d, trial %d", p+1, s, ap+1, tr+1)
					if err := r.load(ctx, s, nil, what); err != nil {
						return err
					}
					x, err := r.measure(ctx, pl, s)
					if err != nil {
						return fmt.Errorf("station study: %w", err)
					}
					data[ap][p] = append(data[ap][p], x)
				}
			}
		}
		res, err := sequences.GaugeRR(data, tol)
		if err != nil {
			return fmt.Errorf("station study: %w", err)
		}
		rep.Readings, rep.GRR = data, &res
		if r.line != nil {
			rep.Note = "simulated line: each appraiser is a separate round of loads (the sim has no operators); every measurement is a fresh load"
		}
	}
	results, err := json.Marshal(rep)
	if err != nil {
		return err
	}
	if rep.StudyID, err = r.db.RecordStudy(ctx, store.Study{Kind: rep.Kind, Time: rep.Time, Station: r.st.Name, Fixture: r.st.Fixture, Results: results}); err != nil {
		return err
	}
	if rep.Uncertainty, err = r.saveBudget(ctx); err != nil {
		return err
	}
	if o.asJSON {
		enc := json.NewEncoder(a.stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(rep)
	}
	writeStudy(a.stdout, rep)
	return nil
}

// goodSerials returns the first n serials of the variant's numbering whose
// simulated units carry no defect: the parts of a GRR study (a real study
// picks good parts spread over the process range).
func goodSerials(line *sim.Line, v *Variant, n int) []string {
	var out []string
	for i := 1; len(out) < n && i < 100000; i++ {
		s := fmt.Sprintf("QM205-%06d", i)
		if v.Name != "QM-205" {
			s = fmt.Sprintf("%s-%06d", strings.ReplaceAll(v.Name, "-", ""), i)
		}
		if validSerial(v.Serial, s) != nil {
			continue
		}
		if len(line.Draw(s).Truth().Defects) == 0 {
			out = append(out, s)
		}
	}
	return out
}

// budgetInput builds the station's GUM inputs from the station file, the
// variant and the latest studies in the log.
func (r *rig) budgetInput(ctx context.Context) (sequences.StationBudgetInput, string, error) {
	in := sequences.StationBudgetInput{
		StepPF: slices.Min(r.st.Ladder.RungsPF),
		CalPF:  r.st.Ladder.CalUncertaintyPF,
	}
	// Rungs closed at the level nearest the variant's nominal trip.
	best := math.Inf(1)
	for _, lv := range levels(r.fx.Ladder()) {
		if d := math.Abs(lv.PF - r.rep.Trip.Nominal); d < best {
			best, in.ClosedRungs = d, bits.OnesCount16(lv.Pattern)
		}
	}
	source := fmt.Sprintf("station file %s (rungs, cal_uncertainty_pf %.3g pF); %d rungs closed at %s's nominal trip %.2f pF",
		r.st.Source.Name, in.CalPF, in.ClosedRungs, r.v.Name, r.rep.Trip.Nominal)
	if s, err := r.db.LastStudy(ctx, r.st.Name, r.st.Fixture, store.StudyType1); err == nil {
		var x studyReport
		if err := json.Unmarshal(s.Results, &x); err == nil && x.Type1 != nil {
			in.RepeatPF = x.Type1.SDPF
			in.RepeatSource = fmt.Sprintf("type-1 study %d (%s, n = %d)", s.ID, s.Time.Local().Format("2006-01-02 15:04"), x.Type1.N)
		}
	} else if !errors.Is(err, store.ErrNotFound) {
		return in, "", err
	}
	if in.RepeatPF == 0 {
		if s, err := r.db.LastStudy(ctx, r.st.Name, r.st.Fixture, store.StudyGRR); err == nil {
			var x studyReport
			if err := json.Unmarshal(s.Results, &x); err == nil && x.GRR != nil {
				in.RepeatPF = x.GRR.GRR
				in.RepeatSource = fmt.Sprintf("gauge R&R study %d (%s), GRR = √(EV² + AV²)", s.ID, s.Time.Local().Format("2006-01-02 15:04"))
			}
		} else if !errors.Is(err, store.ErrNotFound) {
			return in, "", err
		}
	}
	if in.RepeatPF > 0 {
		source += "; repeatability from " + in.RepeatSource
	} else {
		source += "; no study yet: repeatability not included"
	}
	return in, source, nil
}

// saveBudget computes the station's GUM budget and stores it.
func (r *rig) saveBudget(ctx context.Context) (*uncertaintyReport, error) {
	in, source, err := r.budgetInput(ctx)
	if err != nil {
		return nil, err
	}
	b := sequences.StationBudget(in)
	comps, err := json.Marshal(b.Components)
	if err != nil {
		return nil, err
	}
	if _, err := r.db.SaveUncertainty(ctx, store.Uncertainty{Time: time.Now().UTC(), Station: r.st.Name, Fixture: r.st.Fixture,
		UPF: b.U, UCPF: b.UC, Components: comps, Source: source}); err != nil {
		return nil, err
	}
	return &uncertaintyReport{Budget: b, Source: source}, nil
}

func writeStudy(w io.Writer, rep studyReport) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
	switch {
	case rep.Type1 != nil:
		t := rep.Type1
		p("type-1 study %d  %s / fixture %s, reference unit %s, %s plan", rep.StudyID, rep.Station, rep.Fixture, rep.Serials[0], rep.Variant)
		p("  n %d   reference %.3f pF   mean %.3f pF   bias %+.3f pF   repeatability sd %.4f pF", t.N, t.RefPF, t.MeanPF, t.BiasPF, t.SDPF)
		p("  T (test limit width) %.2f pF   Cg %.2f   Cgk %.2f   (≥ %.2f wanted: %s)", t.TolPF, t.Cg, t.Cgk, sequences.Type1MinIndex, map[bool]string{true: "capable", false: "NOT capable"}[t.Capable])
	case rep.GRR != nil:
		g := rep.GRR
		p("gauge R&R study %d  %s / fixture %s, %s plan: %d parts × %d appraisers × %d trials (AIAG average-and-range, MSA 4th ed.)",
			rep.StudyID, rep.Station, rep.Fixture, rep.Variant, g.Parts, g.Appraisers, g.Trials)
		p("  parts %s", strings.Join(rep.Serials, " "))
		p("  R̿ %.4f   X̄diff %.4f   Rp %.3f pF", g.RBarBar, g.XDiff, g.RP)
		p("  EV  %.4f pF  %6.2f %%    (repeatability)", g.EV, g.PctEV)
		p("  AV  %.4f pF  %6.2f %%    (reproducibility)", g.AV, g.PctAV)
		p("  GRR %.4f pF  %6.2f %%    %.2f %% of tolerance %.2f pF", g.GRR, g.PctGRR, g.PctTol, rep.TolPF)
		p("  PV  %.4f pF  %6.2f %%", g.PV, g.PctPV)
		p("  TV  %.4f pF", g.TV)
		p("  ndc %d (≥ 5 wanted)   verdict: %s", g.NDC, g.Verdict)
	}
	if rep.Note != "" {
		p("  note: %s", rep.Note)
	}
	if u := rep.Uncertainty; u != nil {
		p("")
		writeBudget(w, u.Budget, u.Source)
	}
}

func writeBudget(w io.Writer, b sequences.Budget, source string) {
	fmt.Fprintf(w, "uncertainty (GUM, JCGM 100:2008): U = %.3f pF (k = %g), u_c = %.4f pF\n", b.U, b.K, b.UC)
	for _, c := range b.Components {
		fmt.Fprintf(w, "  %-18s u = %.4f pF   %s\n", c.Name, c.U, c.Source)
	}
	fmt.Fprintf(w, "  from: %s\n", source)
}

// ---------------------------------------------------------------------------
// Status

type relayWear struct {
	Rung     int     `json:"rung"`
	Ops      uint64  `json:"operations"`
	Fraction float64 `json:"fraction_of_rated"`
	Warn     bool    `json:"warn"`
}

type statusReport struct {
	Station      string                 `json:"station"`
	Fixture      string                 `json:"fixture"`
	ShiftLog     string                 `json:"shift_log"`
	Ready        bool                   `json:"ready"`
	NotReady     string                 `json:"not_ready,omitempty"`
	LastCheck    *statusCheck           `json:"last_check"`
	LastType1    *statusStudy           `json:"last_type1"`
	LastGRR      *statusStudy           `json:"last_grr"`
	UPF          float64                `json:"U_pf"`
	USource      string                 `json:"U_source"`
	UComponents  []sequences.UComponent `json:"U_components,omitempty"`
	RatedOps     float64                `json:"rated_operations"`
	WarnFraction float64                `json:"relay_warn_fraction"`
	Relays       []relayWear            `json:"relays"`
}

type statusCheck struct {
	ID        int64     `json:"id"`
	Time      time.Time `json:"time"`
	OK        bool      `json:"ok"`
	RunsSince int64     `json:"runs_since"`
	Faults    []string  `json:"faults"`
}

type statusStudy struct {
	ID      int64     `json:"id"`
	Time    time.Time `json:"time"`
	Summary string    `json:"summary"`
}

func (a *app) stationStatusCmd() *cobra.Command {
	var station string
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "status --station FILE",
		Short: "Last check, last studies, the station's uncertainty U and relay wear",
		Long: `status shows, from the shift log, whether 'padline run' would test production
units now (and why not), the last reference check, the last type-1 and gauge
R&R studies, the station's uncertainty U with its components and where they
came from, and each rung's relay operations against ladder.rated_operations,
with a WARNING from relay_warn_fraction (default 0.8) of rated life.`,
		Example: `  padline station status --station demo-sim --db shift.db
  padline station status --station /etc/padline/station.yaml --json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			dbPath, err := shiftLogPath(cmd, station)
			if err != nil {
				return err
			}
			return a.stationStatus(cmd.Context(), station, dbPath, asJSON)
		},
	}
	f := cmd.Flags()
	f.StringVar(&station, "station", "", "station file: a .yaml file or a built-in name (required)")
	f.String("db", "", "shift log (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
	f.BoolVar(&asJSON, "json", false, "print the status as one JSON object")
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

func (a *app) stationStatus(ctx context.Context, station, dbPath string, asJSON bool) error {
	st, err := loadStation(station)
	if err != nil {
		return err
	}
	db, err := store.Open(dbPath)
	if err != nil {
		return err
	}
	defer db.Close()
	rep := statusReport{Station: st.Name, Fixture: st.Fixture, ShiftLog: dbPath, RatedOps: st.Ladder.RatedOperations, WarnFraction: st.Trust.RelayWarnFraction}
	if err := stationReady(ctx, db, st, time.Now()); err != nil {
		if !errors.Is(err, errNotReady) {
			return err
		}
		rep.NotReady = err.Error()
	} else {
		rep.Ready = true
	}
	if c, err := db.LastCheck(ctx, st.Name, st.Fixture); err == nil {
		sc := &statusCheck{ID: c.ID, Time: c.Time, OK: c.OK}
		var d checkReport
		if json.Unmarshal(c.Details, &d) == nil {
			sc.Faults = d.Faults
		}
		if sc.RunsSince, err = db.RunsSince(ctx, st.Name, st.Fixture, c.LastRunID); err != nil {
			return err
		}
		rep.LastCheck = sc
	} else if !errors.Is(err, store.ErrNotFound) {
		return err
	}
	for _, kind := range []string{store.StudyType1, store.StudyGRR} {
		s, err := db.LastStudy(ctx, st.Name, st.Fixture, kind)
		if errors.Is(err, store.ErrNotFound) {
			continue
		}
		if err != nil {
			return err
		}
		ss := &statusStudy{ID: s.ID, Time: s.Time}
		var x studyReport
		if json.Unmarshal(s.Results, &x) == nil {
			switch {
			case x.Type1 != nil:
				ss.Summary = fmt.Sprintf("n %d, bias %+.3f pF, sd %.4f pF, Cg %.2f, Cgk %.2f", x.Type1.N, x.Type1.BiasPF, x.Type1.SDPF, x.Type1.Cg, x.Type1.Cgk)
			case x.GRR != nil:
				ss.Summary = fmt.Sprintf("%%GRR %.2f %%, ndc %d, %s", x.GRR.PctGRR, x.GRR.NDC, x.GRR.Verdict)
			}
		}
		if kind == store.StudyType1 {
			rep.LastType1 = ss
		} else {
			rep.LastGRR = ss
		}
	}
	if u, err := db.LastUncertainty(ctx, st.Name, st.Fixture); err == nil {
		rep.UPF, rep.USource = u.UPF, fmt.Sprintf("shift log %s (%s): %s", dbPath, u.Time.Local().Format("2006-01-02 15:04"), u.Source)
		_ = json.Unmarshal(u.Components, &rep.UComponents)
	} else if errors.Is(err, store.ErrNotFound) {
		rep.UPF, rep.USource = stationU(st)
	} else {
		return err
	}
	ops, err := db.LoadRelayOps(ctx, st.Fixture)
	if err != nil {
		return err
	}
	for i := range st.Ladder.RungsPF {
		w := relayWear{Rung: i}
		if i < len(ops) {
			w.Ops = ops[i]
		}
		w.Fraction = float64(w.Ops) / st.Ladder.RatedOperations
		w.Warn = w.Fraction >= st.Trust.RelayWarnFraction
		rep.Relays = append(rep.Relays, w)
	}
	if asJSON {
		enc := json.NewEncoder(a.stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(rep)
	}
	writeStatus(a.stdout, rep, st)
	return nil
}

func writeStatus(w io.Writer, rep statusReport, st *Station) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
	p("station %s / fixture %s   shift log %s", rep.Station, rep.Fixture, rep.ShiftLog)
	if rep.Ready {
		p("production   READY: the last reference check passed and is current")
	} else {
		p("production   REFUSED: %s", rep.NotReady)
	}
	if c := rep.LastCheck; c != nil {
		v := "passed"
		if !c.OK {
			v = "REFUSED: " + strings.Join(c.Faults, "; ")
		}
		p("last check   %d at %s: %s; %d units tested since", c.ID, c.Time.Local().Format("2006-01-02 15:04:05"), v, c.RunsSince)
	} else {
		p("last check   none")
	}
	for _, x := range []struct {
		name string
		s    *statusStudy
	}{{"type-1", rep.LastType1}, {"gauge R&R", rep.LastGRR}} {
		if x.s == nil {
			p("last %-7s none", x.name)
			continue
		}
		p("last %-7s %d at %s: %s", x.name, x.s.ID, x.s.Time.Local().Format("2006-01-02 15:04"), x.s.Summary)
	}
	p("uncertainty  U = %.3f pF (k = 2) from %s", rep.UPF, rep.USource)
	for _, c := range rep.UComponents {
		p("             %-18s u = %.4f pF   %s", c.Name, c.U, c.Source)
	}
	p("relays       rated %.3g operations; warning at %.0f %% of rated life", rep.RatedOps, 100*rep.WarnFraction)
	for _, r := range rep.Relays {
		warn := ""
		if r.Warn {
			warn = "   WARNING: replace this rung's relay"
		}
		p("  rung %d  %6.2f pF  %12d ops  %7.3f %%%s", r.Rung, st.Ladder.RungsPF[r.Rung], r.Ops, 100*r.Fraction, warn)
	}
}
