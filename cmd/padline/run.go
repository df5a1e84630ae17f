package main

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/spf13/cobra"

	"padline/sequences/session"
	"padline/sequences/station/console"
)

type runOptions struct {
	variant, station string
	serial           string
	operator, lot    string
	search           string
	asJSON           bool
	lidTimeout       time.Duration
	screen           string // address of the station screen; "" for none
	plantURL         string // forward to this plant store (session.Forward)
	xout             string // panel stations: x-out sites of the --serial panel
	service          bool   // end of input is an error (run as a service)
}

// runCmd builds `padline run`.
func (a *app) runCmd() *cobra.Command {
	var o runOptions
	cmd := &cobra.Command{
		Use:   "run --variant V --station FILE",
		Short: "Test units: scan a serial, close the lid, read the verdict",
		Long: `run tests production units on this station, one after another.

Serials come one per line on standard input (a barcode scanner types them like
a keyboard), or a single one from --serial. A serial that does not match the
variant's serial_pattern is refused before anything touches the unit. For each
serial padline waits for the lid, powers the unit, runs the variant's plan
(clock, idle check, release check, trip search), commits the run to the shift
log, and only then shows the verdict and lights the lamp.

Ctrl-C or SIGTERM stops cleanly: the fixture opens every rung and removes unit
power, and a unit stopped half-way gets no verdict and no log entry. SIGHUP
and SIGQUIT halt the fixture the same way and exit 129 and 131, so a service
restarts. With --service (the station's systemd unit) the end of input is an
error too. Between two units the lid must open: a serial scanned while the
last unit is still clamped waits for the lid to open and close.

--screen serves the station screen to a browser on this computer
(` + defaultScreenAddr + `; --screen=ADDR to listen elsewhere, which the log
says): the verdict large, the fail code's action, the shift's counters, and a
field that takes scans like stdin does. With --screen a station that needs its
shift-start check waits for it to be run from the page instead of exiting.

A station file with driver: sim runs against the built-in simulated line;
driver: gpio drives the real pins named in the station file.

A panel station (a station file with a sites: section, such as the built-in
demo-panel) tests every board of a panel in one closure. Each input line is
one panel: its label, optionally followed by x:SITES naming the sites marked
bad on the panel (x-outs: skipped and logged as not tested), e.g.
"QM205-0001 x:3". Each site's serial comes from the variant's panel_serial
({panel}{site:02} turns QM205-0001 into QM205-000101 …); with sites.serials:
scan the line holds every site's label instead, "-" for an x-out. Every
tested site gets its own run and verdict in the shift log, with the panel
label and its site number; the terminal shows a compact panel map.

CAUTION: the unit's supply may be up to 15 V while the station's GPIO is 3.3 V:
every input must be level-shifted. Products that switch mains must be tested
with their logic board unpowered from mains; follow local electrical codes and
your safety engineer. Keep hands clear of the fixture clamp.`,
		Example: `  padline run --variant QM-205 --station /etc/padline/station.yaml
  padline run --variant QM-205 --station demo-sim --serial QM205-000123
  printf 'QM205-000001\nQM205-000002\n' | padline run --variant QM-205 --station demo-sim --db shift.db
  padline run --variant QM-205 --station demo-sim --screen   # then open http://127.0.0.1:8080/
  printf 'QM205-0001\nQM205-0002 x:3\n' | padline run --variant QM-205 --station demo-panel --db shift.db`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			db, err := shiftLogPath(cmd, o.station)
			if err != nil {
				return err
			}
			return a.run(cmd.Context(), o, db)
		},
	}
	f := cmd.Flags()
	f.StringVar(&o.variant, "variant", "", "variant to test: a .yaml file or a built-in name (required)")
	f.StringVar(&o.station, "station", "", "station file: a .yaml file or a built-in name (required)")
	addShiftLogFlag(f)
	f.StringVar(&o.serial, "serial", "", "test this one serial instead of reading serials from stdin")
	f.StringVar(&o.operator, "operator", "", "operator name recorded with every run")
	f.StringVar(&o.lot, "lot", "", "lot recorded with every run")
	f.StringVar(&o.search, "search", "", "trip search: bracket or staircase (default: the variant's plan)")
	f.BoolVar(&o.asJSON, "json", false, "print one JSON object per tested unit instead of the verdict banner")
	f.DurationVar(&o.lidTimeout, "lid-timeout", 0, "give up on a unit whose lid stays open this long (0: wait until stopped)")
	addScreenFlag(f, &o.screen)
	f.StringVar(&o.plantURL, "plant-url", "", "forward every committed run to this plant store, postgres://… (default: $PADLINE_PLANT_URL, else the station file's plant.url)")
	f.StringVar(&o.xout, "xout", "", "panel station: sites of the --serial panel marked bad (x-outs), e.g. 2,5")
	f.BoolVar(&o.service, "service", false, "run as the station's service: the end of input (console closed, Ctrl-D) is an error, so the service manager restarts padline instead of leaving the line down")
	_ = cmd.MarkFlagRequired("variant")
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

func (a *app) run(ctx context.Context, o runOptions, dbPath string) (err error) {
	opts := session.Options{
		Variant: o.variant, Station: o.station, ShiftLog: dbPath,
		Operator: o.operator, Lot: o.lot, Strategy: o.search,
		Software: softwareVersion(), GPIO: openGPIO, PanelGPIO: openPanelGPIO, LidTimeout: o.lidTimeout,
		// With a screen the technician runs a due check from the page.
		WaitForCheck:    o.screen != "",
		InputEndIsError: o.service,
		AfterStep:       holdHook(), // nil unless the torture test asks (testhook.go)
	}
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
	if session.IsPanelStation(o.station) {
		if o.screen != "" {
			return fmt.Errorf("run: station %s is a panel station; --screen does not serve panels yet (the terminal shows the panel map)", o.station)
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

// refused gives a run the gate refused exit status 3.
func refused(err error) error {
	if errors.Is(err, session.ErrNotReady) {
		return &exitError{code: exitStationRefused, err: err}
	}
	return err
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
