package history

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"

	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
)

// Options are what `padline history` asks the shift log.
type Options struct {
	DB               string // the shift log's path (never created)
	Filter           store.Filter
	Format           string // table, csv or json (JSON lines)
	Per              string // csv: "run" (default) or "measurement"
	LimitsHistory    bool   // the variant's configuration changes instead of runs
	IncludeSimulated bool   // also simulated runs in a log with real ones
}

// Write opens the shift log and writes what opts asks for to w.
func Write(ctx context.Context, w io.Writer, opts Options) error {
	db, closeLog, err := openLog(ctx, opts.DB)
	if err != nil {
		return fmt.Errorf("history: %w", err)
	}
	defer closeLog()
	if opts.Filter.Driver, err = session.DriverFilter(ctx, db, opts.IncludeSimulated); err != nil {
		return fmt.Errorf("history: %w", err)
	}
	out := bufio.NewWriter(w)
	defer out.Flush()

	if opts.LimitsHistory {
		return writeConfigHistory(ctx, out, db, opts)
	}
	switch opts.Format {
	case "csv":
		if opts.Per == "measurement" {
			_, err = store.WriteRunsCSV(out, db.Runs(ctx, opts.Filter))
		} else if sl, ok := db.(*store.DB); ok {
			_, err = sl.WriteRunCSV(ctx, out, opts.Filter)
		} else {
			err = errors.New("one row per run is written from a station's shift log; on the plant store use --per measurement")
		}
	case "json":
		_, err = store.WriteRunsJSONL(out, db.Runs(ctx, opts.Filter))
	default:
		err = writeHistoryTable(ctx, out, db, opts)
	}
	if err != nil {
		return fmt.Errorf("history: %w", err)
	}
	return out.Flush()
}

// writeHistoryTable prints one line per run as the runs stream in (no
// column sizing pass, so memory stays flat on long ranges), then totals.
func writeHistoryTable(ctx context.Context, w io.Writer, db runLog, opts Options) error {
	const row = "%-8s %-19s %-16s %-8s %-7s %-10s %-13s %-14s %8s\n"
	fmt.Fprintf(w, row, "ID", "FINISHED", "SERIAL", "STATION", "FIXTURE", "LOT", "VERDICT", "FAIL CODE", "TRIP pF")
	var n, pass, fail, sf, flagged int
	for e, err := range db.Runs(ctx, opts.Filter) {
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
		if e.PassAfterFail() {
			verdict += " (retest)"
			flagged++
		}
		fmt.Fprintf(w, row, strconv.FormatInt(e.ID, 10), e.Finished.Local().Format("2006-01-02 15:04:05"),
			e.Serial, e.Station, e.Fixture, e.Lot, verdict, dashIfEmpty(string(e.FailCode)), histPF(e.TripPF))
		if e.Panel != "" {
			fmt.Fprintf(w, "    panel %s site %02d\n", e.Panel, e.Site)
		}
		if opts.Filter.Serial != "" {
			writeDetail(w, e)
		}
	}
	// x-outs live in the shift log only: the plant store keeps each run's panel
	// and site, not the panel's x-outs.
	if xl, ok := db.(interface {
		XOuts(ctx context.Context, panel string) ([]store.XOut, error)
	}); ok && opts.Filter.Panel != "" {
		xs, err := xl.XOuts(ctx, opts.Filter.Panel)
		if err != nil {
			return err
		}
		for _, x := range xs {
			fmt.Fprintf(w, "%-8s %-19s %-16s %-8s %-7s %-10s %-13s  site %02d marked bad on the panel (x-out): not tested\n", "-",
				x.Time.Local().Format("2006-01-02 15:04:05"), x.Serial, x.Station, x.Fixture, "-", "not tested", x.Site)
		}
	}
	if n == 0 {
		fmt.Fprintf(w, "no runs match in %s\n", opts.DB)
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
func writeConfigHistory(ctx context.Context, w io.Writer, db runLog, opts Options) error {
	hist, err := db.ConfigHistory(ctx, opts.Filter.Variant)
	if err != nil {
		return fmt.Errorf("history: %w", err)
	}
	// A station's shift log also keeps every limits version of the variant
	// with its cause and who approved it (store migration 0008).
	var versions []store.LimitsVersion
	if sl, ok := db.(*store.DB); ok {
		if versions, err = sl.LimitsVersions(ctx, opts.Filter.Station, "", opts.Filter.Variant, ""); err != nil {
			return fmt.Errorf("history: %w", err)
		}
	}
	switch opts.Format {
	case "json":
		enc := json.NewEncoder(w)
		for _, c := range hist {
			if err := enc.Encode(struct {
				Variant   string    `json:"variant"`
				Hash      string    `json:"config_hash"`
				FirstSeen time.Time `json:"first_seen"`
				Bytes     int       `json:"bytes"`
			}{opts.Filter.Variant, c.Hash, c.FirstSeen, c.Size}); err != nil {
				return fmt.Errorf("history: %w", err)
			}
		}
		for _, v := range versions {
			if err := enc.Encode(struct {
				V store.LimitsVersion `json:"limits_version"`
			}{v}); err != nil {
				return fmt.Errorf("history: %w", err)
			}
		}
	case "csv":
		fmt.Fprintln(w, "variant,config_hash,first_seen,bytes")
		for _, c := range hist {
			fmt.Fprintf(w, "%s,%s,%s,%d\n", histCSVField(opts.Filter.Variant), c.Hash, c.FirstSeen.Format(time.RFC3339Nano), c.Size)
		}
	default:
		if len(hist) == 0 {
			fmt.Fprintf(w, "no configuration of %s in %s\n", opts.Filter.Variant, opts.DB)
		} else {
			fmt.Fprintf(w, "%-19s %-64s %s\n", "FIRST SEEN", "CONFIG HASH (sha256)", "BYTES")
			for _, c := range hist {
				fmt.Fprintf(w, "%-19s %-64s %d\n", c.FirstSeen.Local().Format("2006-01-02 15:04:05"), c.Hash, c.Size)
			}
			fmt.Fprintf(w, "%s: %s\n", opts.Filter.Variant, plural(len(hist), "configuration", "configurations"))
		}
		if len(versions) > 0 {
			fmt.Fprintf(w, "\nlimits versions of %s (every change of what runs judge against, its cause and who approved it):\n", opts.Filter.Variant)
			session.WriteLimitsVersions(w, versions)
		}
	}
	return nil
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

// dashIfEmpty shows an empty text field as "-".
func dashIfEmpty(s string) string {
	if s == "" {
		return "-"
	}
	return s
}
