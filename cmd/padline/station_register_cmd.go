package main

import (
	"context"
	"encoding/json"
	"fmt"

	"github.com/spf13/cobra"

	"padline/sequences/session"
)

func (a *app) stationRegisterCmd() *cobra.Command {
	var variant, station string
	var o session.RegisterOptions
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "register-ref --station FILE --variant V --serial S [--n 25]",
		Short: "Measure a kept good unit n times and register it as a reference unit",
		Long: `register-ref measures the unit in the fixture n times with the variant's
production plan and writes its reference_units entry into the station file,
keeping the file's comments and order: trip_pf is the mean; allowed_dev_pf is
the larger of the station's U and the 99.73 % prediction interval of one more
reading. When the file cannot be written (no permission, a built-in station)
it prints the entry to paste instead. Nothing is recorded in the shift log;
the station file changes, so a reference check is due before production.`,
		Example: `  padline station register-ref --station station.yaml --variant QM-205 --serial QM205-REF-54`,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			dbPath, err := shiftLogPath(cmd, station)
			if err != nil {
				return err
			}
			return a.stationRegister(cmd.Context(), variant, station, dbPath, o, asJSON)
		},
	}
	f := cmd.Flags()
	f.StringVar(&station, "station", "", "station file to register the unit in (required)")
	f.StringVar(&variant, "variant", "", "variant whose production plan measures the unit (required)")
	f.StringVar(&o.Serial, "serial", "", "the kept good unit's serial (required)")
	f.IntVar(&o.N, "n", session.MinRegisterN, "measurements of the unit")
	addShiftLogFlag(f)
	f.BoolVar(&asJSON, "json", false, "print the measurement and the entry as one JSON object")
	for _, n := range []string{"station", "variant", "serial"} {
		_ = cmd.MarkFlagRequired(n)
	}
	return cmd
}

func (a *app) stationRegister(ctx context.Context, variant, station, dbPath string, o session.RegisterOptions, asJSON bool) (err error) {
	r, prompts, err := a.openRig(ctx, variant, station, dbPath, asJSON)
	if err != nil {
		return err
	}
	defer func() {
		if cerr := r.Close(ctx); cerr != nil && err == nil {
			err = cerr
		}
	}()
	o.Prompt = func(msg string) { fmt.Fprintln(prompts, msg) }
	rep, err := session.MeasureReference(ctx, r.Rig, o)
	if err == nil {
		err = session.RegisterReference(r.Station, &rep)
	}
	if err != nil {
		return err
	}
	if asJSON {
		enc := json.NewEncoder(a.stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(rep)
	}
	session.WriteRegister(a.stdout, rep)
	return nil
}
