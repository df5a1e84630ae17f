package main

import (
	"context"
	"io"

	"github.com/spf13/cobra"
)

// app carries the streams every subcommand writes to, so an end-to-end test
// can run a subcommand in-process and read what it printed.
type app struct {
	stdin  io.Reader
	stdout io.Writer
	stderr io.Writer
}

// run builds the command tree, executes args and returns the exit status.
func run(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	a := &app{stdin: stdin, stdout: stdout, stderr: stderr}
	root := a.rootCmd()
	root.SetArgs(args)
	root.SetIn(stdin)
	root.SetOut(stdout)
	root.SetErr(stderr)
	err := root.ExecuteContext(ctx)
	if err != nil {
		reportError(stderr, err)
	}
	return exitCode(err)
}

func (a *app) rootCmd() *cobra.Command {
	root := withHelp("padline", &cobra.Command{
		Use:           "padline",
		Short:         "End-of-line tester for firmware-free capacitive touch switches",
		Version:       softwareVersion(),
		SilenceUsage:  true,
		SilenceErrors: true,
	})
	root.SetVersionTemplate("{{.Version}}\n")
	for _, add := range a.subcommands() {
		root.AddCommand(add())
	}
	root.AddCommand(fileHelpCmds()...)
	return root
}
