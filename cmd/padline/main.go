package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"

	"padline/sequences/session"
	"padline/store/plant"
)

func main() {
	ctx, stop := signalContext(context.Background())
	code := run(ctx, os.Args[1:], os.Stdin, os.Stdout, os.Stderr)
	stop()
	os.Exit(signalExit(ctx, code, os.Stderr))
}

// exitStationRefused is the exit status of a refused check and of a run
// the gate refused.
const exitStationRefused = 3

// exitError carries a specific exit status out of a subcommand.
type exitError struct {
	code int
	err  error
}

func (e *exitError) Error() string { return e.err.Error() }
func (e *exitError) Unwrap() error { return e.err }

// exitCode maps an error returned by a subcommand to the process exit status:
// 0 for success, the code of an *exitError, 1 otherwise.
func exitCode(err error) int {
	if err == nil {
		return 0
	}
	var ee *exitError
	if errors.As(err, &ee) {
		return ee.code
	}
	return 1
}

// reportError prints err as one line on w, prefixed with the program name;
// a plant store setup fault says what to do (plant.Hint).
func reportError(w io.Writer, err error) {
	fmt.Fprintf(w, "padline: %v\n", plant.Hint(err))
}

// refused gives a station the gate or its check refused exit status 3.
func refused(err error) error {
	if errors.Is(err, session.ErrNotReady) {
		return &exitError{code: exitStationRefused, err: err}
	}
	return err
}
