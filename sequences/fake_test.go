package sequences_test

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"padline/fixture"
	"padline/sequences"
)

// fakeClock is virtual time: Sleep moves Now on and returns at once.
type fakeClock struct {
	now time.Time
}

var _ sequences.Clock = (*fakeClock)(nil)

// epoch is where every fake clock starts.
var epoch = time.Date(2025, 3, 4, 8, 0, 0, 0, time.UTC)

func newFakeClock() *fakeClock { return &fakeClock{now: epoch} }

func (c *fakeClock) Now() time.Time { return c.now }

func (c *fakeClock) Sleep(d time.Duration) {
	if d > 0 {
		c.now = c.now.Add(d)
	}
}

// The demo station's pin names (testdata/stations/demo-sim.yaml).
const (
	latchPin = "GPIO17"
	clockPin = "GPIO22"
)

// errPinRead is the driver error behind an injected pin failure.
var errPinRead = errors.New("gpio: read failed")

// fakeStation is a station with one unit clamped in it, all state in plain
// fields. The unit's latch reads high with probability Φ((C − TripPF)/SigmaPF)
// at the pad capacitance C of the current ladder pattern (a probit
// transition; SigmaPF 0 makes it a step), unless LatchFunc replaces that
// model. Every operation advances the virtual clock as hardware would:
// Settle when the pattern changes, one Period per latch sample, the gate
// time when measuring the clock.
type fakeStation struct {
	clock  *fakeClock
	rng    *rand.Rand
	ladder []sequences.Level  // the levels, ascending
	levels map[uint16]float64 // pattern → capacitance at the pad, pF

	// The unit.
	TripPF, SigmaPF float64
	ClockHz         float64 // 0: the oscillator is dead
	StuckHigh       bool    // latch high whenever powered
	Sticky          bool    // once high, the latch stays high until power off
	// LatchFunc, when set, gives the probability of a high sample at c pF
	// instead of the probit.
	LatchFunc func(c float64) float64

	// The station.
	LidOpen    bool          // the lid switch reads open
	ClockWired bool          // a clock pin is wired (samples wait for edges)
	Settle     time.Duration // relay operate + bounce
	// OpFunc, when set, runs before every operation except Halt with the
	// operation's 1-based call number and name ("power", "lid",
	// "set_pattern", "sample", "measure_clock"); an error it returns is the
	// operation's result, and the operation then has no effect. Tests inject
	// pin errors, panics, slow hardware and cancellation through it.
	OpFunc func(n int, op string) error

	// State, for the test to inspect.
	Powered bool
	Pattern uint16
	Halted  bool
	latched bool // the sticky latch has been set
	N       int  // operations so far
	Calls   map[string]int
}

var _ sequences.Station = (*fakeStation)(nil)

// newFake returns a station holding a good QM-205 unit: trip 29.7 pF,
// oscillator 465 Hz (testdata/variants/QM-205.yaml by DEVELOPERS.md "Physics"), a
// 10–90 % transition of 0.64 pF (σ = 0.64/2.5631 = 0.25 pF, the realism
// floor's noise of DEVELOPERS.md "Simulator realism floor" on that unit),
// on the levels given.
func newFake(levels []sequences.Level, seed uint64) *fakeStation {
	m := make(map[uint16]float64, len(levels))
	for _, l := range levels {
		m[l.Pattern] = l.PF
	}
	return &fakeStation{
		clock:  newFakeClock(),
		rng:    rand.New(rand.NewPCG(seed, 0x5eed)),
		ladder: levels,
		levels: m,
		TripPF: 29.7, SigmaPF: 0.25, ClockHz: 465,
		ClockWired: true,
		// Reed relays: operate 0.5 ms + bounce 0.5 ms (DEVELOPERS.md "Simulator realism floor").
		Settle: time.Millisecond,
		Calls:  map[string]int{},
	}
}

func (f *fakeStation) op(name string) error {
	f.N++
	f.Calls[name]++
	if f.OpFunc != nil {
		return f.OpFunc(f.N, name)
	}
	return nil
}

func (f *fakeStation) Power(on bool) error {
	if err := f.op("power"); err != nil {
		return err
	}
	if on && f.LidOpen {
		return fixture.ErrLidOpen // as the real fixture refuses power
	}
	f.Powered = on
	if !on {
		f.latched = false
	}
	return nil
}

func (f *fakeStation) LidClosed() (bool, error) {
	if err := f.op("lid"); err != nil {
		return false, err
	}
	return !f.LidOpen, nil
}

func (f *fakeStation) SetPattern(p uint16) error {
	if err := f.op("set_pattern"); err != nil {
		return err
	}
	if _, ok := f.levels[p]; !ok && p != 0 {
		return fmt.Errorf("fake: pattern %#x not on the ladder", p)
	}
	if p != f.Pattern {
		f.Pattern = p
		f.clock.Sleep(f.Settle)
	}
	return nil
}

func (f *fakeStation) Sample(k int, period time.Duration) (int, error) {
	if err := f.op("sample"); err != nil {
		return 0, err
	}
	if k < 0 || period <= 0 {
		return 0, fmt.Errorf("fake: sample %d at %v", k, period)
	}
	highs := 0
	for range k {
		if f.ClockWired && (f.ClockHz == 0 || !f.Powered) {
			// The real fixture gives up after four periods without an edge.
			f.clock.Sleep(4 * period)
			return highs, &fixture.PinError{Role: "clock", Pin: clockPin, Err: fixture.ErrNoClockEdges}
		}
		f.clock.Sleep(period)
		if f.latch() {
			highs++
		}
	}
	return highs, nil
}

var _ sequences.EdgeSampler = (*fakeStation)(nil)

// SampleEdges is Sample with the span of the edges sampled on: k−1 periods
// of the unit's clock (0 without a clock pin).
func (f *fakeStation) SampleEdges(k int, period time.Duration) (int, time.Duration, error) {
	highs, err := f.Sample(k, period)
	if err != nil || !f.ClockWired || k < 2 {
		return highs, 0, err
	}
	return highs, time.Duration(float64(k-1) / f.ClockHz * float64(time.Second)), nil
}

// latch is one clocked read of the unit's latch.
func (f *fakeStation) latch() bool {
	switch {
	case !f.Powered:
		return false
	case f.StuckHigh, f.latched:
		return true
	case f.ClockHz == 0:
		return false // nothing clocks the flip-flop
	}
	c := f.levels[f.Pattern]
	var p float64
	switch {
	case f.LatchFunc != nil:
		p = f.LatchFunc(c)
	case f.SigmaPF == 0:
		if c >= f.TripPF {
			p = 1
		}
	default:
		p = 0.5 * math.Erfc(-(c-f.TripPF)/(f.SigmaPF*math.Sqrt2))
	}
	high := f.rng.Float64() < p
	if high && f.Sticky {
		f.latched = true
	}
	return high
}

func (f *fakeStation) MeasureClock(periods int, timeout time.Duration) (float64, error) {
	if err := f.op("measure_clock"); err != nil {
		return 0, err
	}
	if periods < 1 || timeout <= 0 {
		return 0, fmt.Errorf("fake: measure clock over %d periods, timeout %v", periods, timeout)
	}
	if !f.ClockWired {
		return 0, fixture.ErrNoClockPin
	}
	if f.ClockHz == 0 || !f.Powered {
		f.clock.Sleep(timeout)
		return 0, &fixture.PinError{Role: "clock", Pin: clockPin, Err: fixture.ErrNoClockEdges}
	}
	// One period to the first edge, then the gate.
	f.clock.Sleep(time.Duration(float64(periods+1) / f.ClockHz * float64(time.Second)))
	return f.ClockHz, nil
}

func (f *fakeStation) Halt() error {
	f.Halted = true
	f.Powered = false
	f.Pattern = 0
	f.latched = false
	return nil
}

// checkSafe fails t unless the station ended with power off and every rung
// open.
func (f *fakeStation) checkSafe(t *testing.T) {
	t.Helper()
	if f.Powered || f.Pattern != 0 {
		t.Errorf("station left powered=%v pattern=%#x, want off and 0", f.Powered, f.Pattern)
	}
}

// pinErrorOn makes call n fail with a latch pin error.
func pinErrorOn(n int) func(int, string) error {
	return func(call int, _ string) error {
		if call == n {
			return &fixture.PinError{Role: "latch", Pin: latchPin, Err: errPinRead}
		}
		return nil
	}
}

// panicValue is what panicOn panics with.
const panicValue = "fake: driver panic"

// panicOn makes call n panic.
func panicOn(n int) func(int, string) error {
	return func(call int, _ string) error {
		if call == n {
			panic(panicValue)
		}
		return nil
	}
}

// slowOn makes call n take d longer, as a hung bus would.
func (f *fakeStation) slowOn(n int, d time.Duration) func(int, string) error {
	return func(call int, _ string) error {
		if call == n {
			f.clock.Sleep(d)
		}
		return nil
	}
}

// demoLevels is the demo station's ladder (testdata/stations/demo-sim.yaml):
// eight rungs 0.51 … 64.2 pF on a 4.6 pF stray, every subset sum.
func demoLevels(t testing.TB) []sequences.Level {
	t.Helper()
	l, err := fixture.NewLadder([]float64{0.51, 1.02, 1.98, 4.03, 7.96, 16.05, 31.9, 64.2}, 4.6)
	if err != nil {
		t.Fatalf("NewLadder: %v", err)
	}
	return l.Levels()
}
