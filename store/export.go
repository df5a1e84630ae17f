package store

import (
	"bufio"
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strconv"
	"time"
)

// CSVHeader is the header row of WriteCSV: the run's columns, then one
// measurement's (m_verdict is the measurement's own verdict), then the
// run's panel and site (empty for a unit tested alone).
var CSVHeader = []string{
	"run_id", "serial", "variant", "config_hash", "station", "fixture", "operator", "lot",
	"software", "started", "finished", "verdict", "fail_code", "trip_pf",
	"step", "name", "value", "unit", "low", "high", "m_verdict",
	"panel", "site",
}

// WriteCSV streams the runs matching f to w as CSV, flat: a header row, then
// one row per measurement with the run's columns repeated (a run without
// measurements gives one row with empty measurement columns). Times are
// RFC 3339 UTC with nanoseconds; numbers use the shortest form that reads
// back exactly; a missing value or limit is an empty field. It returns the
// number of runs written.
func (db *DB) WriteCSV(ctx context.Context, w io.Writer, f Filter) (int64, error) {
	cw := csv.NewWriter(w)
	if err := cw.Write(CSVHeader); err != nil {
		return 0, fmt.Errorf("write csv: %w", err)
	}
	var n int64
	rec := make([]string, len(CSVHeader))
	for e, err := range db.Runs(ctx, f) {
		if err != nil {
			return n, fmt.Errorf("write csv: %w", err)
		}
		rec[0] = strconv.FormatInt(e.ID, 10)
		rec[1], rec[2], rec[3], rec[4], rec[5] = e.Serial, e.Variant, e.ConfigHash, e.Station, e.Fixture
		rec[6], rec[7], rec[8] = e.Operator, e.Lot, e.Software
		rec[9], rec[10] = timeText(e.Started), timeText(e.Finished)
		rec[11], rec[12], rec[13] = string(e.Verdict), string(e.FailCode), numText(e.TripPF)
		rec[21], rec[22] = e.Panel, ""
		if e.Panel != "" {
			rec[22] = strconv.Itoa(e.Site)
		}
		if len(e.Measurements) == 0 {
			clear(rec[14:21])
			if err := cw.Write(rec); err != nil {
				return n, fmt.Errorf("write csv: %w", err)
			}
		}
		for _, m := range e.Measurements {
			rec[14], rec[15], rec[16], rec[17] = string(m.Step), string(m.Name), numText(m.Value), m.Unit
			rec[18], rec[19], rec[20] = numText(m.Low), numText(m.High), string(m.Verdict)
			if err := cw.Write(rec); err != nil {
				return n, fmt.Errorf("write csv: %w", err)
			}
		}
		n++
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return n, fmt.Errorf("write csv: %w", err)
	}
	return n, nil
}

func timeText(t time.Time) string {
	if t.IsZero() {
		return ""
	}
	return t.UTC().Format(time.RFC3339Nano)
}

func numText(v float64) string {
	if math.IsNaN(v) {
		return ""
	}
	return strconv.FormatFloat(v, 'g', -1, 64)
}

// JSONRun is one line of WriteJSONL. Missing values and limits are null.
type JSONRun struct {
	ID           int64             `json:"id"`
	Serial       string            `json:"serial"`
	Variant      string            `json:"variant"`
	ConfigHash   string            `json:"config_hash"`
	Station      string            `json:"station"`
	Fixture      string            `json:"fixture"`
	Operator     string            `json:"operator"`
	Lot          string            `json:"lot"`
	Software     string            `json:"software"`
	Started      *time.Time        `json:"started"`
	Finished     time.Time         `json:"finished"`
	Verdict      string            `json:"verdict"`
	FailCode     string            `json:"fail_code"`
	TripPF       *float64          `json:"trip_pf"`
	Measurements []JSONMeasurement `json:"measurements"`
	// Panel and Site are set for a unit tested on a panel.
	Panel string `json:"panel,omitempty"`
	Site  int    `json:"site,omitempty"`
}

// JSONMeasurement is one measurement inside a JSONRun.
type JSONMeasurement struct {
	Step    string   `json:"step"`
	Name    string   `json:"name"`
	Value   *float64 `json:"value"`
	Unit    string   `json:"unit"`
	Low     *float64 `json:"low"`
	High    *float64 `json:"high"`
	Verdict string   `json:"verdict"`
}

// JSON converts an entry to its export form.
func (e *Entry) JSON() JSONRun {
	j := JSONRun{
		ID: e.ID, Serial: e.Serial, Variant: e.Variant, ConfigHash: e.ConfigHash,
		Station: e.Station, Fixture: e.Fixture, Operator: e.Operator, Lot: e.Lot,
		Software: e.Software, Finished: e.Finished.UTC(), Verdict: string(e.Verdict),
		FailCode: string(e.FailCode), TripPF: numPtr(e.TripPF),
		Measurements: make([]JSONMeasurement, 0, len(e.Measurements)),
		Panel:        e.Panel, Site: e.Site,
	}
	if !e.Started.IsZero() {
		s := e.Started.UTC()
		j.Started = &s
	}
	for _, m := range e.Measurements {
		j.Measurements = append(j.Measurements, JSONMeasurement{
			Step: string(m.Step), Name: string(m.Name), Value: numPtr(m.Value), Unit: m.Unit,
			Low: numPtr(m.Low), High: numPtr(m.High), Verdict: string(m.Verdict),
		})
	}
	return j
}

func numPtr(v float64) *float64 {
	if math.IsNaN(v) {
		return nil
	}
	return &v
}

// WriteJSONL streams the runs matching f to w as JSON lines, nested: one
// JSONRun object per line with its measurements in an array. It returns the
// number of runs written.
func (db *DB) WriteJSONL(ctx context.Context, w io.Writer, f Filter) (int64, error) {
	bw := bufio.NewWriter(w)
	enc := json.NewEncoder(bw)
	var n int64
	for e, err := range db.Runs(ctx, f) {
		if err != nil {
			return n, fmt.Errorf("write json lines: %w", err)
		}
		if err := enc.Encode(e.JSON()); err != nil {
			return n, fmt.Errorf("write json lines: %w", err)
		}
		n++
	}
	if err := bw.Flush(); err != nil {
		return n, fmt.Errorf("write json lines: %w", err)
	}
	return n, nil
}
