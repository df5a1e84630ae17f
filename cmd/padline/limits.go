package main

import (
	"fmt"
	"strings"

	"github.com/spf13/cobra"

	"padline/sequences/session"
	"padline/sequences/timing"
)

// limitsCmd builds `padline limits`.
func (a *app) limitsCmd() *cobra.Command {
	var (
		q      session.LimitsQuery
		asJSON bool
	)
	cmd := withHelp("limits", &cobra.Command{
		Use:   "limits --variant NAME|FILE",
		Short: "Predict a variant's trip point and clock, and derive guard-banded test limits",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) (err error) {
			if q.Variant == "" {
				return fmt.Errorf("limits: --variant is required (a .yaml file or one of: %s)", strings.Join(session.BuiltinVariants(), ", "))
			}
			q.UncertaintyGiven = cmd.Flags().Changed("uncertainty-pf")
			if q.Station != "" && !q.UncertaintyGiven {
				if q.ShiftLog, err = shiftLogPath(cmd, q.Station); err != nil {
					return err
				}
			}
			rep, err := session.VariantLimits(cmd.Context(), q)
			rep.WriteWarnings(a.stderr) // the variant file's unusual values
			if err != nil {
				return err
			}
			if asJSON {
				return rep.WriteJSON(a.stdout)
			}
			rep.WriteText(a.stdout)
			return nil
		},
	})
	f := cmd.Flags()
	f.StringVar(&q.Variant, "variant", "", "variant: a .yaml file or a built-in name ("+strings.Join(session.BuiltinVariants(), ", ")+")")
	f.StringVar(&q.Station, "station", "", "station file: take U from its shift log (stored by 'padline station study'), else its uncertainty_pf, else the stand-in")
	f.String("db", "", "shift log for --station (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
	f.Float64Var(&q.UncertaintyPF, "uncertainty-pf", 0, fmt.Sprintf("station's expanded measurement uncertainty U (k = 2) in pF; each limit is pulled in by U (default: --station's U, else the %g pF stand-in)", session.DefaultUncertaintyPF))
	f.IntVar(&q.Draws, "draws", timing.DefaultDraws, "Monte Carlo draws")
	f.Uint64Var(&q.Seed, "seed", 1, "Monte Carlo seed (same seed, same numbers)")
	f.BoolVar(&asJSON, "json", false, "print one JSON object instead of the report")
	cmd.AddCommand(a.limitsVersionCmds()...)
	return cmd
}
