package main

import (
	"os"
	"time"

	"github.com/spf13/cobra"

	"padline/store/driftreport"
)

// driftBaselineCmd builds `padline drift baseline` with `set` and `show`.
func (a *app) driftBaselineCmd() *cobra.Command {
	cmd := &cobra.Command{Use: "baseline", Short: "Approve the centre and σ drift charts a variant against", Long: driftreport.BaselineHelp, Args: cobra.NoArgs}
	var r driftreport.BaselineRequest
	var stationFile string
	var asJSON bool
	set := &cobra.Command{
		Use:     "set --variant V (--since T --until T | --last-approved) [--name N] [--approved-by WHO]",
		Short:   "Store an approved baseline computed over a window of the shift log (or of the plant store, --db postgres://…)",
		Example: driftreport.BaselineExample,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			var err error
			if r.DB, err = shiftLogPath(cmd, stationFile); err != nil {
				return err
			}
			b, err := driftreport.SetBaseline(cmd.Context(), r, time.Now())
			if err != nil {
				return err
			}
			return driftreport.PrintBaseline(a.stdout, b, asJSON)
		},
	}
	show := &cobra.Command{
		Use: "show --variant V", Short: "Show the variant's approved baseline", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			path, err := shiftLogPath(cmd, stationFile)
			if err != nil {
				return err
			}
			b, err := driftreport.ShowBaseline(cmd.Context(), path, r.Variant)
			if err != nil {
				return err
			}
			return driftreport.PrintBaseline(a.stdout, b, asJSON)
		},
	}
	for _, c := range []*cobra.Command{set, show} {
		fl := c.Flags()
		addShiftLogFlag(fl)
		fl.Lookup("db").Usage = plantOrLog
		fl.StringVar(&stationFile, "station-file", "", "station file (or built-in name): its shift_log")
		fl.StringVar(&r.Variant, "variant", "", "variant, e.g. QM-205")
		fl.BoolVar(&asJSON, "json", false, "print the baseline as JSON")
	}
	fl := set.Flags()
	fl.StringVar(&r.Since, "since", "", "window start (inclusive): 8h, 2026-11-30, \"2026-11-30 06:00\"")
	fl.StringVar(&r.Until, "until", "", "window end (exclusive); same forms")
	fl.BoolVar(&r.LastApproved, "last-approved", false, "instead of --since/--until: the units judged against the limits version approved last (no versions: the last approved baseline's window)")
	fl.StringVar(&r.Name, "name", "", "name of the baseline (default: the times of its first and last units, or with --last-approved the last one's name)")
	fl.StringVar(&r.Approver, "approved-by", os.Getenv("USER"), "who approves it")
	cmd.AddCommand(set, show)
	return cmd
}
