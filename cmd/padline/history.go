package main

import (
	"bufio"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"strconv"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
)

// historyOptions are the parsed flags of `padline history`.
type historyOptions struct {
	db            string // resolved shift-log path
	filter        store.Filter
	format        string // table, csv or json
	limitsHistory bool
	withSim       bool // --include-simulated
}

// historyCmd builds `padline history`.
func (a *app) historyCmd() *cobra.Command {
	var (
		dbFlag, stationFile                         string
		serial, variant, station, fixture, lot, ver string
		since, until, format                        string
		withSim                                     bool
		asJSON, limitsHistory                       bool
		panel                                       string
		site                                        int
	)
	cmd := &cobra.Command{
		Use:   "history --serial S | --variant V [filters]",
		Short: "Query the shift log: runs of a serial or a variant, exports, limit changes",
		Long: `history answers "what did this unit measure, and under which limits?" and
"how has this variant been testing?" from the station's SQLite shift log.

Select runs with --serial (every run of one unit, with its measurements and
limits), --variant (runs of one product variant) or --panel (every site of
one panel, and its x-outs: sites marked bad and not tested); --site N keeps
the runs tested at panel site N. Narrow them with
--since/--until, --station, --fixture, --lot and --verdict. Runs are listed
oldest first, by the time their verdict was given.

--since and --until take a duration back from now (90m, 8h, 2d) or a date or
time in local time (2026-11-30, "2026-11-30 14:00", 2026-11-30T14:00:00Z);
--since is inclusive, --until exclusive.

Formats:
  table  one line per run: id, finish time, serial, station, fixture, lot,
         verdict, fail code, trip point (pF); with --serial also each
         measurement with its limits and the configuration hash
  csv    flat: one row per measurement, the run's columns repeated
  json   JSON lines: one object per run with its measurements nested
         (--json is short for --format json)

--limits-history --variant V lists when the variant's configuration (and so
its limits) changed: each distinct config hash and when it was first seen.

The shift log is, first found: --db PATH, the environment variable
PADLINE_DB, the shift_log of --station-file, else ./` + defaultShiftLog + `.
history never creates a shift log.`,
		Example: `  padline history --serial QM205-001234
  padline history --variant QM-205 --since 8h
  padline history --variant QM-205 --since 2026-11-30 --until 2026-12-01 --verdict fail
  padline history --variant QM-205 --station L2-S1 --lot LOT-17 --format csv > lot17.csv
  padline history --variant QM-205 --json | jq .trip_pf
  padline history --limits-history --variant QM-205
  padline history --panel QM205-0001
  PADLINE_DB=/var/lib/padline/L2-S1.db padline history --serial QM205-001234`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			db, err := shiftLogPath(cmd, stationFile)
			if err != nil {
				return fmt.Errorf("history: %w", err)
			}
			opts := historyOptions{db: db, format: format, limitsHistory: limitsHistory}
			if asJSON {
				if cmd.Flags().Changed("format") && format != "json" {
					return fmt.Errorf("history: --json conflicts with --format %s", format)
				}
				opts.format = "json"
			}
			switch opts.format {
			case "table", "csv", "json":
			default:
				return fmt.Errorf("history: --format must be table, csv or json, got %q", opts.format)
			}
			if serial == "" && variant == "" && panel == "" {
				return errors.New("history: give --serial S or --variant V, or --panel P (see padline history --help)")
			}
			if site < 0 {
				return fmt.Errorf("history: --site %d: sites count from 1", site)
			}
			if limitsHistory && variant == "" {
				return errors.New("history: --limits-history needs --variant")
			}
			now := time.Now()
			f := store.Filter{Serial: serial, Variant: variant, Station: station, Fixture: fixture, Lot: lot, Panel: panel, Site: site}
			if f.Since, err = parseWhen(since, now); err != nil {
				return fmt.Errorf("history: --since: %w", err)
			}
			if f.Until, err = parseWhen(until, now); err != nil {
				return fmt.Errorf("history: --until: %w", err)
			}
			switch sequences.Verdict(ver) {
			case "", sequences.Pass, sequences.Fail, sequences.StationFault:
				f.Verdict = sequences.Verdict(ver)
			default:
				return fmt.Errorf("history: --verdict must be pass, fail or station-fault, got %q", ver)
			}
			opts.filter = f
			opts.withSim = withSim
			return a.history(cmd, opts)
		},
	}
	fl := cmd.Flags()
	fl.StringVar(&dbFlag, "db", "", "shift log file (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
	fl.StringVar(&stationFile, "station-file", "", "station file (or built-in name) whose shift_log to read")
	fl.StringVar(&serial, "serial", "", "runs of this unit serial")
	fl.StringVar(&variant, "variant", "", "runs of this product variant, e.g. QM-205")
	fl.StringVar(&since, "since", "", "from this time on (inclusive): 8h, 2d, 2026-11-30, \"2026-11-30 14:00\"")
	fl.StringVar(&until, "until", "", "before this time (exclusive); same forms as --since")
	fl.StringVar(&station, "station", "", "only runs of this station, e.g. L2-S1")
	fl.StringVar(&fixture, "fixture", "", "only runs on this fixture, e.g. FX-07")
	fl.StringVar(&lot, "lot", "", "only runs of this lot")
	fl.BoolVar(&withSim, "include-simulated", false, "in a log with runs of a real station, also show simulated runs (left out by default)")
	fl.StringVar(&panel, "panel", "", "runs of this panel (every site), with its x-outs")
	fl.IntVar(&site, "site", 0, "only runs tested at this panel site (1-based)")
	fl.StringVar(&ver, "verdict", "", "only runs with this verdict: pass, fail or station-fault")
	fl.StringVar(&format, "format", "table", "output: table, csv or json (JSON lines)")
	fl.BoolVar(&asJSON, "json", false, "same as --format json")
	fl.BoolVar(&limitsHistory, "limits-history", false, "list when the variant's configuration hash changed")
	return cmd
}

// history opens the shift log and prints what opts asks for.
func (a *app) history(cmd *cobra.Command, opts historyOptions) error {
	if _, err := os.Stat(opts.db); errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("history: no shift log at %s (give --db PATH, set PADLINE_DB, or --station-file)", opts.db)
	}
	db, err := store.Open(opts.db)
	if err != nil {
		return fmt.Errorf("history: %w", err)
	}
	defer db.Close()
	ctx := cmd.Context()
	if opts.filter.Driver, err = session.DriverFilter(ctx, db, opts.withSim); err != nil {
		return fmt.Errorf("history: %w", err)
	}
	out := bufio.NewWriter(a.stdout)
	defer out.Flush()

	if opts.limitsHistory {
		return writeConfigHistory(out, db, cmd, opts)
	}
	switch opts.format {
	case "csv":
		_, err = db.WriteCSV(ctx, out, opts.filter)
	case "json":
		_, err = db.WriteJSONL(ctx, out, opts.filter)
	default:
		err = writeHistoryTable(out, db, cmd, opts)
	}
	if err != nil {
		return fmt.Errorf("history: %w", err)
	}
	return out.Flush()
}

// writeHistoryTable prints one line per run as the runs stream in (no
// column sizing pass, so memory stays flat on long ranges), then totals.
func writeHistoryTable(w io.Writer, db *store.DB, cmd *cobra.Command, opts historyOptions) error {
	const row = "%-8s %-19s %-16s %-8s %-7s %-10s %-13s %-14s %8s\n"
	fmt.Fprintf(w, row, "ID", "FINISHED", "SERIAL", "STATION", "FIXTURE", "LOT", "VERDICT", "FAIL CODE", "TRIP pF")
	var n, pass, fail, sf, flagged int
	for e, err := range db.Runs(cmd.Context(), opts.filter) {
		if err != nil {
			return err
		}
		n++
		switch e.Verdict {
		case sequences.Pass:
			pass++
		case sequences.Fail:
			fail++
		case sequences.StationFault:
			sf++
		}
		verdict := string(e.Verdict)
		if passAfterFail(e) {
			verdict += " (retest)"
			flagged++
		}
		fmt.Fprintf(w, row, strconv.FormatInt(e.ID, 10), e.Finished.Local().Format("2006-01-02 15:04:05"),
			e.Serial, e.Station, e.Fixture, e.Lot, verdict, dashIfEmpty(string(e.FailCode)), histPF(e.TripPF))
		if e.Panel != "" {
			fmt.Fprintf(w, "    panel %s site %02d\n", e.Panel, e.Site)
		}
		if opts.filter.Serial != "" {
			writeDetail(w, e)
		}
	}
	if opts.filter.Panel != "" {
		xs, err := db.XOuts(cmd.Context(), opts.filter.Panel)
		if err != nil {
			return err
		}
		for _, x := range xs {
			fmt.Fprintf(w, "%-8s %-19s %-16s %-8s %-7s %-10s %-13s  site %02d marked bad on the panel (x-out): not tested\n", "-",
				x.Time.Local().Format("2006-01-02 15:04:05"), x.Serial, x.Station, x.Fixture, "-", "not tested", x.Site)
		}
	}
	if n == 0 {
		fmt.Fprintf(w, "no runs match in %s\n", opts.db)
		return nil
	}
	noun := "runs"
	if n == 1 {
		noun = "run"
	}
	fmt.Fprintf(w, "%d %s: %d pass, %d fail, %d station-fault\n", n, noun, pass, fail, sf)
	if flagged > 0 {
		fmt.Fprintf(w, "%d pass(es) after an earlier fail, marked \"(retest)\"\n", flagged)
	}
	return nil
}

// passAfterFail reports whether a run is a pass the retest policy flagged
// because fails came before it.
func passAfterFail(e *store.Entry) bool {
	for _, m := range e.Measurements {
		if m.Step == sequences.StepRetest && m.Name == sequences.MeasPriorFails && m.Value > 0 {
			return true
		}
	}
	return false
}

// writeDetail prints a run's traceability and measurements under its line.
func writeDetail(w io.Writer, e *store.Entry) {
	fmt.Fprintf(w, "    variant %s  config %s  operator %s  software %s\n",
		e.Variant, histShortHash(e.ConfigHash), dashIfEmpty(e.Operator), dashIfEmpty(e.Software))
	for _, m := range e.Measurements {
		fmt.Fprintf(w, "    %-14s %-16s %12s %-4s  [%s, %s]  %s\n", m.Step, m.Name, histNum(m.Value, "-"), m.Unit,
			histNum(m.Low, "-inf"), histNum(m.High, "+inf"), m.Verdict)
	}
}

// writeConfigHistory prints the variant's configuration changes.
func writeConfigHistory(w io.Writer, db *store.DB, cmd *cobra.Command, opts historyOptions) error {
	hist, err := db.ConfigHistory(cmd.Context(), opts.filter.Variant)
	if err != nil {
		return fmt.Errorf("history: %w", err)
	}
	switch opts.format {
	case "json":
		enc := json.NewEncoder(w)
		for _, c := range hist {
			if err := enc.Encode(struct {
				Variant   string    `json:"variant"`
				Hash      string    `json:"config_hash"`
				FirstSeen time.Time `json:"first_seen"`
				Bytes     int       `json:"bytes"`
			}{opts.filter.Variant, c.Hash, c.FirstSeen, c.Size}); err != nil {
				return fmt.Errorf("history: %w", err)
			}
		}
	case "csv":
		fmt.Fprintln(w, "variant,config_hash,first_seen,bytes")
		for _, c := range hist {
			fmt.Fprintf(w, "%s,%s,%s,%d\n", histCSVField(opts.filter.Variant), c.Hash, c.FirstSeen.Format(time.RFC3339Nano), c.Size)
		}
	default:
		if len(hist) == 0 {
			fmt.Fprintf(w, "no configuration of %s in %s\n", opts.filter.Variant, opts.db)
			return nil
		}
		fmt.Fprintf(w, "%-19s %-64s %s\n", "FIRST SEEN", "CONFIG HASH (sha256)", "BYTES")
		for _, c := range hist {
			fmt.Fprintf(w, "%-19s %-64s %d\n", c.FirstSeen.Local().Format("2006-01-02 15:04:05"), c.Hash, c.Size)
		}
		fmt.Fprintf(w, "%s: %s\n", opts.filter.Variant, plural(len(hist), "configuration", "configurations"))
	}
	return nil
}

// parseWhen reads a --since/--until value: empty, a duration back from now
// (Go syntax plus a "d" suffix for days), a date, or a time in local time.
func parseWhen(s string, now time.Time) (time.Time, error) {
	s = strings.TrimSpace(s)
	if s == "" {
		return time.Time{}, nil
	}
	if days, ok := strings.CutSuffix(s, "d"); ok {
		if n, err := strconv.ParseFloat(days, 64); err == nil && n >= 0 {
			return now.Add(-time.Duration(n * 24 * float64(time.Hour))), nil
		}
	}
	if d, err := time.ParseDuration(s); err == nil {
		if d < 0 {
			return time.Time{}, fmt.Errorf("%q: give a positive duration (it counts back from now)", s)
		}
		return now.Add(-d), nil
	}
	if t, err := time.Parse(time.RFC3339Nano, s); err == nil {
		return t, nil
	}
	for _, layout := range []string{"2006-01-02", "2006-01-02 15:04", "2006-01-02 15:04:05", "2006-01-02T15:04", "2006-01-02T15:04:05"} {
		if t, err := time.ParseInLocation(layout, s, time.Local); err == nil {
			return t, nil
		}
	}
	return time.Time{}, fmt.Errorf("%q is neither a duration (8h, 2d) nor a date/time (2026-11-30, \"2026-11-30 14:00\", RFC 3339)", s)
}

func histPF(v float64) string {
	if math.IsNaN(v) {
		return "-"
	}
	return strconv.FormatFloat(v, 'f', 3, 64)
}

// histNum shows a measured value or limit to six significant digits, or
// none when it is NaN (no value, no limit).
func histNum(v float64, none string) string {
	if math.IsNaN(v) {
		return none
	}
	return strconv.FormatFloat(v, 'g', 6, 64)
}

func histShortHash(h string) string {
	if len(h) > 12 {
		return h[:12]
	}
	return dashIfEmpty(h)
}

func histCSVField(s string) string {
	if strings.ContainsAny(s, ",\"\n\r") {
		return `"` + strings.ReplaceAll(s, `"`, `""`) + `"`
	}
	return s
}

// plural is n with the singular or plural noun: "1 configuration",
// "2 configurations".
func plural(n int, one, many string) string {
	if n == 1 {
		return "1 " + one
	}
	return fmt.Sprintf("%d %s", n, many)
}
