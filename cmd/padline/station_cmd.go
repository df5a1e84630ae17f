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
	cmd := withHelp("station", &cobra.Command{
		Use:   "station",
		Short: "Prove the station measures right: reference check, studies, status",
	})
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
	cmd := withHelp("station-check", &cobra.Command{
		Use:   "check --variant V --station FILE",
		Short: "Test the reference units and self-test the ladder; refuse the station on any fault",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			dbPath, err := shiftLogPath(cmd, station)
			if err != nil {
				return err
			}
			return a.stationCheck(cmd.Context(), variant, station, dbPath, asJSON)
		},
	})
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
