package main

import (
	"context"
	"errors"
	"fmt"

	"github.com/spf13/cobra"

	"padline/sequences/session"
	"padline/sequences/station/console"
)

// runOptions are run's flags beyond the session's own.
type runOptions struct {
	session.Options
	serial, xout     string // one --serial (a panel's label, with its --xout sites)
	screen, plantURL string // the station screen's address, the plant store
	asJSON           bool
}

// runCmd builds `padline run`.
func (a *app) runCmd() *cobra.Command {
	var o runOptions
	cmd := withHelp("run", &cobra.Command{
		Use:   "run --variant V --station FILE",
		Short: "Test units: scan a serial, close the lid, read the verdict",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			var err error
			if o.ShiftLog, err = shiftLogPath(cmd, o.Station); err != nil {
				return err
			}
			return a.run(cmd.Context(), o)
		},
	})
	f := cmd.Flags()
	f.StringVar(&o.Variant, "variant", "", "variant to test: a .yaml file or a built-in name (required)")
	f.StringVar(&o.Station, "station", "", "station file: a .yaml file or a built-in name (required)")
	addShiftLogFlag(f)
	f.StringVar(&o.serial, "serial", "", "test this one serial instead of reading serials from stdin")
	f.StringVar(&o.Operator, "operator", "", "operator name recorded with every run")
	f.StringVar(&o.Lot, "lot", "", "lot recorded with every run")
	f.StringVar(&o.Strategy, "search", "", "trip search: bracket or staircase (default: the variant's plan)")
	f.BoolVar(&o.asJSON, "json", false, "print one JSON object per tested unit instead of the verdict banner")
	f.DurationVar(&o.LidTimeout, "lid-timeout", 0, "give up on a unit whose lid stays open this long (0: wait until stopped)")
	addScreenFlag(f, &o.screen)
	f.StringVar(&o.plantURL, "plant-url", "", "forward every committed run to this plant store, postgres://… (default: $PADLINE_PLANT_URL, else the station file's plant.url)")
	f.StringVar(&o.xout, "xout", "", "panel station: sites of the --serial panel marked bad (x-outs), e.g. 2,5")
	f.BoolVar(&o.InputEndIsError, "service", false, "run as the station's service: the end of input (console closed, Ctrl-D) is an error, so the service manager restarts padline instead of leaving the line down")
	_ = cmd.MarkFlagRequired("variant")
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

func (a *app) run(ctx context.Context, o runOptions) (err error) {
	opts := o.Options
	opts.Software, opts.GPIO, opts.PanelGPIO = softwareVersion(), openGPIO, openPanelGPIO
	opts.WaitForCheck = o.screen != "" // the technician runs a due check from the page
	opts.AfterStep = holdHook()        // nil unless the torture test asks (testhook.go)
	opts.PlantURL, opts.Warn = o.plantURL, a.stderr
	var sc session.Scanner
	if o.serial != "" {
		line := o.serial
		if o.xout != "" {
			line += " x:" + o.xout // a panel's x-outs
		}
		sc = session.OneSerial(line)
	} else {
		sc = scanHook(a.promptingScanner(session.LineScanner(a.stdin), o))
	}
	show := console.Options{Stdout: a.stdout, Stderr: a.stderr, JSON: o.asJSON, Colour: isTerminal(a.stdout)}
	if session.IsPanelStation(o.Station) {
		if o.screen != "" {
			return fmt.Errorf("run: station %s is a panel station; --screen does not serve panels yet (the terminal shows the panel map)", o.Station)
		}
		return refused(session.RunPanel(ctx, opts, sc, console.Panel(show)))
	}
	sess, err := session.Open(ctx, opts)
	if err != nil {
		return err
	}
	// Every exit path leaves every rung open and unit power off, and the
	// relay counts saved.
	defer func() { err = errors.Join(err, sess.Close()) }()
	// Plant forwarding: a goroutine of its own, woken by committed
	// verdicts; the unit loop never waits for it.
	defer sess.Forward(ctx, o.plantURL, a.stderr)()
	events, stop := sess.Subscribe(eventBuffer)
	printed := make(chan error, 1)
	go func() { printed <- console.Print(events, show) }()
	if o.screen != "" {
		// The screen adds the page's scans to stdin's (or to --serial's
		// one); the run then goes on until it is stopped.
		var stopScreen func()
		if sc, stopScreen, err = a.startScreen(ctx, sess, sc, o.screen); err != nil {
			stop()
			return errors.Join(err, <-printed)
		}
		defer stopScreen()
	}
	err = sess.Run(ctx, sc)
	stop()
	return refused(errors.Join(err, <-printed))
}

// eventBuffer is the terminal consumer's buffer: far more than one unit
// emits, so a terminal never drops an event while the loop runs.
const eventBuffer = 1024

// promptingScanner prints the scan prompt before each read when a person
// types at a terminal.
func (a *app) promptingScanner(sc session.Scanner, o runOptions) session.Scanner {
	if o.asJSON || !isTerminal(a.stdin) {
		return sc
	}
	return session.ScannerFunc(func(ctx context.Context) (string, bool, error) {
		fmt.Fprint(a.stdout, "scan serial> ")
		return sc.Scan(ctx)
	})
}
