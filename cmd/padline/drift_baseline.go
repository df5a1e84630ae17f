package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"time"

	"github.com/spf13/cobra"

	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
	"padline/store/drift"
	"padline/store/driftreport"
)

// driftBaselineCmd builds `padline drift baseline` with `set` and `show`.
func (a *app) driftBaselineCmd() *cobra.Command {
	cmd := &cobra.Command{
		Use:   "baseline",
		Short: "Approve the centre and σ drift charts a variant against",
		Long: `Without an approved baseline, 'padline drift' takes its limits from the first
--baseline points of whatever window is selected (a provisional baseline: a
window that starts after a step shows no drift). 'baseline set' computes the
centre (mean) and σ (MR̄/d2) of the variant's passed units' trip points over a
window you name and stores them, approved, in the shift log; from then on
'padline drift --variant V' charts against them unless --baseline, --target
or --sigma is given.`,
		Args: cobra.NoArgs,
	}
	cmd.AddCommand(a.driftBaselineSetCmd(), a.driftBaselineShowCmd())
	return cmd
}

func (a *app) driftBaselineSetCmd() *cobra.Command {
	var variant, since, until, name, by, stationFile string
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "set --variant V --since T --until T [--name N] [--approved-by WHO]",
		Short: "Store an approved baseline computed over a window of the shift log",
		Example: `  padline drift baseline set --variant QM-205 --since "2026-11-30 06:00" --until "2026-11-30 14:00" --name "laminate A" --approved-by ana
  padline drift --variant QM-205          # now charts against "laminate A"`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ctx := cmd.Context()
			if variant == "" || since == "" || until == "" {
				return errors.New("drift baseline set: give --variant V --since T --until T (the window of in-control units to approve)")
			}
			now := time.Now()
			f := store.Filter{Verdict: sequences.Pass}
			var err error
			if f.Since, err = store.ParseWhen(since, now); err != nil {
				return fmt.Errorf("drift baseline set: --since: %w", err)
			}
			if f.Until, err = store.ParseWhen(until, now); err != nil {
				return fmt.Errorf("drift baseline set: --until: %w", err)
			}
			path, err := shiftLogPath(cmd, stationFile)
			if err != nil {
				return fmt.Errorf("drift baseline set: %w", err)
			}
			if _, err := os.Stat(path); errors.Is(err, fs.ErrNotExist) {
				return fmt.Errorf("drift baseline set: no shift log at %s (give --db PATH, set PADLINE_DB, or --station-file)", path)
			}
			db, err := store.Open(path)
			if err != nil {
				return fmt.Errorf("drift baseline set: %w", err)
			}
			defer db.Close()
			v, _, err := session.VariantFor(ctx, db, variant)
			if err == nil {
				variant = v.Name
			}
			f.Variant = variant
			if f.Driver, err = session.DriverFilter(ctx, db, false); err != nil {
				return fmt.Errorf("drift baseline set: %w", err)
			}
			pts, err := db.TripValues(ctx, f, 0)
			if err != nil {
				return fmt.Errorf("drift baseline set: %w", err)
			}
			if len(pts) < driftMinApproved {
				return fmt.Errorf("drift baseline set: %d passed units of %s with a trip point between %s and %s; an approved baseline needs at least %d",
					len(pts), variant, since, until, driftMinApproved)
			}
			x := make([]float64, len(pts))
			for i, p := range pts {
				x[i] = p.TripPF
			}
			c, err := drift.IndividualsChart(x, drift.FirstN(len(x)), drift.Options{})
			if err != nil {
				return fmt.Errorf("drift baseline set: %w", err)
			}
			first, last := pts[0], pts[len(pts)-1]
			b := store.Baseline{Variant: variant, Name: name, Centre: c.Location.Target, Sigma: c.Location.Sigma, N: len(x),
				Method: "mean, MR̄/d2 of passed units' trip points", Since: first.Finished, Until: last.Finished,
				FirstSerial: db.RunAt(ctx, variant, first.RunID, first.Finished).Serial,
				LastSerial:  db.RunAt(ctx, variant, last.RunID, last.Finished).Serial,
				ApprovedBy:  by, ApprovedAt: now}
			if b.Name == "" {
				b.Name = first.Finished.Local().Format("2006-01-02 15:04") + " … " + last.Finished.Local().Format("2006-01-02 15:04")
			}
			if b.ID, err = db.SetBaseline(ctx, b); err != nil {
				return fmt.Errorf("drift baseline set: %w", err)
			}
			return a.printBaseline(b, asJSON)
		},
	}
	fl := cmd.Flags()
	fl.String("db", "", "shift log file (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
	fl.StringVar(&stationFile, "station-file", "", "station file (or built-in name): its shift_log")
	fl.StringVar(&variant, "variant", "", "variant, e.g. QM-205")
	fl.StringVar(&since, "since", "", "window start (inclusive): 8h, 2026-11-30, \"2026-11-30 06:00\"")
	fl.StringVar(&until, "until", "", "window end (exclusive); same forms")
	fl.StringVar(&name, "name", "", "name of the baseline (default: its window)")
	fl.StringVar(&by, "approved-by", os.Getenv("USER"), "who approves it")
	fl.BoolVar(&asJSON, "json", false, "print the stored baseline as JSON")
	return cmd
}

func (a *app) driftBaselineShowCmd() *cobra.Command {
	var variant, stationFile string
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "show --variant V",
		Short: "Show the variant's approved baseline",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			if variant == "" {
				return errors.New("drift baseline show: give --variant V")
			}
			path, err := shiftLogPath(cmd, stationFile)
			if err != nil {
				return fmt.Errorf("drift baseline show: %w", err)
			}
			db, err := store.Open(path)
			if err != nil {
				return fmt.Errorf("drift baseline show: %w", err)
			}
			defer db.Close()
			b, err := db.LastBaseline(cmd.Context(), variant)
			if err != nil {
				return fmt.Errorf("drift baseline show: %w (set one with 'padline drift baseline set')", err)
			}
			return a.printBaseline(b, asJSON)
		},
	}
	fl := cmd.Flags()
	fl.String("db", "", "shift log file (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
	fl.StringVar(&stationFile, "station-file", "", "station file (or built-in name): its shift_log")
	fl.StringVar(&variant, "variant", "", "variant, e.g. QM-205")
	fl.BoolVar(&asJSON, "json", false, "print the baseline as JSON")
	return cmd
}

// driftMinApproved is the fewest points an approved baseline may come
// from: Montgomery (Introduction to SQC, §6.4) advises at least 20–25
// subgroups for phase I limits; the drift package's own studies use 50.
const driftMinApproved = 25

func (a *app) printBaseline(b store.Baseline, asJSON bool) error {
	if asJSON {
		enc := json.NewEncoder(a.stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(driftreport.BaselineOf(b))
	}
	driftreport.WriteBaseline(a.stdout, b)
	return nil
}
