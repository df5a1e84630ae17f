package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"net"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"padline/sequences/session"
	"padline/store/plant"
	"padline/store/plant/lineboard"
)

// plantCmd builds `padline plant`: the plant store's setup and a station's
// forwarding status.
func (a *app) plantCmd() *cobra.Command {
	cmd := &cobra.Command{Use: "plant", Short: "The plant store: set up the PostgreSQL database, register stations, forwarding status",
		Long: `plant looks after the plant store: one PostgreSQL database that every station
forwards its committed runs to (station file plant: {url: …} or 'padline run
--plant-url'), so history, drift and the line board answer across the plant.
A station tests whether or not it answers and catches up on its own; every
run arrives once. README "The plant store" shows a setup.`,
		Example: `  padline plant init --db postgres://padline_admin@plant-db/plant
  padline plant add-station L2-S1 --line L2 --role padline_l2_s1 --db postgres://padline_admin@plant-db/plant
  padline plant add-reader padline_board --db postgres://padline_admin@plant-db/plant
  padline plant status --station /etc/padline/station.yaml --json`}
	var line, role, station, url string
	var asJSON bool
	add := a.plantSub(cmd, "add-station NAME", "Register a station, as the plant's owner (--role: also the login role it forwards as, which writes its own rows only; making it needs CREATEROLE)", 1,
		func(ctx context.Context, p *plant.DB, args []string) error {
			return p.AddStation(ctx, plant.Station{Name: args[0], Line: line, Role: role})
		})
	add.Flags().StringVar(&line, "line", "", "the line the station belongs to, e.g. L2")
	add.Flags().StringVar(&role, "role", "", "PostgreSQL login role the station forwards as")
	a.plantSub(cmd, "init", "Create or update the plant schema, as its owner (?search_path=NAME picks the schema)", 0,
		func(ctx context.Context, p *plant.DB, _ []string) error { return p.Migrate(ctx) })
	a.plantSub(cmd, "add-reader ROLE", "Create a login role that reads every plant table and writes none (the line board's, history's, drift's), as the plant's owner with CREATEROLE", 1,
		func(ctx context.Context, p *plant.DB, args []string) error { return p.AddReader(ctx, args[0]) })
	a.plantSub(cmd, "stations", "List the registered stations", 0, func(ctx context.Context, p *plant.DB, _ []string) error {
		ss, err := p.Stations(ctx)
		if err == nil {
			err = plant.WriteStations(a.stdout, ss, asJSON)
		}
		return err
	}).Flags().BoolVar(&asJSON, "json", false, "print JSON")
	compact := a.plantSub(cmd, "compact", "Rebuild the indexes of closed months' partitions, as the plant's owner at a quiet time (stations go on forwarding); --json", 0,
		func(ctx context.Context, p *plant.DB, _ []string) error { return a.compact(ctx, p, asJSON) })
	compact.Flags().BoolVar(&asJSON, "json", false, "print one JSON array when done")
	compact.Long = `compact rebuilds, with REINDEX TABLE CONCURRENTLY, the indexes of each month
partition of runs and measurements whose month (UTC) has ended, one at a
time; stations go on forwarding and readers reading. While a month is
open, runs of every station and variant arrive interleaved, so its indexes
end half full and scattered over the disk: no cost while the server holds
them in memory, but the first drift after a restart reads them from disk
(README "The plant store": 2.4-3.1 s before, 0.57-0.65 s after, on 10,000,000
runs). A partition rebuilt once is kept until it gains a tenth more rows
(a station that was offline when the month closed). Run it as the plant's
owner, monthly at a quiet time (a cron job or systemd timer). Ctrl-C stops
it; an interrupted rebuild leaves an invalid index, which the next compact
drops first.`
	status := a.logSub(cmd, &station, "status", "A station's forwarding from its shift log (works with the plant store down): backlog, last run forwarded, last error, refused rows",
		func(ctx context.Context, path string, st *session.Station) error {
			s, err := plant.StationStatus(ctx, path, session.PlantURL("", st))
			if err == nil {
				err = s.Write(a.stdout, asJSON)
			}
			return err
		})
	status.Flags().BoolVar(&asJSON, "json", false, "print one JSON object")
	forward := a.logSub(cmd, &station, "forward", "Send a station's backlog to the plant store now, then exit",
		func(ctx context.Context, path string, st *session.Station) error {
			u, start := session.PlantURL(url, st), time.Now()
			if st == nil || u == "" {
				return fmt.Errorf("give --station FILE with a plant.url, or --plant-url")
			}
			n, err := plant.Forward(ctx, path, u, st.Name, session.PlantProfile(st))
			if err == nil {
				fmt.Fprintf(a.stdout, "%d runs forwarded to %s in %.1f s\n", n, plant.Redact(u), time.Since(start).Seconds())
			}
			return err
		})
	forward.Flags().StringVar(&url, "plant-url", "", "plant store (default: $PADLINE_PLANT_URL, else the station file's plant.url)")
	return cmd
}

// compact runs plant.Compact, printing each partition as it is done (a
// month of a busy plant takes seconds to minutes), or one JSON array.
func (a *app) compact(ctx context.Context, p *plant.DB, asJSON bool) error {
	start := time.Now()
	if !asJSON {
		fmt.Fprintf(a.stdout, "rebuilding the closed months of %s, one partition at a time\n%s", p.Describe(ctx), plant.RebuiltHeader)
	}
	done, err := p.Compact(ctx, time.Now(), func(r plant.Rebuilt) {
		if !asJSON {
			fmt.Fprint(a.stdout, r.Line())
		}
	})
	if err != nil {
		return err
	}
	if asJSON {
		if done == nil {
			done = []plant.Rebuilt{}
		}
		return json.NewEncoder(a.stdout).Encode(done)
	}
	fmt.Fprintln(a.stdout, plant.CompactSummary(done, time.Since(start)))
	return nil
}

// plantSub adds a subcommand that opens the plant store given by --db.
func (a *app) plantSub(parent *cobra.Command, use, short string, nargs int, f func(context.Context, *plant.DB, []string) error) *cobra.Command {
	var db string
	c := &cobra.Command{Use: use + " --db postgres://…", Short: short, Args: cobra.ExactArgs(nargs),
		RunE: func(cmd *cobra.Command, args []string) error {
			p, err := plant.OpenFlag(cmd.Context(), db, false)
			if err == nil {
				defer p.Close()
				err = f(cmd.Context(), p, args)
			}
			if err != nil {
				return fmt.Errorf("plant %s: %w", cmd.Name(), err)
			}
			if cmd.Flags().Lookup("json") == nil {
				fmt.Fprintf(a.stdout, "plant %s: done (%s)\n", strings.Join(append([]string{cmd.Name()}, args...), " "), p.Describe(cmd.Context()))
			}
			return nil
		}}
	c.Flags().StringVar(&db, "db", "", "plant store URL, postgres://… (default: $PADLINE_PLANT_URL)")
	parent.AddCommand(c)
	return c
}

// logSub adds a subcommand on a station's shift log (--station, --db).
func (a *app) logSub(parent *cobra.Command, station *string, use, short string, f func(context.Context, string, *session.Station) error) *cobra.Command {
	c := &cobra.Command{Use: use + " --station FILE [--db PATH]", Short: short, Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			var st *session.Station
			var err error
			if *station != "" {
				st, err = session.LoadStation(*station)
			}
			path, perr := shiftLogPath(cmd, *station)
			if err = errors.Join(err, perr); err == nil {
				err = f(cmd.Context(), path, st)
			}
			if err != nil {
				return fmt.Errorf("plant %s: %w", use, err)
			}
			return nil
		}}
	c.Flags().StringVar(station, "station", "", "station file (or built-in name) whose shift log to read")
	addShiftLogFlag(c.Flags())
	parent.AddCommand(c)
	return c
}

// lineCmd builds `padline line`: the line board.
func (a *app) lineCmd() *cobra.Command {
	var db, listen, line string
	cmd := &cobra.Command{Use: "line --db postgres://BOARD_ROLE@… --listen ADDR [--line L]", Args: cobra.NoArgs,
		Short: "Serve the line board: every station's last unit, yield, check, wear, drift and backlog",
		Long: `line serves a read-only web page over every station of a line (--line) or of
the plant: last unit, first-pass yield this shift, check due, relay wear, open
drift alarms and forwarding backlog, refreshed every 2 s. It connects as a
role that cannot write ('padline plant add-reader'); any other is refused.`,
		Example: `  padline line --db postgres://padline_board@plant-db/plant --listen :8080 --line L2`,
		RunE: func(cmd *cobra.Command, _ []string) error {
			p, err := plant.OpenFlag(cmd.Context(), db, true)
			if err != nil {
				return fmt.Errorf("line: %w", err)
			}
			defer p.Close()
			ln, err := net.Listen("tcp", listen)
			if err != nil {
				return fmt.Errorf("line: --listen %s: %w", listen, err)
			}
			fmt.Fprintf(a.stdout, "line board on http://%s/\n", ln.Addr())
			return lineboard.Serve(cmd.Context(), ln, p, line)
		}}
	cmd.Flags().StringVar(&db, "db", "", "plant store URL as the board's read-only role, postgres://… (default: $PADLINE_PLANT_URL)")
	cmd.Flags().StringVar(&listen, "listen", "127.0.0.1:8080", "address to serve on, e.g. :8080")
	cmd.Flags().StringVar(&line, "line", "", "only this line's stations (default: the whole plant)")
	return cmd
}
