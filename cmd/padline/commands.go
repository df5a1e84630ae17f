package main

import "github.com/spf13/cobra"

// subcommands lists the constructors of every subcommand; each lives in its
// own file.
func (a *app) subcommands() []func() *cobra.Command {
	return []func() *cobra.Command{
		a.limitsCmd,
		a.demoCmd,
		a.historyCmd,
		a.driftCmd,
		a.runCmd,
		a.stationCmd,
		a.plantCmd,
		a.lineCmd,
	}
}
