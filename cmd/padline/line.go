package main

import (
	"context"
	"errors"
	"fmt"
	"net"
	"net/http"
	"time"

	"github.com/spf13/cobra"

	"padline/store/driftreport"
	"padline/store/plant"
	"padline/store/plant/lineboard"
)

// lineCmd builds `padline line`: the line board.
func (a *app) lineCmd() *cobra.Command {
	var db, listen, line string
	cmd := &cobra.Command{
		Use:   "line --db postgres://… --listen ADDR [--line L]",
		Short: "Serve the line board: every station's last unit, yield, check, wear, drift and backlog",
		Long: `line serves a read-only web page over every station of a line (--line) or
of the whole plant, from the plant store: each station's last unit and
verdict, first-pass yield this shift (early 06–14, late 14–22, night 22–06
local time), whether a shift-start check is due, relay wear, open drift
alarms and forwarding backlog. The page updates itself every 2 s.

Open drift alarms are the default watch's (3σ individuals and CUSUM) among
the last 50 passing units of the station's current variant, with limits from
the first 50 of its last 500. A station not heard from lately shows its last
report time: its backlog waits in its own shift log.

The board only reads; give it a role that may read the plant tables.`,
		Example: `  padline line --db postgres://board@plant-db/plant --listen :8080
  padline line --db postgres://board@plant-db/plant --listen 127.0.0.1:8080 --line L2`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			url, err := plantDB(db)
			if err != nil {
				return fmt.Errorf("line: %w", err)
			}
			p, err := plant.Open(cmd.Context(), url)
			if err != nil {
				return fmt.Errorf("line: %w", err)
			}
			defer p.Close()
			ln, err := net.Listen("tcp", listen)
			if err != nil {
				return fmt.Errorf("line: --listen %s: %w", listen, err)
			}
			fmt.Fprintf(a.stdout, "line board on http://%s/ (plant store %s)\n", ln.Addr(), plant.Redact(url))
			return serveLineBoard(cmd.Context(), ln, p, line)
		},
	}
	f := cmd.Flags()
	f.StringVar(&db, "db", "", "plant store URL, postgres://… (default: $PADLINE_PLANT_URL)")
	f.StringVar(&listen, "listen", "127.0.0.1:8080", "address to serve on, e.g. :8080")
	f.StringVar(&line, "line", "", "only this line's stations (default: the whole plant)")
	return cmd
}

// serveLineBoard serves the board on ln until ctx ends.
func serveLineBoard(ctx context.Context, ln net.Listener, src lineboard.Source, line string) error {
	srv := &http.Server{Handler: &lineboard.Server{Src: src, Line: line, Shift: func(t time.Time) (string, time.Time) {
		name, start, _ := driftreport.ShiftOf(t.Local())
		return name, start
	}}, ReadHeaderTimeout: 10 * time.Second}
	go func() {
		<-ctx.Done()
		sctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		defer cancel()
		_ = srv.Shutdown(sctx)
	}()
	if err := srv.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
		return fmt.Errorf("line: %w", err)
	}
	return nil
}
