package main

import (
	"context"
	"fmt"
	"os"
	"strings"

	"padline/sequences/session"
)

// Test hook of 'padline run' (the torture test's deterministic stop):
// with PADLINE_TEST_HOLD=SERIAL/STEP the unit SERIAL is held after its plan
// step STEP (power on, the fixture mid-test) until the run is stopped, and
// "held SERIAL STEP" is written to the file PADLINE_TEST_HOLD_MARK names
// (the test's FIFO) when it is. Unset, run behaves as always.
const (
	holdEnv     = "PADLINE_TEST_HOLD"
	holdMarkEnv = "PADLINE_TEST_HOLD_MARK"
)

// holdHook is the session's AfterStep for the test hook; nil when unset.
func holdHook() func(context.Context, *session.StepDone) {
	serial, step, ok := strings.Cut(os.Getenv(holdEnv), "/")
	if !ok {
		return nil
	}
	mark := os.Getenv(holdMarkEnv)
	return func(ctx context.Context, d *session.StepDone) {
		if d.Serial != serial || string(d.Step) != step {
			return
		}
		if mark != "" {
			if f, err := os.OpenFile(mark, os.O_WRONLY, 0); err == nil {
				fmt.Fprintf(f, "held %s %s\n", serial, step)
				f.Close()
			}
		}
		<-ctx.Done()
	}
}
