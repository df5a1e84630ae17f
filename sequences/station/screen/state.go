package screen

import (
	"fmt"
	"math"
	"time"

	"padline/sequences"
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
	RunID    int64             `json:"run_id"`
	Serial   string            `json:"serial"`
	Verdict  sequences.Verdict `json:"verdict"`
	FailCode string            `json:"fail_code,omitempty"`
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
	// units tested of all).
	Done  int    `json:"done"`
	Total int    `json:"total"`
	Step  string `json:"step,omitempty"`
	// Result is the last check's outcome in words; empty before one.
	Result string `json:"result,omitempty"`
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
	// chart rule).
	Key  string `json:"key"`
	Text string `json:"text"`
}

// Event is one thing that happened at the station that the screen shows.
// The concrete types are below; Reduce ignores any other.
type Event interface{}

// Started opens the session: station, variant, limits, lot and operator.
type Started struct {
	Station, Fixture, Variant string
	Simulated                 bool
	Lot, Operator             string
	TripLowPF, TripHighPF     float64
}

// Scanned is a serial accepted for test: the unit is in the fixture.
type Scanned struct{ Serial string }

// ScanRejected is a scan that was not tested (a bad serial, a retest limit,
// the lid never closed).
type ScanRejected struct{ Scan, Reason string }

// RepeatScanned is a serial that already has a verdict, scanned again; it
// is tested only after the technician acknowledges it.
type RepeatScanned struct {
	Serial         string
	Tested, Failed int
}

// Committed is a unit's run, committed to the shift log.
type Committed struct {
	RunID      int64
	Run        sequences.Run
	PriorFails int
	// FirstTest is true when this is the serial's first unit verdict.
	FirstTest bool
	// Message is the station's error for a station fault.
	Message string
	// At is when the commit returned.
	At time.Time
}

// BadgeScanned is a lot or operator badge scanned at the station.
type BadgeScanned struct {
	Kind  string // "lot" or "operator"
	Value string
}

// StationRefused is the production gate saying no.
type StationRefused struct {
	Why, Fix string
	CanCheck bool
}

// CheckSchedule is when the next shift-start check falls due.
type CheckSchedule struct {
	// UnitsLeft < 0: no unit limit. Due zero: no time limit.
	UnitsLeft int
	Due       time.Time
}

// CheckProgress is a running shift-start check.
type CheckProgress struct {
	Done, Total int
	Step        string
}

// CheckFinished is the end of a shift-start check.
type CheckFinished struct {
	OK     bool
	Detail string
}

// RelayWear is a relay near or past its rated life.
type RelayWear struct {
	Rung         int
	Ops, RatedOp float64
}

// DriftAlarm is a control-chart alarm on the trip points.
type DriftAlarm struct{ Rule, Text string }

// Reduce returns the state after e. It does not change s (the slices of the
// result are new whenever they change).
func Reduce(s State, e Event) State {
	s.Seq++
	switch e := e.(type) {
	case Started:
		s.Station, s.Fixture, s.Variant = e.Station, e.Fixture, e.Variant
		s.Simulated, s.Lot, s.Operator = e.Simulated, e.Lot, e.Operator
		s.TripLowPF, s.TripHighPF = e.TripLowPF, e.TripHighPF
		if s.Phase == "" {
			s.Phase = PhaseReady
		}
	case Scanned:
		s.Phase, s.Testing = PhaseTesting, e.Serial
		s.ScanRefused, s.Repeat, s.Notice = nil, nil, ""
	case ScanRejected:
		s.ScanRefused = &ScanRefused{Scan: e.Scan, Reason: e.Reason}
		if s.Phase == PhaseTesting {
			s.Phase, s.Testing = PhaseReady, ""
		}
		s.Notice = ""
	case RepeatScanned:
		s.Repeat = &Repeat{Serial: e.Serial, Tested: e.Tested, Failed: e.Failed}
		s.ScanRefused, s.Notice = nil, ""
	case Committed:
		u := unitOf(e)
		s.Last = &u
		s.Units = append([]Unit{u}, s.Units...)
		if len(s.Units) > RecentUnits {
			s.Units = s.Units[:RecentUnits]
		}
		s.Counts = count(s.Counts, e)
		if s.Check.UnitsLeft != nil && e.Run.Verdict != sequences.StationFault {
			n := *s.Check.UnitsLeft - 1
			s.Check.UnitsLeft = &n
		}
		s.Phase, s.Testing, s.Notice = PhaseReady, "", ""
	case BadgeScanned:
		switch e.Kind {
		case "lot":
			s.Lot = e.Value
		case "operator":
			s.Operator = e.Value
		}
		s.Notice = fmt.Sprintf("%s set to %s", e.Kind, e.Value)
		s.ScanRefused = nil
	case StationRefused:
		s.Phase, s.Testing = PhaseRefused, ""
		s.Refusal = &Refusal{Why: e.Why, Fix: e.Fix, CanCheck: e.CanCheck}
		s.Check.Due = e.CanCheck
	case CheckSchedule:
		s.Check.UnitsLeft = nil
		if e.UnitsLeft >= 0 {
			n := e.UnitsLeft
			s.Check.UnitsLeft = &n
		}
		s.Check.DueMs = 0
		if !e.Due.IsZero() {
			s.Check.DueMs = e.Due.UnixMilli()
		}
	case CheckProgress:
		s.Phase = PhaseChecking
		s.Check.Done, s.Check.Total, s.Check.Step = e.Done, e.Total, e.Step
		s.Check.Result = ""
	case CheckFinished:
		s.Check.Step = ""
		if e.OK {
			s.Phase, s.Refusal, s.Check.Due = PhaseReady, nil, false
			s.Check.Result = "passed"
			s.Notice = "shift-start check passed: scan the next unit"
		} else {
			s.Phase = PhaseRefused
			s.Check.Result = "refused the station"
			s.Refusal = &Refusal{Why: "the shift-start check refused the station: " + e.Detail,
				Fix: "see to the fixture as the check says, then run the check again", CanCheck: true}
			s.Check.Due = true
		}
		if e.Detail != "" {
			s.Check.Result += ": " + e.Detail
		}
	case RelayWear:
		s.Warnings = warn(s.Warnings, Warning{Kind: "relay", Key: fmt.Sprintf("rung %d", e.Rung),
			Text: fmt.Sprintf("relay of rung %d at %.0f %% of its rated life (%.3g operations): plan its replacement",
				e.Rung, 100*e.Ops/e.RatedOp, e.Ops)})
	case DriftAlarm:
		s.Warnings = warn(s.Warnings, Warning{Kind: "drift", Key: e.Rule, Text: e.Text})
	default:
		s.Seq-- // nothing changed
	}
	return s
}

// unitOf is a committed run as the screen lists it.
func unitOf(e Committed) Unit {
	r := e.Run
	u := Unit{RunID: e.RunID, Serial: r.Serial, Verdict: r.Verdict, FailCode: r.FailCode,
		PriorFails: e.PriorFails, Message: e.Message, CommittedMs: e.At.UnixMilli()}
	if a, ok := sequences.Advice(r.FailCode); ok && r.Verdict != sequences.Pass {
		u.Means, u.Do = a.Means, a.Do
	}
	for _, m := range r.Measurements {
		if m.Name == "trip_pf" && !math.IsNaN(m.Value) && !math.IsInf(m.Value, 0) {
			v := m.Value
			u.TripPF = &v
		}
	}
	return u
}

// count adds a committed run to the shift's counters. A station fault
// judges no unit, so it never enters the first-pass yield.
func count(c Counts, e Committed) Counts {
	switch e.Run.Verdict {
	case sequences.Pass:
		c.Pass++
	case sequences.Fail:
		c.Fail++
	default:
		c.StationFault++
		return c
	}
	if e.FirstTest {
		c.FirstTests++
		if e.Run.Verdict == sequences.Pass {
			c.FirstPasses++
		}
		y := 100 * float64(c.FirstPasses) / float64(c.FirstTests)
		c.FirstPassYield = &y
	}
	return c
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
