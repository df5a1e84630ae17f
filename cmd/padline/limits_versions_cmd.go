package main

import (
	"encoding/json"
	"strconv"
	"time"

	"github.com/spf13/cobra"

	"padline/sequences/session"
)

// limitsVersionCmds builds `padline limits pending|approve|reject|diff`
// (README "Approving limits").
func (a *app) limitsVersionCmds() []*cobra.Command {
	subs := []struct{ use, short string }{
		{"pending --station FILE [--variant V]", "List limits versions awaiting approval (with --variant, first record the limits its file and the station's U give now)"},
		{"approve ID --by NAME --why TEXT", "Approve a pending limits version: runs judge against it from then on"},
		{"reject ID --by NAME --why TEXT", "Reject a pending limits version: runs stay refused until the limits change again"},
		{"diff A B", "Show what changed between two limits versions"},
	}
	var out []*cobra.Command
	for _, s := range subs {
		var req session.LimitsRequest
		var asJSON bool
		cmd := &cobra.Command{Use: s.use, Short: s.short, Args: cobra.ArbitraryArgs,
			RunE: func(cmd *cobra.Command, args []string) (err error) {
				req.Action = cmd.Name()
				for _, arg := range args {
					id, err := strconv.ParseInt(arg, 10, 64)
					if err != nil {
						return err
					}
					req.IDs = append(req.IDs, id)
				}
				if req.ShiftLog, err = shiftLogPath(cmd, req.Station); err != nil {
					return err
				}
				res, err := session.DoLimits(cmd.Context(), req, time.Now())
				if err == nil && asJSON {
					return json.NewEncoder(a.stdout).Encode(res)
				} else if err == nil {
					res.Write(a.stdout)
				}
				return err
			}}
		f := cmd.Flags()
		f.StringVar(&req.Station, "station", "", "station file: its shift_log, and (pending) its station and fixture")
		addShiftLogFlag(f)
		f.BoolVar(&asJSON, "json", false, "print the versions as one JSON object")
		switch cmd.Name() {
		case "pending":
			f.StringVar(&req.Variant, "variant", "", "variant file or built-in name whose current limits to record first")
		case "approve", "reject":
			f.StringVar(&req.By, "by", "", "who decides (required)")
			f.StringVar(&req.Why, "why", "", "the reason, kept with the version (required)")
		}
		out = append(out, cmd)
	}
	return out
}
