package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"

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

// prompts is where a station command's operator prompts go: stdout, or
// stderr under --json.
func (a *app) prompts(asJSON bool) io.Writer {
	if asJSON {
		return a.stderr
	}
	return a.stdout
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

func (a *app) stationCheck(ctx context.Context, variant, station, dbPath string, asJSON bool) error {
	prompts := a.prompts(asJSON)
	rep, st, err := session.StationCheck(ctx, variant, station, dbPath, session.RigOptions{GPIO: openGPIO, PanelGPIO: openPanelGPIO},
		func(ci session.CheckInfo) {
			if ci.Serial == "" && ci.Message != "" {
				fmt.Fprintln(prompts, ci.Message)
			}
		})
	if err != nil && !errors.Is(err, session.ErrNotReady) {
		return err
	}
	if asJSON {
		if jerr := writeJSON(a.stdout, rep); jerr != nil {
			return jerr
		}
	} else {
		session.WriteCheck(a.stdout, rep, st)
	}
	return refused(err)
}

// writeJSON prints v as one indented JSON object.
func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}
