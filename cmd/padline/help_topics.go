package main

import (
	"github.com/spf13/cobra"

	"padline/sequences/session"
)

// fileHelpCmds are 'padline help variant-file' and 'padline help
// station-file': help topics (no Run) rendered from the parser's key table,
// the same text as docs/files.md.
func fileHelpCmds() []*cobra.Command {
	var out []*cobra.Command
	for _, kind := range []string{"variant", "station"} {
		out = append(out, &cobra.Command{Use: kind + "-file", Long: session.FileHelp(kind),
			Short: "The " + kind + " file: every key, its unit, default and plausible range"})
	}
	return out
}
