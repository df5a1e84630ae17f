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
	cmd := &cobra.Command{
		Use:   "limits --variant NAME|FILE",
		Short: "Predict a variant's trip point and clock, and derive guard-banded test limits",
		Long: `limits works out, before any unit is tested, where a good unit's trip point
can fall and which limits the station should test it against.

From the variant file's circuit values and tolerances it computes:
  clock      the oscillator frequency, nominal and at its worst-case corners;
  trip point the external capacitance at the pad at which the unit trips:
             nominal, worst-case corners (every min/max combination), and a
             seeded Monte Carlo (mean, sd, 0.135/50/99.865 % percentiles);
  spec       the product's window: no trip at or below no_trip_at_pf, a trip
             at or below trip_by_pf;
  guard band the station's expanded uncertainty U (k = 2); per ISO 14253-1
             each limit is pulled in by U;
  test limits the tighter of the model corners and the spec window, shrunk
             by U: what 'padline run' judges the measured trip against;
  capability the design's predicted Cpk and yield against the spec window.
  gates      the gates' output resistance (in series with R_s and R_o) and
             the clock edge time the model includes, what ideal gates would
             predict instead, and the race's length in edge times;
  sensitivity which input moves the trip point most: ∂trip/∂input times the
             input's tolerance (3σ where the file gives sd), ranked.
Warnings say plainly when the design cannot meet its spec window, and when
the race lasts fewer than ten clock edge times (measure units then: the
model is least trustworthy there; README, "What the timing model includes").

--variant takes a file path (anything ending in .yaml/.yml, or an existing
file) or the name of a built-in demo variant (QM-205, QM-212). The
same --seed always gives the same numbers.

U comes from --uncertainty-pf when given; else, with --station, from the
station's uncertainty stored in its shift log by 'padline station study'
(GUM: ladder resolution, rung calibration, repeatability), else the station
file's uncertainty_pf; else a 0.3 pF stand-in. The report says which.`,
		Example: `  padline limits --variant QM-205
  padline limits --variant testdata/variants/QM-212.yaml --uncertainty-pf 0.5
  padline limits --variant QM-205 --draws 100000 --seed 7 --json
  padline limits --variant QM-205 --station demo-sim --db shift.db`,
		Args: cobra.NoArgs,
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
	}
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
