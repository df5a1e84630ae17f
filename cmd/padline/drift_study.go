package main

import (
	"github.com/spf13/cobra"

	"padline/store/driftreport"
)

// driftStudyCmd builds `padline drift study`.
func (a *app) driftStudyCmd() *cobra.Command {
	var runs, seed, asJSON = 0, uint64(0), false
	cmd := &cobra.Command{
		Use:   "study",
		Short: "Simulate the average run lengths of the drift charts against reference figures",
		Long:  driftreport.StudyHelp,
		Example: `  padline drift study
  padline drift study --runs 20000 --seed 7 --json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return driftreport.PrintStudy(a.stdout, runs, seed, asJSON)
		},
	}
	f := cmd.Flags()
	f.IntVar(&runs, "runs", 2000, "simulated runs per chart set and step size")
	f.Uint64Var(&seed, "seed", 1, "seed (same seed, same table)")
	f.BoolVar(&asJSON, "json", false, "print one JSON object instead of the table")
	return cmd
}
