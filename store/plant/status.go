package plant

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"time"

	"padline/store"
)

// Status is a station's forwarding as its shift log records it ('padline
// plant status'); it is read without the plant store, so it answers while
// the plant store is down.
type Status struct {
	ShiftLog       string     `json:"shift_log"`
	PlantURL       string     `json:"plant_url"`
	LogUUID        string     `json:"log_uuid"`
	BacklogRuns    int64      `json:"backlog_runs"`
	BacklogChecks  int64      `json:"backlog_checks"`
	BacklogStudies int64      `json:"backlog_studies"`
	LastRunID      int64      `json:"last_forwarded_run"`
	LastTime       *time.Time `json:"last_forwarded_at"`
	Forwarded      int64      `json:"forwarded_runs"`
	LastError      string     `json:"last_error"`
	// LastErrorFix is what to do about LastError when it is a known
	// setup fault (Hint), "" otherwise.
	LastErrorFix  string          `json:"last_error_what_to_do,omitempty"`
	LastErrorTime *time.Time      `json:"last_error_at"`
	Refused       int64           `json:"refused"`
	RecentRefused []store.Refusal `json:"recent_refused"`
}

// StationStatus reads the forwarding state of the shift log at path
// (never creating one); url is the plant store it forwards to, shown
// without its password. A running station keeps its last batch's cursor in
// memory until its next run's commit, or until its line has been idle a
// while (store.DB.DeferAdvance), so the status may show the last forwarded
// run a unit or a few seconds late (README "The plant store").
func StationStatus(ctx context.Context, path, url string) (Status, error) {
	if _, err := os.Stat(path); err != nil {
		return Status{}, fmt.Errorf("no shift log at %s (give --db PATH or --station FILE)", path)
	}
	db, err := store.Open(path)
	if err != nil {
		return Status{}, err
	}
	defer db.Close()
	o, err := db.OutboxState(ctx)
	if err != nil {
		return Status{}, err
	}
	s := Status{ShiftLog: path, LogUUID: o.LogUUID, BacklogRuns: o.BacklogRuns, BacklogChecks: o.BacklogChecks,
		BacklogStudies: o.BacklogStudies, LastRunID: o.RunCursor, Forwarded: o.Forwarded, LastError: o.LastError, Refused: o.Refused}
	if url != "" {
		s.PlantURL = Redact(url)
	}
	if s.LastError != "" {
		s.LastError, s.LastErrorFix = oneLine(s.LastError), remedy(s.LastError)
	}
	if !o.LastTime.IsZero() {
		s.LastTime = &o.LastTime
	}
	if !o.LastErrorTime.IsZero() {
		s.LastErrorTime = &o.LastErrorTime
	}
	if s.RecentRefused, err = db.RefusedRows(ctx, 10); err != nil {
		return Status{}, err
	}
	return s, nil
}

// Write prints the status as text, or as one indented JSON object.
func (r Status) Write(w io.Writer, asJSON bool) error {
	if asJSON {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(r)
	}
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
	p("shift log     %s (plant id %s)", r.ShiftLog, r.LogUUID)
	if r.PlantURL != "" {
		p("plant store   %s", r.PlantURL)
	} else {
		p("plant store   none set (station file plant.url, or $PADLINE_PLANT_URL)")
	}
	p("backlog       %d runs, %d checks, %d studies", r.BacklogRuns, r.BacklogChecks, r.BacklogStudies)
	if r.LastTime != nil && r.Forwarded == 0 {
		p("last batch    %s: no runs forwarded yet", r.LastTime.Local().Format("2006-01-02 15:04:05"))
	} else if r.LastTime != nil {
		p("last batch    %s: runs up to id %d forwarded (%d in all)", r.LastTime.Local().Format("2006-01-02 15:04:05"), r.LastRunID, r.Forwarded)
	} else {
		p("last batch    none yet")
	}
	if r.LastError != "" {
		p("last error    %s: %s", r.LastErrorTime.Local().Format("2006-01-02 15:04:05"), r.LastError)
		if r.LastErrorFix != "" {
			p("what to do    %s", r.LastErrorFix)
		}
	} else {
		p("last error    none since the last batch")
	}
	p("refused       %d rows", r.Refused)
	for _, x := range r.RecentRefused {
		p("  %s %d: %s", x.Kind, x.LocalID, x.Reason)
	}
	return nil
}

// WriteStations prints the registered stations as a table, or as JSON.
func WriteStations(w io.Writer, ss []Station, asJSON bool) error {
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
		return json.NewEncoder(w).Encode(out)
	}
	fmt.Fprintf(w, "%-16s %-8s %s\n", "STATION", "LINE", "ROLE")
	for _, s := range ss {
		fmt.Fprintf(w, "%-16s %-8s %s\n", s.Name, dash(s.Line), dash(s.Role))
	}
	return nil
}

func dash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

// Forward sends the backlog of the shift log at path, station name's,
// to the plant store at url now, and returns how many runs landed.
func Forward(ctx context.Context, path, url, name string, profile json.RawMessage) (int, error) {
	db, err := store.Open(path)
	if err != nil {
		return 0, err
	}
	defer db.Close()
	p, err := Open(ctx, url)
	if err != nil {
		return 0, err
	}
	defer p.Close()
	n := 0
	f := &Forwarder{Log: db, Plant: p, Station: name, Profile: profile, OnBatch: func(r Result) { n += r.RunsLanded }}
	return n, f.Drain(ctx)
}
