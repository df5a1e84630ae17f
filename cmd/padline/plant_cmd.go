package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"time"

	"github.com/spf13/cobra"

	"padline/sequences/session"
	"padline/store"
	"padline/store/plant"
)

// plantCmd builds `padline plant`: the plant store's setup and a station's
// forwarding status.
func (a *app) plantCmd() *cobra.Command {
	cmd := &cobra.Command{
		Use:   "plant",
		Short: "The plant store: set up the PostgreSQL database, register stations, forwarding status",
		Long: `plant looks after the plant store: one PostgreSQL database that every station
forwards its committed runs to (with their measurements, the variant
configuration they were judged under, shift-start checks, studies and relay
wear), so history, drift and the line board can answer across the plant.

Each station's SQLite shift log stays the source of truth: a station tests
whether or not the plant store answers, keeps what it has not sent in its
outbox, and catches up on its own. Every run arrives exactly once.

  init         create or update the plant schema (run as the database owner)
  add-station  register a station and the PostgreSQL role it logs in as
  stations     list the registered stations
  status       a station's forwarding: backlog, last forwarded run, last error
  forward      send a station's backlog now and exit (runs do this by themselves)

A station forwards when its station file has plant: {url: postgres://…} or
'padline run' gets --plant-url. Give each station its own role: the
database then refuses rows under any other station's name.`,
		Example: `  padline plant init --db postgres://padline_admin@plant-db/plant
  padline plant add-station L2-S1 --line L2 --role padline_l2_s1 --db postgres://padline_admin@plant-db/plant
  padline plant status --station /etc/padline/station.yaml
  padline plant status --station demo-sim --json`,
	}
	cmd.AddCommand(a.plantInitCmd(), a.plantAddStationCmd(), a.plantStationsCmd(), a.plantStatusCmd(), a.plantForwardCmd())
	return cmd
}

// plantDB resolves the plant store URL: --db, else $PADLINE_PLANT_URL.
func plantDB(flag string) (string, error) {
	if flag == "" {
		flag = os.Getenv("PADLINE_PLANT_URL")
	}
	if flag == "" {
		return "", errors.New("give the plant store with --db postgres://… or $PADLINE_PLANT_URL")
	}
	if !isPlantURL(flag) {
		return "", fmt.Errorf("--db %q: want a postgres:// URL", flag)
	}
	return flag, nil
}

func (a *app) plantInitCmd() *cobra.Command {
	var db string
	cmd := &cobra.Command{
		Use:   "init --db postgres://…",
		Short: "Create or update the plant schema (idempotent)",
		Long: `init applies the plant schema's migrations that the database lacks, each in one
transaction. Run it as the role that will own the tables (the plant
administrator); pick a schema with ?search_path=NAME in the URL.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			url, err := plantDB(db)
			if err != nil {
				return fmt.Errorf("plant init: %w", err)
			}
			p, err := plant.Open(cmd.Context(), url)
			if err != nil {
				return fmt.Errorf("plant init: %w", err)
			}
			defer p.Close()
			if err := p.Migrate(cmd.Context()); err != nil {
				return fmt.Errorf("plant init: %s: %w", plant.Redact(url), err)
			}
			fmt.Fprintf(a.stdout, "plant store %s at schema version %d\n", plant.Redact(url), plant.SchemaVersion())
			return nil
		},
	}
	cmd.Flags().StringVar(&db, "db", "", "plant store URL, postgres://… (default: $PADLINE_PLANT_URL)")
	return cmd
}

func (a *app) plantAddStationCmd() *cobra.Command {
	var db, line, role string
	cmd := &cobra.Command{
		Use:   "add-station NAME [--line L] [--role ROLE] --db postgres://…",
		Short: "Register a station (and create its login role)",
		Long: `add-station registers a station by the name in its station file. With --role it
also creates that PostgreSQL login role (if missing) and grants it what
forwarding needs; row-level security then lets the role write and read this
station's rows only. Point the station at postgres://ROLE@HOST/DB. Set the
role's password or pg_hba.conf rule as your site requires.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			url, err := plantDB(db)
			if err != nil {
				return fmt.Errorf("plant add-station: %w", err)
			}
			p, err := plant.Open(cmd.Context(), url)
			if err != nil {
				return fmt.Errorf("plant add-station: %w", err)
			}
			defer p.Close()
			if err := p.AddStation(cmd.Context(), plant.Station{Name: args[0], Line: line, Role: role}); err != nil {
				return fmt.Errorf("plant add-station: %w", err)
			}
			fmt.Fprintf(a.stdout, "station %s registered (line %s, role %s)\n", args[0], dashIfEmpty(line), dashIfEmpty(role))
			return nil
		},
	}
	f := cmd.Flags()
	f.StringVar(&db, "db", "", "plant store URL, postgres://… (default: $PADLINE_PLANT_URL)")
	f.StringVar(&line, "line", "", "the line the station belongs to, e.g. L2")
	f.StringVar(&role, "role", "", "PostgreSQL login role the station forwards as")
	return cmd
}

func (a *app) plantStationsCmd() *cobra.Command {
	var db string
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "stations --db postgres://…",
		Short: "List the registered stations",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			url, err := plantDB(db)
			if err != nil {
				return fmt.Errorf("plant stations: %w", err)
			}
			p, err := plant.Open(cmd.Context(), url)
			if err != nil {
				return fmt.Errorf("plant stations: %w", err)
			}
			defer p.Close()
			ss, err := p.Stations(cmd.Context())
			if err != nil {
				return fmt.Errorf("plant stations: %w", err)
			}
			if asJSON {
				type js struct {
					Name string `json:"station"`
					Line string `json:"line"`
					Role string `json:"role"`
				}
				out := []js{}
				for _, s := range ss {
					out = append(out, js{s.Name, s.Line, s.Role})
				}
				return json.NewEncoder(a.stdout).Encode(out)
			}
			fmt.Fprintf(a.stdout, "%-16s %-8s %s\n", "STATION", "LINE", "ROLE")
			for _, s := range ss {
				fmt.Fprintf(a.stdout, "%-16s %-8s %s\n", s.Name, dashIfEmpty(s.Line), dashIfEmpty(s.Role))
			}
			return nil
		},
	}
	cmd.Flags().StringVar(&db, "db", "", "plant store URL, postgres://… (default: $PADLINE_PLANT_URL)")
	cmd.Flags().BoolVar(&asJSON, "json", false, "print JSON")
	return cmd
}

// plantStatus is `padline plant status --json`.
type plantStatus struct {
	ShiftLog       string          `json:"shift_log"`
	PlantURL       string          `json:"plant_url"`
	LogUUID        string          `json:"log_uuid"`
	BacklogRuns    int64           `json:"backlog_runs"`
	BacklogChecks  int64           `json:"backlog_checks"`
	BacklogStudies int64           `json:"backlog_studies"`
	LastRunID      int64           `json:"last_forwarded_run"`
	LastTime       *time.Time      `json:"last_forwarded_at"`
	Forwarded      int64           `json:"forwarded_runs"`
	LastError      string          `json:"last_error"`
	LastErrorTime  *time.Time      `json:"last_error_at"`
	Refused        int64           `json:"refused"`
	RecentRefused  []store.Refusal `json:"recent_refused"`
}

func (a *app) plantStatusCmd() *cobra.Command {
	var station string
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "status --station FILE",
		Short: "A station's forwarding: backlog, last forwarded run, last error",
		Long: `status reads the station's shift log only (it works while the plant store is
down): how many runs, checks and studies wait to be forwarded, the last run
the plant store accepted and when, the last error, and rows the plant
refused (with the database's reason; they are not retried).`,
		Example: `  padline plant status --station /etc/padline/station.yaml
  padline plant status --db /var/lib/padline/L2-S1.db --json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			path, err := shiftLogPath(cmd, station)
			if err != nil {
				return fmt.Errorf("plant status: %w", err)
			}
			if _, err := os.Stat(path); err != nil {
				return fmt.Errorf("plant status: no shift log at %s (give --db PATH or --station FILE)", path)
			}
			db, err := store.Open(path)
			if err != nil {
				return fmt.Errorf("plant status: %w", err)
			}
			defer db.Close()
			o, err := db.OutboxState(cmd.Context())
			if err != nil {
				return fmt.Errorf("plant status: %w", err)
			}
			rep := plantStatus{ShiftLog: path, LogUUID: o.LogUUID, BacklogRuns: o.BacklogRuns, BacklogChecks: o.BacklogChecks,
				BacklogStudies: o.BacklogStudies, LastRunID: o.RunCursor, Forwarded: o.Forwarded, LastError: o.LastError, Refused: o.Refused}
			if station != "" {
				if st, err := session.LoadStation(station); err == nil {
					rep.PlantURL = plant.Redact(plantURL("", st))
				}
			}
			if !o.LastTime.IsZero() {
				rep.LastTime = &o.LastTime
			}
			if !o.LastErrorTime.IsZero() {
				rep.LastErrorTime = &o.LastErrorTime
			}
			if rep.RecentRefused, err = db.RefusedRows(cmd.Context(), 10); err != nil {
				return fmt.Errorf("plant status: %w", err)
			}
			if asJSON {
				enc := json.NewEncoder(a.stdout)
				enc.SetIndent("", "  ")
				return enc.Encode(rep)
			}
			writePlantStatus(a.stdout, rep)
			return nil
		},
	}
	f := cmd.Flags()
	f.StringVar(&station, "station", "", "station file (or built-in name) whose shift log to read")
	addShiftLogFlag(f)
	f.BoolVar(&asJSON, "json", false, "print one JSON object")
	return cmd
}

func writePlantStatus(w io.Writer, r plantStatus) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
	p("shift log     %s (plant id %s)", r.ShiftLog, r.LogUUID)
	if r.PlantURL != "" {
		p("plant store   %s", r.PlantURL)
	}
	p("backlog       %d runs, %d checks, %d studies", r.BacklogRuns, r.BacklogChecks, r.BacklogStudies)
	if r.LastTime != nil {
		p("last batch    %s: runs up to id %d forwarded (%d in all)", r.LastTime.Local().Format("2006-01-02 15:04:05"), r.LastRunID, r.Forwarded)
	} else {
		p("last batch    none yet")
	}
	if r.LastError != "" {
		p("last error    %s: %s", r.LastErrorTime.Local().Format("2006-01-02 15:04:05"), r.LastError)
	} else {
		p("last error    none since the last batch")
	}
	p("refused       %d rows", r.Refused)
	for _, x := range r.RecentRefused {
		p("  %s %d: %s", x.Kind, x.LocalID, x.Reason)
	}
}

func (a *app) plantForwardCmd() *cobra.Command {
	var station, url string
	cmd := &cobra.Command{
		Use:   "forward --station FILE [--plant-url postgres://…]",
		Short: "Send a station's backlog to the plant store now, then exit",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			st, err := session.LoadStation(station)
			if err != nil {
				return fmt.Errorf("plant forward: %w", err)
			}
			path, err := shiftLogPath(cmd, station)
			if err != nil {
				return fmt.Errorf("plant forward: %w", err)
			}
			u := plantURL(url, st)
			if u == "" {
				return fmt.Errorf("plant forward: station %s has no plant.url; give --plant-url", st.Source.Name)
			}
			db, err := store.Open(path)
			if err != nil {
				return fmt.Errorf("plant forward: %w", err)
			}
			defer db.Close()
			p, err := plant.Open(cmd.Context(), u)
			if err != nil {
				return fmt.Errorf("plant forward: %w", err)
			}
			defer p.Close()
			start := time.Now()
			n := 0
			f := &plant.Forwarder{Log: db, Plant: p, Station: st.Name, Profile: stationProfile(st),
				OnBatch: func(r plant.Result) { n += r.RunsLanded }}
			if err := f.Drain(cmd.Context()); err != nil {
				return fmt.Errorf("plant forward: %w", err)
			}
			fmt.Fprintf(a.stdout, "%d runs forwarded to %s in %.1f s\n", n, plant.Redact(u), time.Since(start).Seconds())
			return nil
		},
	}
	f := cmd.Flags()
	f.StringVar(&station, "station", "", "station file (or built-in name) (required)")
	f.StringVar(&url, "plant-url", "", "plant store (default: $PADLINE_PLANT_URL, else the station file's plant.url)")
	addShiftLogFlag(f)
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

func dashIfEmpty(s string) string {
	if s == "" {
		return "-"
	}
	return s
}
