package session

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"padline/sequences"
	"padline/store"
	"padline/store/drift"
)

// Options opens a Session. Variant, Station and ShiftLog are required.
type Options struct {
	// Variant and Station are each a .yaml file or a built-in name.
	Variant, Station string
	// ShiftLog is the SQLite shift log's path.
	ShiftLog string
	// Operator and Lot are recorded with every run.
	Operator, Lot string
	// Strategy overrides the variant's plan.search.strategy ("bracket" or
	// "staircase") when not empty.
	Strategy string
	// Software is the version string every run records.
	Software string
	// GPIO opens the pins of a driver: gpio station (see GPIOOpener).
	GPIO GPIOOpener
	// PanelGPIO opens a panel station's real lines (RunPanel).
	PanelGPIO PanelGPIOOpener
	// LidTimeout gives up on a unit whose lid stays open this long (the
	// scan is refused); 0 waits until the session is stopped.
	LidTimeout time.Duration
	// WaitForCheck: when the production gate refuses the station, Run
	// emits KindCheckDue and waits for RequestCheck (a screen's button)
	// instead of returning the refusal. Without it Run returns an error
	// wrapping ErrNotReady (the terminal's behaviour: exit status 3).
	WaitForCheck bool
	// InputEndIsError makes the end of the scanner's input an error
	// (ErrInputEnded) instead of a normal end: a station run as a service
	// must not stop for good because its console closed or someone typed
	// Ctrl-D; the service manager restarts it on the error.
	InputEndIsError bool
	// Now is the wall clock (default time.Now); tests inject one.
	Now func() time.Time
	// PlantURL is --plant-url: RunPanel forwards every committed run to
	// the plant store PlantURL(PlantURL, station) ("" everywhere: not at
	// all); a single-unit Session forwards through Forward instead.
	PlantURL string
	// Warn receives what RunPanel reports without stopping (a plant store
	// that cannot be opened); nil discards it.
	Warn io.Writer
	// AfterStep, when not nil, runs on the unit's goroutine after each
	// plan step's KindStepFinished, before the next step: the unit waits
	// while it runs. ctx is the unit's (it ends when the session is
	// stopped). A test hook: it holds a unit at a known step so a stop
	// lands inside the unit without racing a timer.
	AfterStep func(ctx context.Context, step *StepDone)
}

// Scanner is where a session's serials come from: a barcode scanner on
// stdin (LineScanner), a browser screen (ChanScanner), one --serial
// (OneSerial). Scan blocks until a serial arrives; ok is false when the
// input has ended. It must return promptly when ctx ends.
type Scanner interface {
	Scan(ctx context.Context) (raw string, ok bool, err error)
}

// ScannerFunc adapts a function to Scanner.
type ScannerFunc func(ctx context.Context) (string, bool, error)

// Scan calls f.
func (f ScannerFunc) Scan(ctx context.Context) (string, bool, error) { return f(ctx) }

// Session tests units one after another on one opened station: the
// production gate before every unit, the plan, the commit, then the verdict.
// Everything it does is announced as an Event to every subscriber. One
// goroutine calls Run; Subscribe, RequestCheck and Dropped may be called from
// any goroutine.
//
// The loop tests one unit per fixture closure today; a panel (several
// sites per closure) will enter through the same loop as a unit with
// several serials, each site its own run and its own KindVerdictCommitted.
type Session struct {
	rig  *Rig
	db   *store.DB
	opts Options
	hub  *hub
	seq  *sequences.Session
	// checkReq is signalled by RequestCheck; the loop runs the check on
	// its own goroutine, so the fixture is never used twice at once.
	checkReq chan struct{}
	// warned marks rungs already warned about this session.
	warned map[int]bool
	// watch is the drift watch over the session's trip points (the
	// default chart set, centred on the timing model's population); nil
	// when the model gives no spread. tripN counts its points.
	watch *drift.Monitor
	tripN int
	// since counts the runs since the last check without a query per unit.
	since sinceCheck
	// needOpen is set when a unit has been tested (or a check run) in the
	// fixture and the lid has not been seen open since.
	needOpen atomic.Bool
	// fwd, when set, forwards to the plant store; every commit wakes it.
	fwd atomic.Pointer[Forwarding]
	// plant is the plant store Forward forwards to, without its password,
	// for session_started ("": none).
	plant string
	// runCtx is Run's context: a held run (holdingRecorder) gives up when
	// it ends.
	runCtx  context.Context
	mu      sync.Mutex
	closed  bool
	hash    string
	dropped uint64
	// limits is the limits version this session's rig judges against
	// (limitsver.go); the gate refuses until it is approved.
	limits store.LimitsVersion
}

// Open loads the variant and station, computes the limits (guard band from
// the shift log's study when there is one), opens the pins and the fixture,
// opens the shift log, stores the variant's configuration and restores the
// fixture's relay counts. Close it on every path.
func Open(ctx context.Context, o Options) (*Session, error) {
	if o.Now == nil {
		o.Now = time.Now
	}
	rig, err := OpenRig(ctx, o.Variant, o.Station, o.ShiftLog, RigOptions{Strategy: o.Strategy, GPIO: o.GPIO})
	if err != nil {
		return nil, err
	}
	return openOn(ctx, rig, o)
}

// OpenOn is Open over a rig the caller built (a demo with its own seed, a
// test with a fault injected). The session takes the rig over: Close halts it.
func OpenOn(ctx context.Context, rig *Rig, o Options) (*Session, error) {
	if o.Now == nil {
		o.Now = time.Now
	}
	return openOn(ctx, rig, o)
}

// LogCheckMaxAge bounds how long a start may trust a pristine log without
// a check of its own: when no check has found the log sound for this long
// (every start stopped before its background check ended), the start
// checks in the foreground again.
const LogCheckMaxAge = 7 * 24 * time.Hour

func openOn(ctx context.Context, rig *Rig, o Options) (*Session, error) {
	// Operator and lot reach the terminal, the history table and CSV:
	// cleaned like serials, refused when they hold control characters.
	var err error
	if o.Operator, err = CleanName("operator", o.Operator); err != nil {
		return nil, errors.Join(err, rig.Halt())
	}
	if o.Lot, err = CleanName("lot", o.Lot); err != nil {
		return nil, errors.Join(err, rig.Halt())
	}
	db, err := store.Open(o.ShiftLog)
	if err != nil {
		return nil, errors.Join(err, rig.Halt())
	}
	// Damaged pages are found before the first unit, not as "malformed"
	// half-way through a shift. A log exactly as the last clean close of
	// a checked log left it is checked in the background instead (a whole
	// read of a large log takes half a minute); damage found then halts
	// the station before its next unit (store.CheckRecordSuffix).
	if ok, sound := db.Pristine(); ok && o.Now().Sub(sound) < LogCheckMaxAge {
		db.CheckInBackground()
	} else if err := db.QuickCheck(context.WithoutCancel(ctx)); err != nil {
		return nil, errors.Join(fmt.Errorf("%w; station not started: restore the shift log from a copy or start a new one with --db", err), db.Close(), rig.Halt())
	}
	s := &Session{rig: rig, db: db, opts: o, hub: newHub(o.Now), checkReq: make(chan struct{}, 1), warned: map[int]bool{}}
	// Setting up is quick and must not be cut half-way by a stop request.
	setup := context.WithoutCancel(ctx)
	if s.hash, err = db.PutVariant(setup, rig.Variant.Name, rig.Variant.Source.Raw); err != nil {
		return nil, errors.Join(err, s.Close())
	}
	if err := LoadRelayWear(setup, db, rig); err != nil {
		return nil, errors.Join(err, s.Close())
	}
	if s.limits, err = SyncLimits(setup, db, rig, o.Now()); err != nil {
		return nil, errors.Join(err, s.Close())
	}
	if err := SeedFromLog(setup, db, rig); err != nil {
		return nil, errors.Join(err, s.Close())
	}
	if t := rig.Limits.Trip; t.MCSD > 0 {
		if s.watch, err = drift.NewMonitor(t.MCMean, t.MCSD, drift.Options{}, drift.DefaultSet); err != nil {
			return nil, errors.Join(err, s.Close())
		}
	}
	v, st := rig.Variant, rig.Station
	s.seq = &sequences.Session{
		Plan: rig.Plan, Station: rig.Fixture, Clock: rig.Clock, Recorder: holdingRecorder{s: s, db: db},
		Template: sequences.Run{
			Variant: v.Name, ConfigHash: s.hash, Station: st.Name, Fixture: st.Fixture,
			Operator: o.Operator, Lot: o.Lot, Software: o.Software, Driver: string(st.Driver),
		},
		CheckSerial: v.CheckSerial,
		WallClock:   o.Now,
		Retest:      &sequences.RetestPolicy{Max: v.Plan.Retest.Max, FlagPassAfterFail: v.Plan.Retest.FlagPassAfterFail},
	}
	return s, nil
}

// LoadRelayWear restores the fixture's relay operation counts from db. A
// fixture the log has never seen starts at zero; a read error is returned,
// never turned into fresh counts.
func LoadRelayWear(ctx context.Context, db *store.DB, r *Rig) error {
	ops, err := db.LoadRelayOps(ctx, r.Station.Fixture)
	if err != nil {
		return fmt.Errorf("relay wear of fixture %s: %w", r.Station.Fixture, err)
	}
	if len(ops) == 0 {
		return nil
	}
	if len(ops) != len(r.Station.Ladder.RungsPF) {
		return fmt.Errorf("relay wear of fixture %s: the shift log counts %d rungs, station file %s has %d: a fixture with another ladder needs its own name",
			r.Station.Fixture, len(ops), r.Station.Source.Name, len(r.Station.Ladder.RungsPF))
	}
	return r.Fixture.SetRelayOps(ops)
}

// SaveRelayWear stores the fixture's relay operation counts in db.
func SaveRelayWear(ctx context.Context, db *store.DB, r *Rig) error {
	if err := db.SaveRelayOps(context.WithoutCancel(ctx), r.Station.Fixture, r.Fixture.RelayOps()); err != nil {
		return fmt.Errorf("relay wear of fixture %s: %w", r.Station.Fixture, err)
	}
	return nil
}

// Rig is the opened station (variant, station, limits, fixture).
func (s *Session) Rig() *Rig { return s.rig }

// DB is the session's shift log.
func (s *Session) DB() *store.DB { return s.db }

// ConfigHash is the sha256 of the variant file every run records.
func (s *Session) ConfigHash() string { return s.hash }

// Subscribe returns a channel of every event emitted from now on, and a
// function that ends the subscription (closing the channel). buffer (at
// least 1) is how many events may wait for the consumer: when it is full,
// further events are dropped for that consumer and counted (Dropped), never
// waited for — a slow consumer cannot hold up the unit loop. A gap in Seq
// shows the drop. The channel closes after KindSessionEnded when the
// session is closed.
func (s *Session) Subscribe(buffer int) (<-chan Event, func()) {
	ch, cancel := s.hub.subscribe(buffer)
	return ch, func() {
		n := cancel()
		s.mu.Lock()
		s.dropped += n
		s.mu.Unlock()
	}
}

// Dropped is how many events were dropped for consumers that have ended
// their subscription, plus those still subscribed.
func (s *Session) Dropped() uint64 {
	s.hub.mu.Lock()
	var n uint64
	for sub := range s.hub.subs {
		n += sub.dropped
	}
	s.hub.mu.Unlock()
	s.mu.Lock()
	defer s.mu.Unlock()
	return n + s.dropped
}

// RequestCheck asks the session to run the station's reference check at
// the next point it may (at once while Run waits for a check). Asking twice
// before it runs asks once.
func (s *Session) RequestCheck() {
	select {
	case s.checkReq <- struct{}{}:
	default:
	}
}

// Close halts the fixture, saves the relay counts, closes the shift log
// and ends every subscription. It returns every error it met.
func (s *Session) Close() error {
	s.mu.Lock()
	if s.closed {
		s.mu.Unlock()
		return nil
	}
	s.closed = true
	s.mu.Unlock()
	herr := s.rig.Halt()
	serr := SaveRelayWear(context.Background(), s.db, s.rig)
	cerr := s.db.Close()
	s.hub.close()
	return errors.Join(herr, serr, cerr)
}

func (s *Session) emit(e Event) {
	s.hub.emit(e)
	if e.Kind == KindVerdictCommitted && e.Verdict != nil {
		s.fwd.Load().Committed(e.Verdict.ID, e.Verdict.Run)
	}
}

// LogCheck waits for the background check of the shift log that a start
// on a pristine log runs (at once when none runs) and returns the damage
// it found, nil when none.
func (s *Session) LogCheck(ctx context.Context) error { return s.db.WaitCheck(ctx) }

// started is the session_started payload.
func (s *Session) started() *Started {
	r := s.rig
	return &Started{
		Variant: r.Variant.Name, Station: r.Station.Name, Fixture: r.Station.Fixture,
		Driver: r.Station.Driver, ShiftLog: s.opts.ShiftLog, Simulated: r.Simulated(),
		Operator: s.opts.Operator, Lot: s.opts.Lot, Limits: r.PlanConfig.Limits,
		UncertaintyPF: r.UncertaintyPF, UncertaintyFrom: r.UncertaintyFrom,
		Plant: s.plant,
	}
}

// Reasons a Run ends, as Ended.Reason says them.
const (
	EndInput   = "input ended"
	EndStopped = "stopped"
	EndRefused = "station refused"
)

// Run tests the serials sc yields until it ends, ctx ends, or the station
// is refused (without WaitForCheck). It emits KindSessionStarted first and
// KindSessionEnded last. A stop request mid-unit discards that unit (no
// verdict, nothing logged) and returns nil. A refused station returns an
// error wrapping ErrNotReady; a run that could not be committed returns an
// error wrapping sequences.ErrNotSaved.
func (s *Session) Run(ctx context.Context, sc Scanner) (err error) {
	s.runCtx = ctx
	s.emit(Event{Kind: KindSessionStarted, Started: s.started()})
	tested := 0
	reason := EndInput
	defer func() {
		switch {
		case errors.Is(err, ErrNotReady):
			reason = EndRefused
		case err != nil:
			reason = err.Error()
		}
		s.emit(Event{Kind: KindSessionEnded, Ended: &Ended{Tested: tested, Reason: reason}})
	}()
	if err := s.gate(ctx); err != nil {
		if ctx.Err() != nil {
			reason = EndStopped
			return nil
		}
		return err
	}
	for {
		if ctx.Err() != nil {
			reason = EndStopped
			return nil
		}
		stopWatch := s.watchLid()
		raw, ok, err := sc.Scan(ctx)
		stopWatch()
		if errors.Is(err, ErrLineTooLong) {
			s.refuseScan(quoteSerial(raw), fmt.Sprintf("%v (unit not tested; scan again)", err), err)
			continue
		}
		if err != nil {
			return fmt.Errorf("read serials: %w", err)
		}
		if !ok {
			if ctx.Err() != nil {
				reason = EndStopped
				return nil
			}
			if s.opts.InputEndIsError {
				return ErrInputEnded
			}
			return nil
		}
		if strings.TrimSpace(raw) == "" {
			continue
		}
		done, err := s.unit(ctx, raw)
		if err != nil {
			return err
		}
		switch done {
		case unitTested:
			tested++
		case unitStopped:
			reason = EndStopped
			return nil
		}
	}
}

type unitResult int

const (
	unitRefused unitResult = iota
	unitTested
	unitStopped
)

// unit takes one scan through gate, lid, test, commit and verdict.
func (s *Session) unit(ctx context.Context, raw string) (unitResult, error) {
	r := s.rig
	if kind, value, ok, err := r.Station.Badges.Badge(raw); ok {
		if err != nil {
			s.refuseScan(raw, err.Error(), err)
		} else {
			s.badge(kind, value)
		}
		return unitRefused, nil
	}
	serial, err := CleanSerial(r.Variant.Serial, raw)
	if err != nil {
		s.refuseScan(raw, fmt.Sprintf("%v (unit not tested; scan again)", err), err)
		return unitRefused, nil
	}
	if err := s.gate(ctx); err != nil {
		if ctx.Err() != nil {
			return unitStopped, nil
		}
		return unitRefused, err
	}
	// The lid must have opened since the last unit's test: a label
	// scanned before the units are swapped would otherwise log the unit
	// still clamped under the new serial.
	if err := s.lidOpened(ctx, serial); err != nil {
		if errors.Is(err, context.Canceled) || ctx.Err() != nil {
			return unitStopped, nil
		}
		s.refuseScan(serial, fmt.Sprintf("not tested: %v", err), err)
		return unitRefused, nil
	}
	if r.Line != nil {
		r.Line.Load(serial)
	}
	unload := func() {
		if r.Line != nil {
			r.Line.Unload()
		}
	}
	s.emit(Event{Kind: KindUnitScanned, Scan: &Scan{Serial: serial}})
	err = waitLid(ctx, r, s.opts.LidTimeout, func(string) {
		s.emit(Event{Kind: KindLidWait, Scan: &Scan{Serial: serial}})
	})
	if err != nil {
		unload()
		if errors.Is(err, context.Canceled) || ctx.Err() != nil {
			return unitStopped, nil
		}
		s.refuseScan(serial, fmt.Sprintf("not tested: %v", err), err)
		return unitRefused, nil
	}
	if perr := s.db.CheckPath(); perr != nil {
		unload()
		return unitRefused, s.moved("", perr)
	}
	if derr := s.db.Damage(); derr != nil {
		unload()
		return unitRefused, fmt.Errorf("%w: the background check of the shift log found damage: %w; restore the shift log from a copy or start the station with a new --db",
			ErrHalted, derr)
	}
	s.seq.OnStep = func(d sequences.StepDone) {
		e := &StepDone{Serial: serial, Step: d.Step, Measurements: d.Measurements, FixtureMS: float64(d.FixtureTime) / float64(time.Millisecond)}
		if d.Err != nil {
			e.Error = d.Err.Error()
		}
		s.emit(Event{Kind: KindStepFinished, Step: e})
		if s.opts.AfterStep != nil {
			s.opts.AfterStep(ctx, e)
		}
	}
	oc, err := s.seq.Test(ctx, serial)
	unload()
	switch {
	case errors.Is(err, sequences.ErrAborted):
		s.emit(Event{Kind: KindUnitAborted, Scan: &Scan{Serial: serial}})
		return unitStopped, nil
	case errors.Is(err, sequences.ErrRetestLimit):
		s.refuseScan(serial, err.Error(), err)
		return unitRefused, nil
	case oc == nil:
		// Not saved: never show a verdict.
		return unitRefused, err
	}
	s.since.add(1)
	s.needOpen.Store(true)
	// The verdict is shown only when the run is in the file the next
	// start will open: a log deleted or renamed under the station would
	// otherwise keep every run where nobody finds it.
	if perr := s.db.CheckPath(); perr != nil {
		return unitRefused, s.moved(serial, perr)
	}
	v := &Verdict{Run: oc.Run, ID: oc.ID, PriorFails: oc.PriorFails, PriorPasses: oc.PriorPasses, Action: sequences.FailAction(oc.Run.FailCode),
		Limits: r.PlanConfig.Limits, Outcome: oc}
	if err != nil {
		v.StationError = err.Error()
	}
	s.emit(Event{Kind: KindVerdictCommitted, Verdict: v})
	if err := SaveRelayWear(ctx, s.db, r); err != nil {
		return unitTested, err
	}
	s.relayWear()
	s.driftWatch(&oc.Run)
	return unitTested, nil
}

// ErrInputEnded: the scanner's input ended in a run that must not end so
// (Options.InputEndIsError).
var ErrInputEnded = errors.New("the scanner input ended (console closed or Ctrl-D): a service station does not stop on that; restarting")

// ErrHalted is wrapped by every error that stops the station because the
// shift log cannot take its runs: moved or deleted, disk full, locked.
var ErrHalted = errors.New("station halted")

// moved is the error that halts the station when its shift log's path no
// longer leads to the open file.
func (s *Session) moved(serial string, err error) error {
	unit := ""
	if serial != "" {
		unit = fmt.Sprintf("; the run of %s went into the old file and its verdict is not shown: test it again", serial)
	}
	return fmt.Errorf("%w: %w%s; put the shift log back at %s or start the station with a new --db",
		ErrHalted, err, unit, s.opts.ShiftLog)
}

// lidPrompt is what the operator is asked when the lid has not opened
// since the last unit.
const lidPrompt = "open the lid, take the tested unit out, load the next one and close the lid"

// ErrLidNotOpened refuses a scan when the lid has not opened since the last
// unit was tested.
var ErrLidNotOpened = errors.New("the lid has not opened since the last unit was tested")

// lidOpened returns at once when the lid has opened since the last test (or
// is open now); else it asks the operator to open it and waits (LidTimeout).
func (s *Session) lidOpened(ctx context.Context, serial string) error {
	if !s.needOpen.Load() {
		return nil
	}
	f := s.rig.Fixture
	closed, err := f.LidClosed()
	if err != nil {
		return err
	}
	if closed {
		s.emit(Event{Kind: KindLidWait, Scan: &Scan{Serial: serial, Prompt: lidPrompt}})
		if err := f.WaitLid(ctx, false, lidPoll, s.opts.LidTimeout); err != nil {
			if ctx.Err() != nil {
				return err
			}
			return fmt.Errorf("%w (%v): %s", ErrLidNotOpened, err, lidPrompt)
		}
	}
	s.needOpen.Store(false)
	return nil
}

// watchLid polls the lid switch while the loop waits for a scan, so a unit
// swapped before its label is scanned is seen; the returned function stops
// the watch. Nothing is polled when the lid need not open.
func (s *Session) watchLid() func() {
	if !s.needOpen.Load() {
		return func() {}
	}
	stop := make(chan struct{})
	done := make(chan struct{})
	go func() {
		defer close(done)
		t := time.NewTicker(lidPoll)
		defer t.Stop()
		for {
			if closed, err := s.rig.Fixture.LidClosed(); err == nil && !closed {
				s.needOpen.Store(false)
				return
			}
			select {
			case <-stop:
				return
			case <-t.C:
			}
		}
	}()
	return func() { close(stop); <-done }
}

func (s *Session) refuseScan(raw, reason string, err error) {
	s.emit(Event{Kind: KindScanRefused, ScanRefused: &ScanRefusal{Raw: raw, Reason: reason, Err: err}})
}

// relayWear warns once per rung per session when a rung passes the
// station's relay_warn_fraction of its rated operations.
func (s *Session) relayWear() {
	st := s.rig.Station
	rated := st.Ladder.RatedOperations
	if rated <= 0 {
		return
	}
	for i, n := range s.rig.Fixture.RelayOps() {
		f := float64(n) / rated
		if f >= st.Trust.RelayWarnFraction && !s.warned[i] {
			s.warned[i] = true
			s.emit(Event{Kind: KindRelayWear, Wear: &RelayWear{Rung: i, Operations: n, Rated: rated, Fraction: f}})
		}
	}
}

// driftWatch feeds a passed unit's trip point to the drift watch and
// emits every alarm it completes. The watch is centred on the timing
// model's Monte Carlo mean and σ: it fires when the line's trip points leave
// the population the design predicts (DEVELOPERS.md "Physics").
func (s *Session) driftWatch(run *sequences.Run) {
	if s.watch == nil || run.Verdict != sequences.Pass {
		return
	}
	for _, m := range run.Measurements {
		if m.Name != sequences.MeasTripPF || math.IsNaN(m.Value) {
			continue
		}
		s.tripN++
		for _, a := range s.watch.Add(m.Value) {
			s.emit(Event{Kind: KindDriftAlarm, Drift: &DriftAlarm{
				Rule: fmt.Sprintf("%s %s", a.Chart, a.Rule), Unit: s.tripN, Serial: run.Serial, ValuePF: m.Value,
				Message: strings.TrimSpace(fmt.Sprintf("%s chart, rule %s, at passed unit %d of this session (%s, trip %.2f pF) %s",
					a.Chart, a.Rule, s.tripN, run.Serial, m.Value, a.Note)),
			}})
		}
	}
}

// gate asks the production gate. Refused: emit KindStationRefused and,
// with WaitForCheck, KindCheckDue, then wait for RequestCheck and run the
// check here, until a check passes or ctx ends; without it return the
// refusal.
func (s *Session) gate(ctx context.Context) error {
	// Damage the background check found halts the station before the
	// gate reads the log (its reads may land on the damaged pages).
	if derr := s.db.Damage(); derr != nil {
		return fmt.Errorf("%w: the background check of the shift log found damage: %w; restore the shift log from a copy or start the station with a new --db",
			ErrHalted, derr)
	}
	for {
		if err := s.limitsGate(ctx); err != nil {
			return err
		}
		err := ready(ctx, s.db, s.rig.Station, s.opts.Now(), s.since.count)
		if err == nil {
			return nil
		}
		if !errors.Is(err, ErrNotReady) {
			return err
		}
		fix := CheckHint(s.rig.Variant.Name, s.rig.Station, s.opts.ShiftLog)
		ref := &Refusal{Why: strings.TrimPrefix(err.Error(), ErrNotReady.Error()+": "), Fix: fix, Err: err}
		s.emit(Event{Kind: KindStationRefused, Refused: ref})
		if !s.opts.WaitForCheck {
			return fmt.Errorf("%w: %s", err, fix)
		}
		s.emit(Event{Kind: KindCheckDue, Refused: ref})
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-s.checkReq:
		}
		if _, err := s.Check(ctx); err != nil {
			return err
		}
	}
}

// Check runs the station's reference check now, on the caller's goroutine
// (call it from the goroutine that runs Run, or when no Run is active):
// KindCheckProgress for each step, KindCheckResult with the recorded
// report. A refused check is a result, not an error.
func (s *Session) Check(ctx context.Context) (CheckReport, error) {
	rep, err := RunCheck(ctx, s.rig, s.db, func(ci CheckInfo) {
		s.emit(Event{Kind: KindCheckProgress, Check: &ci})
	})
	if err != nil {
		return rep, err
	}
	s.needOpen.Store(true)
	s.emit(Event{Kind: KindCheckResult, Check: &CheckInfo{Report: &rep}})
	return rep, nil
}
