package session

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"strings"
	"time"

	"padline/sequences"
	"padline/store"
)

// RelayWearStatus is one rung's relay operations against its rated life.
type RelayWearStatus struct {
	Rung     int     `json:"rung"`
	Ops      uint64  `json:"operations"`
	Fraction float64 `json:"fraction_of_rated"`
	Warn     bool    `json:"warn"`
}

// StatusReport is what 'padline station status' shows.
type StatusReport struct {
	Station      string                 `json:"station"`
	Fixture      string                 `json:"fixture"`
	ShiftLog     string                 `json:"shift_log"`
	Ready        bool                   `json:"ready"`
	NotReady     string                 `json:"not_ready,omitempty"`
	LastCheck    *StatusCheck           `json:"last_check"`
	LastType1    *StatusStudy           `json:"last_type1"`
	LastGRR      *StatusStudy           `json:"last_grr"`
	UPF          float64                `json:"U_pf"`
	USource      string                 `json:"U_source"`
	UComponents  []sequences.UComponent `json:"U_components,omitempty"`
	RatedOps     float64                `json:"rated_operations"`
	WarnFraction float64                `json:"relay_warn_fraction"`
	Relays       []RelayWearStatus      `json:"relays"`
	// LogCheck is the whole-file check asked for with --check-log.
	LogCheck *LogCheck `json:"log_check,omitempty"`
}

// LogCheck is SQLite's quick_check over the whole shift log, on demand. A
// station start runs it only when the log is not exactly what the last
// clean close of a checked log left; otherwise it runs in the background
// (store.CheckRecordSuffix).
type LogCheck struct {
	OK       bool    `json:"ok"`
	Findings string  `json:"findings,omitempty"`
	Seconds  float64 `json:"seconds"`
	// Pristine: the file is what the last clean close of a checked log
	// left; Sound is when a check last found that log sound (zero: never).
	Pristine bool      `json:"pristine"`
	Sound    time.Time `json:"last_found_sound,omitzero"`
}

// Err is the damage the check found, as an error; nil when it found none
// or did not run.
func (c *LogCheck) Err() error {
	if c == nil || c.OK {
		return nil
	}
	return fmt.Errorf("%w: %s", store.ErrCorrupt, c.Findings)
}

// CheckLog runs quick_check over the whole shift log at dbPath, reading
// it only (a station may be running on it); nil when there is no log yet.
func CheckLog(ctx context.Context, dbPath string) (*LogCheck, error) {
	if _, err := os.Stat(dbPath); errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	pristine, sound := store.Pristine(dbPath)
	db, err := store.OpenReadOnly(dbPath)
	if err != nil {
		return nil, err
	}
	defer db.Close()
	t0 := time.Now()
	err = db.QuickCheck(ctx)
	c := &LogCheck{OK: err == nil, Seconds: time.Since(t0).Seconds(), Pristine: pristine, Sound: sound}
	switch {
	case err == nil:
	case errors.Is(err, store.ErrCorrupt):
		c.Findings = err.Error()
	default:
		return nil, err
	}
	return c, nil
}

// StatusCheck is the last reference check and the units tested since.
type StatusCheck struct {
	ID        int64     `json:"id"`
	Time      time.Time `json:"time"`
	OK        bool      `json:"ok"`
	RunsSince int64     `json:"runs_since"`
	Faults    []string  `json:"faults"`
}

// StatusStudy is the last study of one kind, summarised.
type StatusStudy struct {
	ID      int64     `json:"id"`
	Time    time.Time `json:"time"`
	Summary string    `json:"summary"`
}

// Status reads, from the shift log at dbPath, whether 'padline run' would
// test production units now (and why not), the last reference check and
// studies, the station's uncertainty U and each rung's relay wear. A
// read-only look: no shift log means none is created.
func Status(ctx context.Context, st *Station, dbPath string) (StatusReport, error) {
	rep := StatusReport{Station: st.Name, Fixture: st.Fixture, ShiftLog: dbPath, RatedOps: st.Ladder.RatedOperations, WarnFraction: st.Trust.RelayWarnFraction}
	if _, err := os.Stat(dbPath); errors.Is(err, fs.ErrNotExist) {
		rep.NotReady = fmt.Sprintf("no shift log at %s yet: nothing was checked or tested with it", dbPath)
		rep.UPF, rep.USource = StatedUncertainty(st)
		for i := range st.Ladder.RungsPF {
			rep.Relays = append(rep.Relays, RelayWearStatus{Rung: i})
		}
		return rep, nil
	}
	db, err := store.OpenReadOnly(dbPath)
	if err != nil {
		return rep, err
	}
	defer db.Close()
	if err := Ready(ctx, db, st, time.Now()); err != nil {
		if !errors.Is(err, ErrNotReady) {
			return rep, err
		}
		rep.NotReady = err.Error()
	} else {
		rep.Ready = true
	}
	if rep.LastCheck, err = lastCheck(ctx, db, st); err != nil {
		return rep, err
	}
	if rep.LastType1, err = lastStudy(ctx, db, st, store.StudyType1); err != nil {
		return rep, err
	}
	if rep.LastGRR, err = lastStudy(ctx, db, st, store.StudyGRR); err != nil {
		return rep, err
	}
	if u, err := db.LastUncertainty(ctx, st.Name, st.Fixture); err == nil {
		rep.UPF, rep.USource = u.UPF, fmt.Sprintf("shift log %s (%s): %s", dbPath, u.Time.Local().Format("2006-01-02 15:04"), u.Source)
		_ = json.Unmarshal(u.Components, &rep.UComponents)
	} else if errors.Is(err, store.ErrNotFound) {
		rep.UPF, rep.USource = StatedUncertainty(st)
	} else {
		return rep, err
	}
	ops, err := db.LoadRelayOps(ctx, st.Fixture)
	if err != nil {
		return rep, err
	}
	for i := range st.Ladder.RungsPF {
		w := RelayWearStatus{Rung: i}
		if i < len(ops) {
			w.Ops = ops[i]
		}
		w.Fraction = float64(w.Ops) / st.Ladder.RatedOperations
		w.Warn = w.Fraction >= st.Trust.RelayWarnFraction
		rep.Relays = append(rep.Relays, w)
	}
	return rep, nil
}

// lastCheck is the station's last reference check; nil when none.
func lastCheck(ctx context.Context, db *store.DB, st *Station) (*StatusCheck, error) {
	c, err := db.LastCheck(ctx, st.Name, st.Fixture)
	if errors.Is(err, store.ErrNotFound) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	sc := &StatusCheck{ID: c.ID, Time: c.Time, OK: c.OK}
	var d CheckReport
	if json.Unmarshal(c.Details, &d) == nil {
		sc.Faults = d.Faults
	}
	if sc.RunsSince, err = db.RunsSince(ctx, st.Name, st.Fixture, c.LastRunID); err != nil {
		return nil, err
	}
	return sc, nil
}

// lastStudy is the station's last study of kind, summarised; nil when none.
func lastStudy(ctx context.Context, db *store.DB, st *Station, kind string) (*StatusStudy, error) {
	s, err := db.LastStudy(ctx, st.Name, st.Fixture, kind)
	if errors.Is(err, store.ErrNotFound) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	ss := &StatusStudy{ID: s.ID, Time: s.Time}
	var x StudyReport
	if json.Unmarshal(s.Results, &x) == nil {
		switch {
		case x.Type1 != nil:
			ss.Summary = fmt.Sprintf("n %d, bias %+.3f pF, sd %.4f pF, Cg %.2f, Cgk %.2f", x.Type1.N, x.Type1.BiasPF, x.Type1.SDPF, x.Type1.Cg, x.Type1.Cgk)
		case x.GRR != nil:
			ss.Summary = fmt.Sprintf("%%GRR %.2f %%, ndc %d, %s", x.GRR.PctGRR, x.GRR.NDC, x.GRR.Verdict)
		}
	}
	return ss, nil
}

// WriteStatus prints the status for people.
func WriteStatus(w io.Writer, rep StatusReport, st *Station) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
	p("station %s / fixture %s   shift log %s", rep.Station, rep.Fixture, rep.ShiftLog)
	if rep.Ready {
		p("production   READY: the last reference check passed and is current")
	} else {
		p("production   REFUSED: %s", rep.NotReady)
	}
	if c := rep.LastCheck; c != nil {
		v := "passed"
		if !c.OK {
			v = "REFUSED: " + strings.Join(c.Faults, "; ")
		}
		p("last check   %d at %s: %s; %d units tested since", c.ID, c.Time.Local().Format("2006-01-02 15:04:05"), v, c.RunsSince)
	} else {
		p("last check   none")
	}
	for _, x := range []struct {
		name string
		s    *StatusStudy
	}{{"type-1", rep.LastType1}, {"gauge R&R", rep.LastGRR}} {
		if x.s == nil {
			p("last %-7s none", x.name)
			continue
		}
		p("last %-7s %d at %s: %s", x.name, x.s.ID, x.s.Time.Local().Format("2006-01-02 15:04"), x.s.Summary)
	}
	p("uncertainty  U = %.3f pF (k = 2) from %s", rep.UPF, rep.USource)
	for _, c := range rep.UComponents {
		p("             %-18s u = %.4f pF   %s", c.Name, c.U, c.Source)
	}
	if c := rep.LogCheck; c != nil {
		state := "changed since the last clean close of a checked log: a station start checks it before the first unit"
		if c.Pristine {
			state = fmt.Sprintf("as the last clean close left it (last found sound %s): a station start checks it in the background", c.Sound.Local().Format("2006-01-02 15:04"))
		}
		if c.OK {
			p("log check    quick_check: no damage in the whole file (%.1f s); %s", c.Seconds, state)
		} else {
			p("log check    DAMAGED: %s; restore the shift log from a copy or start the station with a new --db", c.Findings)
		}
	}
	p("relays       rated %.3g operations; warning at %.0f %% of rated life", rep.RatedOps, 100*rep.WarnFraction)
	for _, r := range rep.Relays {
		warn := ""
		if r.Warn {
			warn = "   WARNING: replace this rung's relay"
		}
		p("  rung %d  %6.2f pF  %12d ops  %7.3f %%%s", r.Rung, st.Ladder.RungsPF[r.Rung], r.Ops, 100*r.Fraction, warn)
	}
}
