package history

import (
	"errors"
	"fmt"
	"time"

	"padline/sequences"
	"padline/store"
)

// Query is `padline history`'s flags as the user gave them; Options checks
// them and turns them into what Write asks the log.
type Query struct {
	DB                                              string
	Serial, Variant, Station, Fixture, Lot, Verdict string
	Panel                                           string
	Site                                            int
	// Since and Until: a duration back from now or a local date or time
	// (store.ParseWhen).
	Since, Until string
	// Format is table, csv or json; FormatGiven says --format was set
	// (--json then conflicts with any other).
	Format                          string
	FormatGiven, JSON               bool
	Per                             string
	LimitsHistory, IncludeSimulated bool
}

// Options checks q (every error names the flag) and builds the query;
// now anchors relative times.
func (q Query) Options(now time.Time) (Options, error) {
	opts := Options{DB: q.DB, Format: q.Format, Per: q.Per, LimitsHistory: q.LimitsHistory, IncludeSimulated: q.IncludeSimulated}
	if opts.Format == "" {
		opts.Format = "table"
	}
	if opts.Per == "" {
		opts.Per = "run"
	}
	if opts.Per != "run" && opts.Per != "measurement" {
		return opts, fmt.Errorf("history: --per must be run or measurement, got %q", q.Per)
	}
	if q.JSON {
		if q.FormatGiven && q.Format != "json" {
			return opts, fmt.Errorf("history: --json conflicts with --format %s", q.Format)
		}
		opts.Format = "json"
	}
	switch opts.Format {
	case "table", "csv", "json":
	default:
		return opts, fmt.Errorf("history: --format must be table, csv or json, got %q", opts.Format)
	}
	if q.Serial == "" && q.Variant == "" && q.Panel == "" {
		return opts, errors.New("history: give --serial S or --variant V, or --panel P (see padline history --help)")
	}
	if q.Site < 0 {
		return opts, fmt.Errorf("history: --site %d: sites count from 1", q.Site)
	}
	if q.LimitsHistory && q.Variant == "" {
		return opts, errors.New("history: --limits-history needs --variant")
	}
	f := store.Filter{Serial: q.Serial, Variant: q.Variant, Station: q.Station, Fixture: q.Fixture, Lot: q.Lot, Panel: q.Panel, Site: q.Site}
	var err error
	if f.Since, err = store.ParseWhen(q.Since, now); err != nil {
		return opts, fmt.Errorf("history: --since: %w", err)
	}
	if f.Until, err = store.ParseWhen(q.Until, now); err != nil {
		return opts, fmt.Errorf("history: --until: %w", err)
	}
	switch v := sequences.Verdict(q.Verdict); v {
	case "", sequences.Pass, sequences.Fail, sequences.StationFault:
		f.Verdict = v
	default:
		return opts, fmt.Errorf("history: --verdict must be pass, fail or station-fault, got %q", q.Verdict)
	}
	opts.Filter = f
	return opts, nil
}
