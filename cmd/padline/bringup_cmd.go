package main

import (
	"errors"
	"fmt"
	"time"

	"github.com/spf13/cobra"

	"padline/fixture/hostpins"
	"padline/sequences/session"
)

// Bring-up (README "Bringing up a station", "Approving limits").

func (a *app) stationValidateCmd() *cobra.Command {
	var variant, station string
	var asJSON bool
	cmd := &cobra.Command{Use: "validate --station FILE [--variant V]", Short: "Check a station file completely without touching a pin", Args: cobra.NoArgs,
		Long: `validate reads the station file as 'padline run' does, checks its ladder and
reference units against the --variant's test limits and, on a driver: gpio
station, every pin name against the GPIO chips and lines the host has (listed,
or said plainly to be none). Nothing is switched. Exit 1 when not valid.`,
		RunE: func(cmd *cobra.Command, _ []string) error {
			rep, err := session.ValidateStation(station, variant, hostpins.Inventory)
			if err == nil {
				err = session.Emit(a.stdout, asJSON, rep)
			}
			if err == nil && !rep.OK {
				err = errors.New("station validate: " + rep.Station + " is not valid")
			}
			return err
		}}
	cmd.Flags().StringVar(&station, "station", "", "station file: a .yaml file or a built-in name (required)")
	cmd.Flags().StringVar(&variant, "variant", "", "variant whose test limits the ladder and references must suit")
	cmd.Flags().BoolVar(&asJSON, "json", false, "print the findings as one JSON object")
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

func (a *app) stationRegisterCmd() *cobra.Command {
	var variant, station string
	var o session.RegisterOptions
	var asJSON bool
	cmd := &cobra.Command{Use: "register-ref --station FILE --variant V --serial S [--n 25]", Short: "Measure a kept good unit n times and register it as a reference unit", Args: cobra.NoArgs,
		Long: `register-ref measures the unit in the fixture n times with the variant's plan
and writes its reference_units entry (README "Bringing up a station") into
the station file, keeping comments and order, or prints it to paste when it
may not write the file. A reference check is then due.`,
		RunE: func(cmd *cobra.Command, _ []string) (err error) {
			dbPath, err := shiftLogPath(cmd, station)
			if err != nil {
				return err
			}
			r, err := session.OpenBench(cmd.Context(), variant, station, dbPath, session.RigOptions{GPIO: openGPIO})
			if err != nil {
				return err
			}
			defer func() { err = errors.Join(err, r.Close(cmd.Context())) }()
			o.Prompt = func(msg string) { fmt.Fprintln(a.prompts(asJSON), msg) }
			rep, err := session.MeasureReference(cmd.Context(), r.Rig, o)
			if err == nil {
				err = session.RegisterReference(r.Station, &rep)
			}
			if err != nil {
				return err
			}
			return session.Emit(a.stdout, asJSON, rep)
		}}
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

func (a *app) limitsVersionCmds() (out []*cobra.Command) {
	for _, s := range [][2]string{
		{"pending --station FILE [--variant V]", "List limits versions awaiting approval (with --variant, record the limits its file and the station's U give now first)"},
		{"approve ID --station FILE --by NAME --why TEXT", "Approve a pending limits version: runs judge against it from then on"},
		{"reject ID --station FILE --by NAME --why TEXT", "Reject a pending limits version: runs stay refused until the limits change again"},
		{"diff A B --station FILE", "Show what changed between two limits versions, or two variants' current limits"},
	} {
		var req session.LimitsRequest
		var asJSON bool
		cmd := &cobra.Command{Use: s[0], Short: s[1], RunE: func(cmd *cobra.Command, args []string) (err error) {
			req.Action, req.Args = cmd.Name(), args
			if req.ShiftLog, err = shiftLogPath(cmd, req.Station); err != nil {
				return err
			}
			res, err := session.DoLimits(cmd.Context(), req, time.Now())
			if err != nil {
				return err
			}
			return session.Emit(a.stdout, asJSON, res)
		}}
		f := cmd.Flags()
		f.StringVar(&req.Station, "station", "", "station file: its shift_log, and (pending) its station and fixture")
		addShiftLogFlag(f)
		f.BoolVar(&asJSON, "json", false, "print the versions as one JSON object")
		if cmd.Name() == "pending" {
			f.StringVar(&req.Variant, "variant", "", "variant whose current limits to record first")
		} else if cmd.Name() != "diff" {
			f.StringVar(&req.By, "by", "", "who decides (required)")
			f.StringVar(&req.Why, "why", "", "the reason, kept with the version (required)")
		}
		out = append(out, cmd)
	}
	return out
}
