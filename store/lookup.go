package store

import (
	"context"
	"fmt"
	"strconv"
	"strings"
	"time"

	"padline/sequences"
)

// RunAt looks up one run of variant (found by its finish time, an indexed
// range of one nanosecond); the zero Entry when it cannot be found.
func (db *DB) RunAt(ctx context.Context, variant string, id int64, at time.Time) Entry {
	for e, err := range db.Runs(ctx, Filter{Variant: variant, Since: at, Until: at.Add(1)}) {
		if err != nil {
			return Entry{}
		}
		if e.ID == id {
			return *e
		}
	}
	return Entry{}
}

// PassAfterFail reports whether the run is a pass the retest policy flagged
// because fails of the same serial came before it.
func (e *Entry) PassAfterFail() bool {
	for _, m := range e.Measurements {
		if m.Step == sequences.StepRetest && m.Name == sequences.MeasPriorFails && m.Value > 0 {
			return true
		}
	}
	return false
}

// ParseWhen reads a --since/--until value into a Filter bound: empty (no
// bound), a duration back from now (Go syntax plus a "d" suffix for days),
// a date, or a time in local time (RFC 3339 carries its own zone).
func ParseWhen(s string, now time.Time) (time.Time, error) {
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
