package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"padline/fixture"
	"padline/fixture/sim"
	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/timing"
	"padline/store"
)

// exitStationRefused is the exit status of a refused check and of a run
// the gate refused.
const exitStationRefused = 3

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

// rig is a station opened for a trust command: the session package's rig
// (variant, station, limits, fixture, simulated line) and the shift log.
type rig struct {
	*session.Rig
	a      *app
	v      *session.Variant
	st     *session.Station
	rep    timing.Report
	plan   sequences.PlanConfig
	fx     *fixture.Fixture
	clk    fixture.Clock
	line   *sim.Line
	db     *store.DB
	dbPath string
	ld     *session.Loader
	quiet  bool // --json: prompts go to stderr
}

func (a *app) openRig(ctx context.Context, variant, station, dbPath string, quiet bool) (*rig, error) {
	sr, err := session.OpenRig(ctx, variant, station, dbPath, session.RigOptions{GPIO: openGPIO})
	if err != nil {
		return nil, err
	}
	db, err := store.Open(dbPath)
	if err != nil {
		return nil, errors.Join(err, sr.Halt())
	}
	r := &rig{Rig: sr, a: a, v: sr.Variant, st: sr.Station, rep: sr.Limits, plan: sr.PlanConfig, fx: sr.Fixture,
		clk: sr.Clock, line: sr.Line, db: db, dbPath: dbPath, quiet: quiet}
	r.ld = &session.Loader{Rig: sr, Prompt: func(msg string) { fmt.Fprintln(r.msg(), msg) }}
	if err := session.LoadRelayWear(ctx, db, sr); err != nil {
		return nil, errors.Join(err, r.close(ctx))
	}
	return r, nil
}

// close halts the fixture, saves the relay counts and closes the log.
func (r *rig) close(ctx context.Context) error {
	herr := r.Halt()
	serr := session.SaveRelayWear(ctx, r.db, r.Rig)
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

// load puts the unit with serial in the fixture (see session.Loader).
func (r *rig) load(ctx context.Context, serial string, simDefects []string, what string) error {
	return r.ld.Load(ctx, serial, simDefects, what)
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
	if _, panel := panelStation(station); panel {
		return a.stationCheckPanel(ctx, variant, station, dbPath, asJSON)
	}
	r, err := a.openRig(ctx, variant, station, dbPath, asJSON)
	if err != nil {
		return err
	}
	defer func() {
		if cerr := r.close(ctx); cerr != nil && err == nil {
			err = cerr
		}
	}()
	rep, err := session.RunCheck(ctx, r.Rig, r.db, func(ci session.CheckInfo) {
		if ci.Serial == "" && ci.Message != "" {
			fmt.Fprintln(r.msg(), ci.Message)
		}
	})
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
		writeCheck(a.stdout, rep, r.st)
	}
	if !rep.OK {
		return &exitError{code: exitStationRefused, err: fmt.Errorf("station %s fixture %s refused: %s", r.st.Name, r.st.Fixture, strings.Join(rep.Faults, "; "))}
	}
	return nil
}

func fmtPF(p *float64) string {
	if p == nil {
		return "—"
	}
	return fmt.Sprintf("%.3f", *p)
}

func writeCheck(w io.Writer, rep session.CheckReport, st *session.Station) {
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
