package main

import (
	"context"
	"fmt"
	"os"
	"strings"

	"padline/sequences/session"
)

// Test hooks of 'padline run' (the torture tests' deterministic stops):
// with PADLINE_TEST_HOLD=SERIAL/STEP the unit SERIAL is held after its plan
// step STEP (power on, the fixture mid-test) until the run is stopped, and
// "held SERIAL STEP" is written to the file PADLINE_TEST_HOLD_MARK names
// (the test's FIFO) when it is. With PADLINE_TEST_SCAN_MARK=FIFO, "scan N"
// is written there as the Nth wait for a serial begins. Unset, run behaves
// as always.
const (
	holdEnv     = "PADLINE_TEST_HOLD"
	holdMarkEnv = "PADLINE_TEST_HOLD_MARK"
	scanMarkEnv = "PADLINE_TEST_SCAN_MARK"
)

// mark writes one line to the test's FIFO (blocking until the test reads).
func mark(path, line string) {
	if f, err := os.OpenFile(path, os.O_WRONLY, 0); err == nil {
		fmt.Fprintln(f, line)
		f.Close()
	}
}

// scanHook marks each wait for a serial when the test asks; else sc.
func scanHook(sc session.Scanner) session.Scanner {
	path := os.Getenv(scanMarkEnv)
	if path == "" {
		return sc
	}
	n := 0
	return session.ScannerFunc(func(ctx context.Context) (string, bool, error) {
		n++
		mark(path, fmt.Sprintf("scan %d", n))
		return sc.Scan(ctx)
	})
}

// holdHook is the session's AfterStep for the test hook; nil when unset.
func holdHook() func(context.Context, *session.StepDone) {
	serial, step, ok := strings.Cut(os.Getenv(holdEnv), "/")
	if !ok {
		return nil
	}
	path := os.Getenv(holdMarkEnv)
	return func(ctx context.Context, d *session.StepDone) {
		if d.Serial != serial || string(d.Step) != step {
			return
		}
		if path != "" {
			mark(path, "held "+serial+" "+step)
		}
		<-ctx.Done()
	}
}
