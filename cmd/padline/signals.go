package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"sync"
	"syscall"
)

// stopSignals are the signals that stop padline cleanly: the context ends,
// the fixture opens every rung and removes unit power, the relay counts
// are saved. SIGINT and SIGTERM are an ordered stop (exit 0); SIGHUP (the
// console hung up) and SIGQUIT are not, and exit with 128 + the signal's
// number so a service manager that restarts on failure starts the station
// again (systemd's Restart=on-failure counts a clean exit as a stop).
var stopSignals = []os.Signal{os.Interrupt, syscall.SIGTERM, syscall.SIGHUP, syscall.SIGQUIT}

// signalContext is a context ended by the first of stopSignals, and a
// function that reports which signal ended it (nil: none).
func signalContext(parent context.Context) (context.Context, func() os.Signal, func()) {
	ctx, cancel := context.WithCancel(parent)
	ch := make(chan os.Signal, 1)
	signal.Notify(ch, stopSignals...)
	var mu sync.Mutex
	var got os.Signal
	done := make(chan struct{})
	go func() {
		select {
		case s := <-ch:
			mu.Lock()
			got = s
			mu.Unlock()
			cancel()
		case <-done:
		}
	}()
	which := func() os.Signal {
		mu.Lock()
		defer mu.Unlock()
		return got
	}
	stop := func() {
		signal.Stop(ch)
		close(done)
		cancel()
	}
	return ctx, which, stop
}

// signalExit is the exit status after sig stopped the program: code as it
// was for an ordered stop, 128 + the signal's number for SIGHUP and
// SIGQUIT, said on stderr.
func signalExit(sig os.Signal, code int, stderr io.Writer) int {
	s, ok := sig.(syscall.Signal)
	if !ok || (s != syscall.SIGHUP && s != syscall.SIGQUIT) {
		return code
	}
	fmt.Fprintf(stderr, "padline: stopped by %v: fixture halted (every rung open, unit power off); exit %d so a service restarts the station\n", s, 128+int(s))
	return 128 + int(s)
}
