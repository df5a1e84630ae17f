package screen

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"padline/sequences"
	"padline/sequences/session"
)

// RecentUnits is how many units the screen lists.
const RecentUnits = 20

// Phase is what the station is doing, as the screen tells it.
type Phase string

// The phases of the screen.
const (
	PhaseReady    Phase = "ready"    // waiting for a scan
	PhaseTesting  Phase = "testing"  // a unit is in the fixture
	PhaseRefused  Phase = "refused"  // the station may not test production units
	PhaseChecking Phase = "checking" // the shift-start check is running
	PhaseEnded    Phase = "ended"    // the session has ended
)

// State is everything the page shows. It is sent to the page as JSON, whole,
// on every change.
type State struct {
	// Seq counts the changes; the page ignores an older state.
	Seq int64 `json:"seq"`

	Station   string `json:"station"`
	Fixture   string `json:"fixture"`
	Variant   string `json:"variant"`
	Simulated bool   `json:"simulated"`
	Lot       string `json:"lot"`
	Operator  string `json:"operator"`
	// TripLowPF and TripHighPF are the test limits of the trip point.
	TripLowPF  float64 `json:"trip_low_pf"`
	TripHighPF float64 `json:"trip_high_pf"`

	Phase Phase `json:"phase"`
	// Testing is the serial in the fixture while Phase is PhaseTesting.
	Testing string `json:"testing,omitempty"`
	// Last is the last committed unit; nil before the first.
	Last *Unit `json:"last"`
	// Units are the last RecentUnits committed units, newest first.
	Units  []Unit `json:"units"`
	Counts Counts `json:"counts"`
	Check  Check  `json:"check"`
	// Refusal says why the station is refused and what fixes it; nil when
	// it is not.
	Refusal *Refusal `json:"refusal"`
	// ScanRefused is the last scan that was not tested, until the next
	// accepted scan.
	ScanRefused *ScanRefused `json:"scan_refused"`
	// Repeat is a serial scanned again that waits for the technician's
	// acknowledgement; nil when none does.
	Repeat *Repeat `json:"repeat"`
	// Warnings are the relay-wear and drift warnings in force.
	Warnings []Warning `json:"warnings"`
	// Notice is a one-line message for the technician (a badge scanned, a
	// check passed); empty when there is none.
	Notice string `json:"notice"`
}

// Unit is one committed unit as the screen shows it.
type Unit struct {
	RunID    int64              `json:"run_id"`
	Serial   string             `json:"serial"`
	Verdict  sequences.Verdict  `json:"verdict"`
	FailCode sequences.FailCode `json:"fail_code,omitempty"`
	// Means and Do are the fail code's advice (sequences.Advice).
	Means string `json:"means,omitempty"`
	Do    string `json:"do,omitempty"`
	// TripPF is the trip point; nil when the unit has none.
	TripPF *float64 `json:"trip_pf"`
	// Message is the station's own words for a station fault.
	Message string `json:"message,omitempty"`
	// PriorFails is how many fails the serial had before this run.
	PriorFails int `json:"prior_fails"`
	// CommittedMs is when the run was committed to the shift log, in Unix
	// milliseconds (the browser test measures the screen's delay from it).
	CommittedMs int64 `json:"committed_ms"`
}

// Counts are the shift's counters.
type Counts struct {
	Pass         int `json:"pass"`
	Fail         int `json:"fail"`
	StationFault int `json:"station_fault"`
	// FirstTests is how many units got their first unit verdict (pass or
	// fail), FirstPasses how many of those passed.
	FirstTests  int `json:"first_tests"`
	FirstPasses int `json:"first_passes"`
	// FirstPassYield is FirstPasses/FirstTests in percent; nil before the
	// first unit verdict.
	FirstPassYield *float64 `json:"first_pass_yield"`
}

// Check is the shift-start check's schedule and progress.
type Check struct {
	// UnitsLeft is how many units may be tested before the next check;
	// nil when the station has no unit limit.
	UnitsLeft *int `json:"units_left"`
	// DueMs is when the check is due, Unix milliseconds; 0 when the
	// station has no time limit.
	DueMs int64 `json:"due_ms"`
	// Due is true when the check must run before the next unit.
	Due bool `json:"due"`
	// Done and Total are the progress of a running check (reference
	// units measured of all); Step says what happens now.
	Done  int    `json:"done"`
	Total int    `json:"total"`
	Step  string `json:"step,omitempty"`
	// Result is the last check's outcome in words; empty before one.
	Result string `json:"result,omitempty"`
	// Faults are what the last check found wrong with the station (empty
	// when it passed).
	Faults []string `json:"faults,omitempty"`
}

// Refusal is why the station may not test production units, and the fix.
type Refusal struct {
	Why string `json:"why"`
	Fix string `json:"fix"`
	// CanCheck is true when running the shift-start check from the screen
	// is the fix.
	CanCheck bool `json:"can_check"`
}

// ScanRefused is a scan that was not tested, and why.
type ScanRefused struct {
	Scan   string `json:"scan"`
	Reason string `json:"reason"`
}

// Repeat is a serial scanned again after it already has a verdict.
type Repeat struct {
	Serial string `json:"serial"`
	// Tested and Failed are the serial's earlier unit verdicts.
	Tested int `json:"tested"`
	Failed int `json:"failed"`
}

// Warning is a relay-wear or drift warning.
type Warning struct {
	Kind string `json:"kind"` // "relay" or "drift"
	// Key identifies the warning so a newer one replaces it (the rung, the
	// drift rule).
	Key  string `json:"key"`
	Text string `json:"text"`
}

// Event is what Reduce takes: a session.Event, or one of the screen's own
// events below (what the screen learns beside the session's stream).
// Reduce ignores any other value.
type Event any

// StationInfo is what the screen knows of the station beyond the session's
// start: how many reference units a shift-start check measures.
type StationInfo struct{ References int }

// RepeatScanned is a serial that already has a verdict, scanned again; it
// is tested only after the technician acknowledges it.
type RepeatScanned struct {
	Serial         string
	Tested, Failed int
}

// RepeatCleared ends a repeat question: the serial went to test, or
// another scan replaced it.
type RepeatCleared struct{}

// Schedule is the next shift-start check (session.NextCheck).
type Schedule session.CheckSchedule

// Reduce returns the state after e. It does not change s (the slices of the
// result are new whenever they change).
func Reduce(s State, e Event) State {
	s.Seq++
	switch e := e.(type) {
	case session.Event:
		if e.Kind == session.KindVerdictCommitted && e.Verdict != nil {
			return committed(s, e)
		}
		if next, ok := reduceSession(s, e); ok {
			return next
		}
	case StationInfo:
		s.Check.Total = e.References
		return s
	case RepeatScanned:
		s.Repeat = &Repeat{Serial: e.Serial, Tested: e.Tested, Failed: e.Failed}
		s.ScanRefused, s.Notice = nil, ""
		return s
	case RepeatCleared:
		if s.Repeat != nil {
			s.Repeat = nil
			return s
		}
	case Schedule:
		s.Check.UnitsLeft = nil
		if e.UnitsLeft >= 0 {
			n := int(e.UnitsLeft)
			s.Check.UnitsLeft = &n
		}
		s.Check.DueMs = 0
		if !e.Due.IsZero() {
			s.Check.DueMs = e.Due.UnixMilli()
		}
		return s
	}
	s.Seq-- // nothing changed
	return s
}

// reduceSession applies a session event other than a verdict; ok is false
// for an event the screen does not show.
func reduceSession(s State, e session.Event) (State, bool) {
	switch {
	case e.Kind == session.KindSessionStarted && e.Started != nil:
		st := e.Started
		s.Station, s.Fixture, s.Variant = st.Station, st.Fixture, st.Variant
		s.Simulated, s.Lot, s.Operator = st.Simulated, st.Lot, st.Operator
		s.TripLowPF, s.TripHighPF = st.Limits.TripLowPF, st.Limits.TripHighPF
		s.Phase = PhaseReady
	case e.Kind == session.KindStationResumed && e.Scan != nil:
		s.Phase, s.Testing, s.Refusal = PhaseTesting, e.Scan.Serial, nil
	case (e.Kind == session.KindStationRefused || e.Kind == session.KindCheckDue || e.Kind == session.KindStationHalted) && e.Refused != nil:
		s.Phase, s.Testing = PhaseRefused, ""
		r := &Refusal{Why: e.Refused.Why, Fix: e.Refused.Fix}
		if e.Kind == session.KindCheckDue {
			// The session waits for the check: the screen's button runs it.
			r.CanCheck = true
			r.Fix = "run the shift-start check: press the button below and load each reference unit when asked"
			s.Check.Due = true
		}
		s.Refusal = r
	case e.Kind == session.KindCheckProgress && e.Check != nil:
		if s.Phase != PhaseChecking {
			s.Check.Done = 0
		}
		s.Phase = PhaseChecking
		s.Check.Step, s.Check.Result = e.Check.Message, ""
		if e.Check.Serial != "" {
			s.Check.Done++
		}
	case e.Kind == session.KindCheckResult && e.Check != nil && e.Check.Report != nil:
		rep := e.Check.Report
		s.Check.Step, s.Check.Faults = "", rep.Faults
		if rep.OK {
			s.Phase, s.Refusal, s.Check.Due = PhaseReady, nil, false
			s.Check.Result = "passed at " + rep.Time.Local().Format("15:04")
			s.Notice = "shift-start check passed: scan the next unit"
		} else {
			s.Phase = PhaseRefused
			s.Check.Result = "refused the station at " + rep.Time.Local().Format("15:04")
			s.Refusal = &Refusal{Why: "the shift-start check refused the station: " + strings.Join(rep.Faults, "; "),
				Fix: "see to the fixture as the check says, then run the check again"}
		}
	case e.Kind == session.KindUnitScanned && e.Scan != nil:
		s.Phase, s.Testing = PhaseTesting, e.Scan.Serial
		s.ScanRefused, s.Repeat, s.Notice = nil, nil, ""
	case e.Kind == session.KindLidWait && e.Scan != nil:
		s.Notice = "close the lid to start the test of " + e.Scan.Serial
		if e.Scan.Prompt != "" {
			s.Notice = e.Scan.Prompt + " (" + e.Scan.Serial + ")"
		}
	case e.Kind == session.KindScanRefused && e.ScanRefused != nil:
		s.ScanRefused = &ScanRefused{Scan: e.ScanRefused.Raw, Reason: e.ScanRefused.Reason}
		if s.Phase == PhaseTesting {
			s.Phase, s.Testing = PhaseReady, ""
		}
		s.Notice = ""
	case e.Kind == session.KindBadgeScanned && e.Badge != nil:
		switch e.Badge.Kind {
		case session.BadgeLot:
			s.Lot = e.Badge.Value
		case session.BadgeOperator:
			s.Operator = e.Badge.Value
		}
		s.Notice = fmt.Sprintf("%s set to %s", e.Badge.Kind, e.Badge.Value)
		s.ScanRefused = nil
	case e.Kind == session.KindUnitAborted && e.Scan != nil:
		s.Phase, s.Testing = PhaseReady, ""
		s.Notice = e.Scan.Serial + " was stopped mid-test: no verdict, nothing logged"
	case e.Kind == session.KindRelayWear && e.Wear != nil:
		w := e.Wear
		s.Warnings = warn(s.Warnings, Warning{Kind: "relay", Key: fmt.Sprintf("rung %d", w.Rung),
			Text: fmt.Sprintf("relay of rung %d at %.0f %% of its rated life (%s operations): plan its replacement",
				w.Rung, 100*w.Fraction, grouped(w.Operations))})
	case e.Kind == session.KindDriftAlarm && e.Drift != nil:
		s.Warnings = warn(s.Warnings, Warning{Kind: "drift", Key: e.Drift.Rule, Text: e.Drift.Message})
	case e.Kind == session.KindSessionEnded && e.Ended != nil:
		s.Phase, s.Testing = PhaseEnded, ""
		s.Notice = fmt.Sprintf("the station stopped (%s) after %d unit(s)", e.Ended.Reason, e.Ended.Tested)
	default:
		return s, false
	}
	return s, true
}

// committed shows a committed run: the last verdict, the list, the counts.
// A serial with no unit verdict before this one is a first test.
func committed(s State, e session.Event) State {
	first := e.Verdict.PriorFails == 0 && e.Verdict.PriorPasses == 0
	u := unitOf(e)
	s.Last = &u
	s.Units = append([]Unit{u}, s.Units...)
	if len(s.Units) > RecentUnits {
		s.Units = s.Units[:RecentUnits]
	}
	s.Counts = count(s.Counts, e.Verdict.Run.Verdict, first)
	s.Phase, s.Testing, s.Notice = PhaseReady, "", ""
	return s
}

// unitOf is a committed run as the screen lists it.
func unitOf(e session.Event) Unit {
	v := e.Verdict
	r := v.Run
	u := Unit{RunID: v.ID, Serial: r.Serial, Verdict: r.Verdict, FailCode: r.FailCode,
		PriorFails: v.PriorFails, Message: v.StationError, CommittedMs: e.Time.UnixMilli()}
	if a, ok := sequences.Advice(r.FailCode); ok && r.Verdict != sequences.Pass {
		u.Means, u.Do = a.Means, a.Do
	}
	for _, m := range r.Measurements {
		if m.Name == sequences.MeasTripPF && !math.IsNaN(m.Value) && !math.IsInf(m.Value, 0) {
			x := m.Value
			u.TripPF = &x
		}
	}
	return u
}

// count adds a committed verdict to the shift's counters. A station fault
// judges no unit, so it never enters the first-pass yield.
func count(c Counts, v sequences.Verdict, first bool) Counts {
	switch v {
	case sequences.Pass:
		c.Pass++
	case sequences.Fail:
		c.Fail++
	default:
		c.StationFault++
		return c
	}
	if first {
		c.FirstTests++
		if v == sequences.Pass {
			c.FirstPasses++
		}
		y := 100 * float64(c.FirstPasses) / float64(c.FirstTests)
		c.FirstPassYield = &y
	}
	return c
}

// grouped writes n with a comma between groups of three digits.
func grouped(n uint64) string {
	s := strconv.FormatUint(n, 10)
	for i := len(s) - 3; i > 0; i -= 3 {
		s = s[:i] + "," + s[i:]
	}
	return s
}

// warn puts w in ws, replacing a warning of the same kind and key.
func warn(ws []Warning, w Warning) []Warning {
	out := make([]Warning, 0, len(ws)+1)
	for _, x := range ws {
		if x.Kind != w.Kind || x.Key != w.Key {
			out = append(out, x)
		}
	}
	return append(out, w)
}
