package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"strings"
	"time"

	"github.com/spf13/pflag"

	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/station/screen"
)

// defaultScreenAddr is where --screen without an address serves: this
// computer only.
const defaultScreenAddr = "127.0.0.1:8080"

// addScreenFlag registers --screen.
func addScreenFlag(f *pflag.FlagSet, addr *string) {
	f.StringVar(addr, "screen", "", "serve the station screen to a browser at this address (--screen alone: "+defaultScreenAddr+", this computer only; give --screen=ADDR to listen elsewhere)")
	f.Lookup("screen").NoOptDefVal = defaultScreenAddr
}

// startScreen serves the station screen for sess at addr and returns the
// scanner the session reads (the page's scans and stdin's, nil for none)
// and a func that stops the server. The address is logged; one that is
// not loopback is logged as reachable from the network.
func (a *app) startScreen(ctx context.Context, sess *session.Session, stdin session.Scanner, addr string) (session.Scanner, func(), error) {
	srv, err := screen.NewServer()
	if err != nil {
		return nil, nil, err
	}
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, nil, fmt.Errorf("station screen: %w", err)
	}
	reach := "this computer only"
	if host, _, _ := net.SplitHostPort(addr); !isLoopback(host) {
		reach = "REACHABLE FROM THE NETWORK: anyone who can open it can scan units and start checks"
	}
	fmt.Fprintf(a.stderr, "station screen: http://%s/ (%s)\n", ln.Addr(), reach)
	hs := &http.Server{Handler: srv, ReadHeaderTimeout: 5 * time.Second}
	go func() {
		if err := hs.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			fmt.Fprintf(a.stderr, "station screen: %v\n", err)
		}
	}()
	desk := screen.NewDesk(srv, sess)
	desk.Start(ctx)
	stop := func() {
		srv.Close() // ends the pages' event streams, so Shutdown need not wait for them
		sctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		defer cancel()
		_ = hs.Shutdown(sctx)
	}
	return desk.Scanner(stdin), stop, nil
}

// isLoopback reports whether host names this computer only.
func isLoopback(host string) bool {
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

// writeCheckResult prints the end of a shift-start check run from the
// station screen.
func writeCheckResult(w io.Writer, rep *session.CheckReport) {
	if rep.OK {
		fmt.Fprintf(w, "shift-start check passed (check %d): testing goes on\n", rep.CheckID)
		return
	}
	fmt.Fprintf(w, "shift-start check REFUSED the station (check %d): %s\n", rep.CheckID, strings.Join(rep.Faults, "; "))
}

// paint colours a verdict banner for a terminal (ECMA-48 SGR: bold, then
// black on green for a pass, white on red for a fail, black on yellow for a
// station fault); the words stay, so colour only adds to them.
func paint(banner string, v sequences.Verdict, on bool) string {
	if !on {
		return banner
	}
	sgr := "1;30;43"
	switch v {
	case sequences.Pass:
		sgr = "1;30;42"
	case sequences.Fail:
		sgr = "1;97;41"
	}
	return "\x1b[" + sgr + "m" + banner + "\x1b[0m"
}
