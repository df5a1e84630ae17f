package main

import (
	"encoding/json"
	"errors"

	"github.com/spf13/cobra"

	"padline/fixture/hostpins"
	"padline/sequences/session"
)

func (a *app) stationValidateCmd() *cobra.Command {
	var variant, station string
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "validate --station FILE [--variant V]",
		Short: "Check a station file completely without touching a pin",
		Long: `validate reads the station file as 'padline run' would (every key known, pins
unique, every role with a pin, ladder values in range, references inside the
ladder's reach) and, with --variant, checks the ladder and the reference units
against that variant's test limits. On a driver: gpio station it also lists
the host's GPIO chips and line names and checks every pin name against them,
or says plainly that the host has none. Nothing is switched. Exit status 1
when the file is not valid.`,
		Example: `  padline station validate --station /etc/padline/station.yaml --variant /etc/padline/variants/QM-205.yaml
  padline station validate --station demo-sim --json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			rep, err := session.ValidateStation(station, variant, hostGPIO)
			if err != nil {
				return err
			}
			if asJSON {
				enc := json.NewEncoder(a.stdout)
				enc.SetIndent("", "  ")
				if err := enc.Encode(rep); err != nil {
					return err
				}
			} else {
				session.WriteValidate(a.stdout, rep)
			}
			if !rep.OK {
				return errors.New("station validate: " + rep.Station + " is not valid")
			}
			return nil
		},
	}
	f := cmd.Flags()
	f.StringVar(&station, "station", "", "station file: a .yaml file or a built-in name (required)")
	f.StringVar(&variant, "variant", "", "variant whose test limits the ladder and references must suit: a .yaml file or a built-in name")
	f.BoolVar(&asJSON, "json", false, "print the findings as one JSON object")
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

// hostGPIO lists the host's GPIO through fixture/hostpins, opening nothing.
func hostGPIO() session.HostGPIO {
	chips, lines, err := hostpins.Inventory()
	h := session.HostGPIO{Chips: chips, Lines: lines}
	if err != nil {
		h.Err = err.Error()
	}
	return h
}
