package session

import (
	"sync"
	"time"

	"padline/sequences"
)

// Kind names what an Event reports. The values are stable snake_case words
// (a browser screen switches on them).
type Kind string

// The event kinds, in the order a session usually emits them.
const (
	// KindSessionStarted: Event.Started (variant, station, fixture,
	// limits, simulated or not, operator, lot).
	KindSessionStarted Kind = "session_started"
	// KindStationRefused: Event.Refused — the production gate refused
	// the station (a locked station; not a refused scan).
	KindStationRefused Kind = "station_refused"
	// KindCheckDue: Event.Refused — the session waits for a reference
	// check (Session.RequestCheck) instead of ending.
	KindCheckDue Kind = "check_due"
	// KindCheckProgress: Event.Check — one step of a running check
	// (a reference unit to load, one measured).
	KindCheckProgress Kind = "check_progress"
	// KindCheckResult: Event.Check with Event.Check.Report — the check
	// recorded in the shift log, passed or refused.
	KindCheckResult Kind = "check_result"
	// KindUnitScanned: Event.Scan — a serial accepted for test.
	KindUnitScanned Kind = "unit_scanned"
	// KindBadgeScanned: Event.Badge — a lot or operator badge was
	// scanned; every following run records the new value.
	KindBadgeScanned Kind = "badge_scanned"
	// KindScanRefused: Event.ScanRefused — a scan that was not tested
	// (bad serial, retest limit, lid not closed in time). The unit is at
	// issue, not the station.
	KindScanRefused Kind = "scan_refused"
	// KindLidWait: Event.Scan — the unit waits for the lid to close.
	KindLidWait Kind = "lid_wait"
	// KindStationHalted: Event.Refused — the shift log cannot be written
	// (disk full, locked): the tested unit's run is held, the station
	// waits until the log takes it. Why and Fix are for the operator.
	KindStationHalted Kind = "station_halted"
	// KindStationResumed: Event.Scan — the held run of Serial is saved;
	// its verdict follows.
	KindStationResumed Kind = "station_resumed"
	// KindStepFinished: Event.Step — one plan step of the unit in test.
	KindStepFinished Kind = "step_finished"
	// KindVerdictCommitted: Event.Verdict — the run is in the shift log;
	// only now may a verdict be shown.
	KindVerdictCommitted Kind = "verdict_committed"
	// KindUnitAborted: Event.Scan — a stop request cut the unit in test:
	// no verdict, nothing logged.
	KindUnitAborted Kind = "unit_aborted"
	// KindRelayWear: Event.Wear — a rung passed the station's
	// relay_warn_fraction of its rated life.
	KindRelayWear Kind = "relay_wear_warning"
	// KindDriftAlarm: Event.Drift — a drift rule fired on the passed
	// units' trip points (individuals 3σ + CUSUM, centred on the timing
	// model's Monte Carlo mean and σ).
	KindDriftAlarm Kind = "drift_alarm"
	// KindSessionEnded: Event.Ended — the last event; channels close after.
	KindSessionEnded Kind = "session_ended"
)

// Event is one thing a session reports. Seq numbers every event a session
// emits from 1 without gaps (a consumer that sees a gap knows it dropped
// events); Time is the wall clock. Exactly the payload its Kind names is set.
type Event struct {
	Seq  uint64    `json:"seq"`
	Time time.Time `json:"time"`
	Kind Kind      `json:"kind"`

	Started     *Started     `json:"started,omitempty"`
	Scan        *Scan        `json:"scan,omitempty"`
	Badge       *Badge       `json:"badge,omitempty"`
	ScanRefused *ScanRefusal `json:"scan_refused,omitempty"`
	Step        *StepDone    `json:"step,omitempty"`
	Verdict     *Verdict     `json:"verdict,omitempty"`
	Refused     *Refusal     `json:"refused,omitempty"`
	Check       *CheckInfo   `json:"check,omitempty"`
	Wear        *RelayWear   `json:"wear,omitempty"`
	Drift       *DriftAlarm  `json:"drift,omitempty"`
	Ended       *Ended       `json:"ended,omitempty"`
}

// Started describes the session as it begins.
type Started struct {
	Variant  string `json:"variant"`
	Station  string `json:"station"`
	Fixture  string `json:"fixture"`
	Driver   Driver `json:"driver"`
	ShiftLog string `json:"shift_log"`
	// Simulated is true on the built-in simulated line: its runs are not
	// real units.
	Simulated bool   `json:"simulated"`
	Operator  string `json:"operator"`
	Lot       string `json:"lot"`
	// Limits are the test limits every unit is judged against.
	Limits sequences.Limits `json:"limits"`
	// UncertaintyPF is the guard band; UncertaintyFrom its source.
	UncertaintyPF   float64 `json:"uncertainty_pf"`
	UncertaintyFrom string  `json:"uncertainty_from"`
	// Plant is the plant store committed runs are forwarded to, without
	// its password ("": none).
	Plant string `json:"plant_store,omitempty"`
}

// Scan is a serial accepted for test.
type Scan struct {
	Serial string `json:"serial"`
	// Prompt (KindLidWait only) is what the operator must do, when it is
	// more than closing the lid: the lid must open between two units.
	Prompt string `json:"prompt,omitempty"`
}

// Badge is a lot or operator badge scanned at the station.
type Badge struct {
	Kind  BadgeKind `json:"kind"`
	Value string    `json:"value"`
}

// ScanRefusal is a scan that was not tested. Raw is what was scanned (the
// serial, when it was valid); Reason is one line for the operator.
type ScanRefusal struct {
	Raw    string `json:"raw"`
	Reason string `json:"reason"`
	// Err is the error behind the refusal (errors.Is with ErrBadSerial,
	// sequences.ErrRetestLimit, fixture.ErrLidOpen …); not serialised.
	Err error `json:"-"`
}

// StepDone is one finished plan step of the unit in test.
type StepDone struct {
	Serial       string                  `json:"serial"`
	Step         sequences.StepName      `json:"step"`
	Measurements []sequences.Measurement `json:"measurements"`
	FixtureMS    float64                 `json:"fixture_ms"`
	// Error is the step's error text ("" when the step passed).
	Error string `json:"error,omitempty"`
}

// Verdict is a committed run.
type Verdict struct {
	// Run is the run as committed; ID is its id in the shift log.
	Run sequences.Run `json:"run"`
	ID  int64         `json:"id"`
	// PriorFails is how many fails the serial had before (a pass after
	// fail when > 0 and the verdict is pass).
	PriorFails int `json:"prior_fails"`
	// PriorPasses > 0 marks a repeat of a unit that passed before.
	PriorPasses int `json:"prior_passes"`
	// Action is what a technician does about the fail code ("" on pass).
	Action string `json:"action"`
	// StationError is the station fault behind a station-fault verdict
	// (the pin at fault, the step that timed out); "" otherwise.
	StationError string `json:"station_error,omitempty"`
	// Limits are the test limits the run was judged against.
	Limits sequences.Limits `json:"limits"`
	// Outcome carries the trial's details (phases, search) for consumers
	// in the same process; not serialised.
	Outcome *sequences.Outcome `json:"-"`
}

// Refusal is a refused station: why, and the command that fixes it.
type Refusal struct {
	Why string `json:"why"`
	Fix string `json:"fix"`
	// Err wraps ErrNotReady; not serialised.
	Err error `json:"-"`
}

// CheckInfo is progress or the result of a reference check.
type CheckInfo struct {
	// Message says what happens now ("load reference unit R-1 …").
	Message string `json:"message,omitempty"`
	// Serial is the reference unit concerned, if any.
	Serial string `json:"serial,omitempty"`
	// Report is set on KindCheckResult.
	Report *CheckReport `json:"report,omitempty"`
}

// RelayWear warns that a rung's relay nears the end of its rated life.
type RelayWear struct {
	Rung       int     `json:"rung"`
	Operations uint64  `json:"operations"`
	Rated      float64 `json:"rated"`
	Fraction   float64 `json:"fraction"`
}

// DriftAlarm is a drift rule that fired on the session's trip points.
type DriftAlarm struct {
	Rule    string  `json:"rule"`
	Unit    int     `json:"unit"`
	Serial  string  `json:"serial"`
	ValuePF float64 `json:"value_pf"`
	Message string  `json:"message"`
}

// Ended closes a session: how many units got a verdict and why it ended.
type Ended struct {
	Tested int `json:"tested"`
	// Reason is "input ended", "stopped", "station refused" or the error.
	Reason string `json:"reason"`
}

// hub fans events out to subscribers. Policy: a subscriber's channel has
// the buffer it asked for; when it is full the event is dropped for that
// subscriber and counted (Dropped), so a slow screen never holds up the
// unit loop. Seq lets a subscriber see the gap.
type hub struct {
	mu     sync.Mutex
	seq    uint64
	subs   map[*subscriber]struct{}
	closed bool
	now    func() time.Time
}

type subscriber struct {
	ch      chan Event
	dropped uint64
}

func newHub(now func() time.Time) *hub {
	return &hub{subs: map[*subscriber]struct{}{}, now: now}
}

// subscribe adds a subscriber with the given buffer (at least 1).
func (h *hub) subscribe(buffer int) (<-chan Event, func() uint64) {
	if buffer < 1 {
		buffer = 1
	}
	s := &subscriber{ch: make(chan Event, buffer)}
	h.mu.Lock()
	defer h.mu.Unlock()
	if h.closed {
		close(s.ch)
		return s.ch, func() uint64 { return 0 }
	}
	h.subs[s] = struct{}{}
	var once sync.Once
	return s.ch, func() uint64 {
		h.mu.Lock()
		defer h.mu.Unlock()
		once.Do(func() {
			if _, ok := h.subs[s]; ok {
				delete(h.subs, s)
				close(s.ch)
			}
		})
		return s.dropped
	}
}

// emit numbers e, stamps it and offers it to every subscriber without
// blocking.
func (h *hub) emit(e Event) Event {
	h.mu.Lock()
	defer h.mu.Unlock()
	if h.closed {
		return e
	}
	h.seq++
	e.Seq = h.seq
	e.Time = h.now()
	for s := range h.subs {
		select {
		case s.ch <- e:
		default:
			s.dropped++
		}
	}
	return e
}

// close ends every subscription.
func (h *hub) close() {
	h.mu.Lock()
	defer h.mu.Unlock()
	if h.closed {
		return
	}
	h.closed = true
	for s := range h.subs {
		close(s.ch)
		delete(h.subs, s)
	}
}
