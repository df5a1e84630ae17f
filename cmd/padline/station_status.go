package main

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

	"github.com/spf13/cobra"

	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
)

type relayWear struct {
	Rung     int     `json:"rung"`
	Ops      uint64  `json:"operations"`
	Fraction float64 `json:"fraction_of_rated"`
	Warn     bool    `json:"warn"`
}

type statusReport struct {
	Station      string                 `json:"station"`
	Fixture      string                 `json:"fixture"`
	ShiftLog     string                 `json:"shift_log"`
	Ready        bool                   `json:"ready"`
	NotReady     string                 `json:"not_ready,omitempty"`
	LastCheck    *statusCheck           `json:"last_check"`
	LastType1    *statusStudy           `json:"last_type1"`
	LastGRR      *statusStudy           `json:"last_grr"`
	UPF          float64                `json:"U_pf"`
	USource      string                 `json:"U_source"`
	UComponents  []sequences.UComponent `json:"U_components,omitempty"`
	RatedOps     float64                `json:"rated_operations"`
	WarnFraction float64                `json:"relay_warn_fraction"`
	Relays       []relayWear            `json:"relays"`
}

type statusCheck struct {
	ID        int64     `json:"id"`
	Time      time.Time `json:"time"`
	OK        bool      `json:"ok"`
	RunsSince int64     `json:"runs_since"`
	Faults    []string  `json:"faults"`
}

type statusStudy struct {
	ID      int64     `json:"id"`
	Time    time.Time `json:"time"`
	Summary string    `json:"summary"`
}

func (a *app) stationStatusCmd() *cobra.Command {
	var station string
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "status --station FILE",
		Short: "Last check, last studies, the station's uncertainty U and relay wear",
		Long: `status shows, from the shift log, whether 'padline run' would test production
units now (and why not), the last reference check, the last type-1 and gauge
R&R studies, the station's uncertainty U with its components and where they
came from, and each rung's relay operations against ladder.rated_operations,
with a WARNING from relay_warn_fraction (default 0.8) of rated life.`,
		Example: `  padline station status --station demo-sim --db shift.db
  padline station status --station /etc/padline/station.yaml --json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			dbPath, err := shiftLogPath(cmd, station)
			if err != nil {
				return err
			}
			return a.stationStatus(cmd.Context(), station, dbPath, asJSON)
		},
	}
	f := cmd.Flags()
	f.StringVar(&station, "station", "", "station file: a .yaml file or a built-in name (required)")
	addShiftLogFlag(f)
	f.BoolVar(&asJSON, "json", false, "print the status as one JSON object")
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

func (a *app) stationStatus(ctx context.Context, station, dbPath string, asJSON bool) error {
	st, err := session.LoadStation(station)
	if err != nil {
		return err
	}
	rep := statusReport{Station: st.Name, Fixture: st.Fixture, ShiftLog: dbPath, RatedOps: st.Ladder.RatedOperations, WarnFraction: st.Trust.RelayWarnFraction}
	// A read-only command never creates files: no shift log, no history.
	if _, err := os.Stat(dbPath); errors.Is(err, fs.ErrNotExist) {
		rep.NotReady = fmt.Sprintf("no shift log at %s yet: nothing was checked or tested with it", dbPath)
		rep.UPF, rep.USource = session.StatedUncertainty(st)
		for i := range st.Ladder.RungsPF {
			rep.Relays = append(rep.Relays, relayWear{Rung: i})
		}
		return a.printStatus(rep, st, asJSON)
	}
	db, err := store.Open(dbPath)
	if err != nil {
		return err
	}
	defer db.Close()
	if err := session.Ready(ctx, db, st, time.Now()); err != nil {
		if !errors.Is(err, session.ErrNotReady) {
			return err
		}
		rep.NotReady = err.Error()
	} else {
		rep.Ready = true
	}
	if c, err := db.LastCheck(ctx, st.Name, st.Fixture); err == nil {
		sc := &statusCheck{ID: c.ID, Time: c.Time, OK: c.OK}
		var d session.CheckReport
		if json.Unmarshal(c.Details, &d) == nil {
			sc.Faults = d.Faults
		}
		if sc.RunsSince, err = db.RunsSince(ctx, st.Name, st.Fixture, c.LastRunID); err != nil {
			return err
		}
		rep.LastCheck = sc
	} else if !errors.Is(err, store.ErrNotFound) {
		return err
	}
	for _, kind := range []string{store.StudyType1, store.StudyGRR} {
		s, err := db.LastStudy(ctx, st.Name, st.Fixture, kind)
		if errors.Is(err, store.ErrNotFound) {
			continue
		}
		if err != nil {
			return err
		}
		ss := &statusStudy{ID: s.ID, Time: s.Time}
		var x studyReport
		if json.Unmarshal(s.Results, &x) == nil {
			switch {
			case x.Type1 != nil:
				ss.Summary = fmt.Sprintf("n %d, bias %+.3f pF, sd %.4f pF, Cg %.2f, Cgk %.2f", x.Type1.N, x.Type1.BiasPF, x.Type1.SDPF, x.Type1.Cg, x.Type1.Cgk)
			case x.GRR != nil:
				ss.Summary = fmt.Sprintf("%%GRR %.2f %%, ndc %d, %s", x.GRR.PctGRR, x.GRR.NDC, x.GRR.Verdict)
			}
		}
		if kind == store.StudyType1 {
			rep.LastType1 = ss
		} else {
			rep.LastGRR = ss
		}
	}
	if u, err := db.LastUncertainty(ctx, st.Name, st.Fixture); err == nil {
		rep.UPF, rep.USource = u.UPF, fmt.Sprintf("shift log %s (%s): %s", dbPath, u.Time.Local().Format("2006-01-02 15:04"), u.Source)
		_ = json.Unmarshal(u.Components, &rep.UComponents)
	} else if errors.Is(err, store.ErrNotFound) {
		rep.UPF, rep.USource = session.StatedUncertainty(st)
	} else {
		return err
	}
	ops, err := db.LoadRelayOps(ctx, st.Fixture)
	if err != nil {
		return err
	}
	for i := range st.Ladder.RungsPF {
		w := relayWear{Rung: i}
		if i < len(ops) {
			w.Ops = ops[i]
		}
		w.Fraction = float64(w.Ops) / st.Ladder.RatedOperations
		w.Warn = w.Fraction >= st.Trust.RelayWarnFraction
		rep.Relays = append(rep.Relays, w)
	}
	return a.printStatus(rep, st, asJSON)
}

// printStatus prints the status as JSON or as text.
func (a *app) printStatus(rep statusReport, st *session.Station, asJSON bool) error {
	if asJSON {
		enc := json.NewEncoder(a.stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(rep)
	}
	writeStatus(a.stdout, rep, st)
	return nil
}

func writeStatus(w io.Writer, rep statusReport, st *session.Station) {
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
		s    *statusStudy
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
	p("relays       rated %.3g operations; warning at %.0f %% of rated life", rep.RatedOps, 100*rep.WarnFraction)
	for _, r := range rep.Relays {
		warn := ""
		if r.Warn {
			warn = "   WARNING: replace this rung's relay"
		}
		p("  rung %d  %6.2f pF  %12d ops  %7.3f %%%s", r.Rung, st.Ladder.RungsPF[r.Rung], r.Ops, 100*r.Fraction, warn)
	}
}
