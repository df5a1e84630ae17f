package main

import (
	"context"
	"fmt"

	"github.com/spf13/pflag"

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

// startScreen serves the station screen for sess at addr, logs where, and
// returns the scanner the session reads (the page's scans and stdin's) and
// a func that stops the screen.
func (a *app) startScreen(ctx context.Context, sess *session.Session, stdin session.Scanner, addr string) (session.Scanner, func(), error) {
	sv, err := screen.Serve(ctx, sess, stdin, addr)
	if err != nil {
		return nil, nil, err
	}
	reach := "this computer only"
	if !sv.Loopback {
		reach = "REACHABLE FROM THE NETWORK: anyone who can open it can scan units and start checks"
	}
	fmt.Fprintf(a.stderr, "station screen: http://%s/ (%s)\n", sv.Addr, reach)
	go func() {
		if err, ok := <-sv.Err; ok {
			fmt.Fprintln(a.stderr, err)
		}
	}()
	return sv.Scanner(), sv.Close, nil
}
