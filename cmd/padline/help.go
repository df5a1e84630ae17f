package main

import (
	"embed"
	"strings"

	"github.com/spf13/cobra"
)

// The long help and examples of the commands this package owns are prose
// in help/NAME.txt (NAME: the command path joined by "-"), edited as text;
// a line "Examples:" starts the examples. {{screen}} and {{shift_log}}
// stand for the defaults, so the words never drift from the code.
//
//go:embed help/*.txt
var helpFiles embed.FS

// withHelp sets cmd's Long and Example from help/NAME.txt; a missing file
// is a programming error that every test of the command tree catches.
func withHelp(name string, cmd *cobra.Command) *cobra.Command {
	b, err := helpFiles.ReadFile("help/" + name + ".txt")
	if err != nil {
		panic(err)
	}
	text := strings.NewReplacer("{{screen}}", defaultScreenAddr, "{{shift_log}}", defaultShiftLog).Replace(string(b))
	long, example, _ := strings.Cut(text, "\n\nExamples:\n")
	cmd.Long, cmd.Example = strings.TrimRight(long, "\n"), strings.TrimRight(example, "\n")
	return cmd
}
