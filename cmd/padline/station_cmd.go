package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"strings"

	"github.com/spf13/cobra"

	"padline/sequences/session"
)

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
	cmd.AddCommand(a.stationCheckCmd(), a.stationStudyCmd(), a.stationStatusCmd(), a.stationValidateCmd(), a.stationRegisterCmd())
	return cmd
}

// openRig opens the station for a trust command (check, study) and says
// where its operator prompts go: stdout, or stderr under --json.
func (a *app) openRig(ctx context.Context, variant, station, dbPath string, asJSON bool) (*session.Bench, io.Writer, error) {
	b, err := session.OpenBench(ctx, variant, station, dbPath, session.RigOptions{GPIO: openGPIO})
	if asJSON {
		return b, a.stderr, err
	}
	return b, a.stdout, err
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
	r, prompts, err := a.openRig(ctx, variant, station, dbPath, asJSON)
	if err != nil {
		return err
	}
	defer func() {
		if cerr := r.Close(ctx); cerr != nil && err == nil {
			err = cerr
		}
	}()
	rep, err := session.RunCheck(ctx, r.Rig, r.DB, func(ci session.CheckInfo) {
		if ci.Serial == "" && ci.Message != "" {
			fmt.Fprintln(prompts, ci.Message)
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
		session.WriteCheck(a.stdout, rep, r.Station)
	}
	if !rep.OK {
		return &exitError{code: exitStationRefused, err: fmt.Errorf("station %s fixture %s refused: %s", r.Station.Name, r.Station.Fixture, strings.Join(rep.Faults, "; "))}
	}
	return nil
}
