package main

import (
	"context"
	"errors"
	"fmt"
	"padline/sequences/session"

	"github.com/spf13/cobra"
)

func (a *app) stationStudyCmd() *cobra.Command {
	var (
		o                session.StudyOptions
		grr              bool
		asJSON           bool
		variant, station string
	)
	cmd := withHelp("station-study", &cobra.Command{
		Use:   "study --variant V --station FILE (--type1 [--n 25] | --grr [--parts 10 --trials 3 --appraisers 3])",
		Short: "Type-1 or gauge R&R study of the station; stores it and the station's uncertainty U",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			if o.Type1 == grr {
				return errors.New("station study: give exactly one of --type1 or --grr")
			}
			if o.Type1 && o.N < 25 {
				return fmt.Errorf("station study: --n must be at least 25 for a type-1 study, got %d", o.N)
			}
			dbPath, err := shiftLogPath(cmd, station)
			if err != nil {
				return err
			}
			return a.stationStudy(cmd.Context(), variant, station, dbPath, o, asJSON)
		},
	})
	f := cmd.Flags()
	f.StringVar(&variant, "variant", "", "variant whose plan and test limits the study uses (required)")
	f.StringVar(&station, "station", "", "station file: a .yaml file or a built-in name (required)")
	addShiftLogFlag(f)
	f.BoolVar(&o.Type1, "type1", false, "type-1 study of one reference unit")
	f.IntVar(&o.N, "n", 25, "type-1: measurements of the reference unit")
	f.StringVar(&o.Ref, "ref", "", "type-1: the reference unit's serial (default: the first in the station file)")
	f.BoolVar(&grr, "grr", false, "gauge R&R study (AIAG average-and-range)")
	f.IntVar(&o.Parts, "parts", 10, "GRR: parts (2–10)")
	f.IntVar(&o.Trials, "trials", 3, "GRR: trials per part and appraiser (2–3)")
	f.IntVar(&o.Appraisers, "appraisers", 3, "GRR: appraisers (2–3; on the simulated line, rounds of loads)")
	f.StringSliceVar(&o.Serials, "serials", nil, "GRR: the parts' serials (default on the simulated line: the first good serials)")
	f.BoolVar(&asJSON, "json", false, "print the study as one JSON object")
	_ = cmd.MarkFlagRequired("variant")
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

// stationStudy opens the station, makes the study and prints it.
func (a *app) stationStudy(ctx context.Context, variant, station, dbPath string, o session.StudyOptions, asJSON bool) (err error) {
	b, err := session.OpenBench(ctx, variant, station, dbPath, session.RigOptions{GPIO: openGPIO})
	if err != nil {
		return err
	}
	defer func() { err = errors.Join(err, b.Close(ctx)) }()
	prompts := a.prompts(asJSON)
	o.Prompt = func(msg string) { fmt.Fprintln(prompts, msg) }
	rep, err := session.RunStudy(ctx, b.Rig, b.DB, o)
	if err != nil {
		return err
	}
	if asJSON {
		return writeJSON(a.stdout, rep)
	}
	session.WriteStudy(a.stdout, rep)
	return nil
}
