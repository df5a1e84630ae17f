package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"
)

// stopSignals are the signals that stop padline cleanly: the context ends,
// the fixture opens every rung and removes unit power, the relay counts
// are saved. SIGINT and SIGTERM are an ordered stop (exit 0); SIGHUP (the
// console hung up) and SIGQUIT are not, and exit with 128 + the signal's
// number so a service manager that restarts on failure starts the station
// again (systemd's Restart=on-failure counts a clean exit as a stop).
var stopSignals = []os.Signal{os.Interrupt, syscall.SIGTERM, syscall.SIGHUP, syscall.SIGQUIT}

// signalContext is a context ended by the first of stopSignals (its
// cause is a stopSignal naming it), and a function that stops listening.
func signalContext(parent context.Context) (context.Context, func()) {
	ctx, cancel := context.WithCancelCause(parent)
	ch := make(chan os.Signal, 1)
	signal.Notify(ch, stopSignals...)
	go func() {
		select {
		case s := <-ch:
			cancel(stopSignal{s})
		case <-ctx.Done():
		}
	}()
	return ctx, func() { signal.Stop(ch); cancel(nil) }
}

// stopSignal is the cause of a context a signal ended.
type stopSignal struct{ os.Signal }

func (s stopSignal) Error() string { return "stopped by " + s.Signal.String() }

// signalExit is the exit status after ctx ended: code as it was for an
// ordered stop, 128 + the signal's number for SIGHUP and SIGQUIT, said on
// stderr.
func signalExit(ctx context.Context, code int, stderr io.Writer) int {
	var stop stopSignal
	if !errors.As(context.Cause(ctx), &stop) {
		return code
	}
	s, ok := stop.Signal.(syscall.Signal)
	if !ok || (s != syscall.SIGHUP && s != syscall.SIGQUIT) {
		return code
	}
	fmt.Fprintf(stderr, "padline: stopped by %v: fixture halted (every rung open, unit power off); exit %d so a service restarts the station\n", s, 128+int(s))
	return 128 + int(s)
}
