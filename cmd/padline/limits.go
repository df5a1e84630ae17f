package main

import (
	"encoding/json"
	"fmt"
	"io"
	"strings"

	"github.com/spf13/cobra"

	"padline/sequences/session"
	"padline/sequences/timing"
)

// limitsCmd builds `padline limits`.
func (a *app) limitsCmd() *cobra.Command {
	var (
		variant string
		station string
		u       float64
		draws   int
		seed    uint64
		asJSON  bool
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
		RunE: func(cmd *cobra.Command, _ []string) error {
			if variant == "" {
				return fmt.Errorf("limits: --variant is required (a .yaml file or one of: %s)", strings.Join(session.BuiltinVariants(), ", "))
			}
			if draws < 1 {
				return fmt.Errorf("limits: --draws must be ≥ 1, got %d", draws)
			}
			v, err := session.LoadVariant(variant)
			if err != nil {
				return err
			}
			for _, w := range v.Warnings {
				fmt.Fprintln(a.stderr, "warning:", w)
			}
			uFrom := "stand-in (no --station, no --uncertainty-pf)"
			switch {
			case !cmd.Flags().Changed("uncertainty-pf") && station == "":
				u = session.DefaultUncertaintyPF
			case cmd.Flags().Changed("uncertainty-pf"):
				uFrom = "--uncertainty-pf"
			case station != "":
				st, err := session.LoadStation(station)
				if err != nil {
					return err
				}
				dbPath, err := shiftLogPath(cmd, station)
				if err != nil {
					return err
				}
				if u, uFrom, err = session.Uncertainty(cmd.Context(), dbPath, st); err != nil {
					return err
				}
			}
			rep, err := v.Limits(timing.Options{Draws: draws, Seed: seed, UncertaintyPF: u})
			if err != nil {
				return err
			}
			if asJSON {
				return writeLimitsJSON(a.stdout, v, rep, uFrom)
			}
			writeLimits(a.stdout, v, rep)
			fmt.Fprintf(a.stdout, "U from      %s\n", uFrom)
			return nil
		},
	}
	f := cmd.Flags()
	f.StringVar(&variant, "variant", "", "variant: a .yaml file or a built-in name ("+strings.Join(session.BuiltinVariants(), ", ")+")")
	f.StringVar(&station, "station", "", "station file: take U from its shift log (stored by 'padline station study'), else its uncertainty_pf, else the stand-in")
	f.String("db", "", "shift log for --station (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
	f.Float64Var(&u, "uncertainty-pf", 0, fmt.Sprintf("station's expanded measurement uncertainty U (k = 2) in pF; each limit is pulled in by U (default: --station's U, else the %g pF stand-in)", session.DefaultUncertaintyPF))
	f.IntVar(&draws, "draws", timing.DefaultDraws, "Monte Carlo draws")
	f.Uint64Var(&seed, "seed", 1, "Monte Carlo seed (same seed, same numbers)")
	f.BoolVar(&asJSON, "json", false, "print one JSON object instead of the report")
	cmd.AddCommand(a.limitsVersionCmds()...)
	return cmd
}

// limitsJSON is what `limits --json` prints: the variant's identity and the
// timing report.
type limitsJSON struct {
	Variant    string `json:"variant"`
	Source     string `json:"source"`
	ConfigHash string `json:"config_hash"`
	// USource says where the guard band U came from.
	USource string `json:"uncertainty_source"`
	timing.Report
}

func writeLimitsJSON(w io.Writer, v *session.Variant, rep timing.Report, uFrom string) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(limitsJSON{Variant: v.Name, Source: v.Source.Name, ConfigHash: v.Source.Hash, USource: uFrom, Report: rep}); err != nil {
		return fmt.Errorf("limits: write json: %w", err)
	}
	return nil
}

// cornerPF prints a corner trip point; a negative one is not a capacitance
// but a unit that trips with nothing at the pad, and is said so.
func cornerPF(pf float64) string {
	if pf < 0 {
		return "below 0 pF (such a unit trips with nothing at the pad)"
	}
	return fmt.Sprintf("%.2f", pf)
}

func writeLimits(w io.Writer, v *session.Variant, r timing.Report) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
	p("variant     %s — %s", v.Name, v.Description)
	p("file        %s (sha256 %.12s)", v.Source.Name, v.Source.Hash)
	p("")
	p("clock       nominal %.1f Hz   corners %.1f … %.1f Hz   (half periods %.3f / %.3f ms)",
		r.Clock.Nominal, r.Clock.CornerLow, r.Clock.CornerHigh, 1e3*r.Clock.HighS, 1e3*r.Clock.LowS)
	p("trip point  nominal %.2f pF   corners %s … %.2f pF", r.Trip.Nominal, cornerPF(r.Trip.CornerLow), r.Trip.CornerHigh)
	if n := r.Trip.NoTripCorners; n > 0 {
		p("            at %d of %d corners the unit cannot trip (the flip-flop samples before the sense node can fall)", n, r.Trip.Corners)
	}
	p("            Monte Carlo (%d draws, seed %d): mean %.2f pF, sd %.2f pF", r.Draws, r.Seed, r.Trip.MCMean, r.Trip.MCSD)
	p("            percentiles 0.135 %% %.2f   50 %% %.2f   99.865 %% %.2f pF", r.Trip.MCP00135, r.Trip.MCP50, r.Trip.MCP99865)
	writeGate(w, r)
	p("")
	writeSensitivity(w, r)
	p("")
	p("spec window no trip at ≤ %.2f pF, trip by %.2f pF", r.Spec.NoTripAtPF, r.Spec.TripByPF)
	p("model       %.2f … %.2f pF (worst-case corners)", r.ModelLimits.Low, r.ModelLimits.High)
	p("guard band  %.2f pF each side (U, k = 2; ISO 14253-1 acceptance zone)", r.GuardBandPF)
	p("test limits %.2f … %.2f pF", r.TestLimits.Low, r.TestLimits.High)
	p("")
	p("predicted   Cpk %.2f   yield %.4f %% (Monte Carlo)   %.4f %% (normal model)",
		r.Predicted.Cpk, 100*r.Predicted.Yield, 100*r.Predicted.YieldNormal)
	if len(r.Warnings) == 0 {
		p("warnings    none")
		return
	}
	for _, msg := range r.Warnings {
		p("WARNING     %s", msg)
	}
}
