package sequences_test

import (
	"context"
	"math"
	"strings"
	"testing"
	"time"

	"padline/fixture"
	"padline/fixture/sim"
	"padline/sequences"
)

// refSerial is the demo reference unit (a QM-205 kept at the station).
const refSerial = "QM205-REF-01"

// simStation is a simulated demo station FX-07 with its reference unit in the
// fixture.
type simStation struct {
	line *sim.Line
	fx   *fixture.Fixture
	cfg  sequences.CheckConfig
}

func newSimStation(t testing.TB, fm sim.FixtureModel, seed uint64) *simStation {
	t.Helper()
	line, err := sim.NewLine(fm, sim.DefaultUnitModel(), seed)
	if err != nil {
		t.Fatal(err)
	}
	lad, err := fixture.NewLadder(fm.RungsPF, fm.StrayPF)
	if err != nil {
		t.Fatal(err)
	}
	fx, err := fixture.New(line.Pins(), lad, fixture.Config{Operate: fm.Operate, Bounce: fm.Bounce, LatchDelay: 20 * time.Microsecond}, line.Clock())
	if err != nil {
		t.Fatal(err)
	}
	line.Load(refSerial)
	return &simStation{line: line, fx: fx, cfg: sequences.CheckConfig{
		RungsPF: fm.RungsPF, StrayPF: fm.StrayPF, PowerSettle: 50 * time.Millisecond, Period: 3 * time.Millisecond,
	}}
}

func (s *simStation) check(t testing.TB, ref sequences.Reference) sequences.RefCheck {
	t.Helper()
	res, err := sequences.CheckReference(context.Background(), s.fx, s.line.Clock(), ref, s.cfg)
	if err != nil {
		t.Fatal(err)
	}
	return res
}

// register measures the reference unit five times and returns the mean: the
// trip_pf a station file registers for it.
func register(t testing.TB, s *simStation) sequences.Reference {
	t.Helper()
	var sum float64
	for range 5 {
		res := s.check(t, sequences.Reference{Serial: refSerial, TripPF: s.line.Unit().Truth().TripPF, AllowedDevPF: 9})
		if res.MeasuredPF == nil {
			t.Fatalf("registration: no trip: %q", res.Faults)
		}
		sum += *res.MeasuredPF
	}
	return sequences.Reference{Serial: refSerial, TripPF: sum / 5, AllowedDevPF: 0.3}
}

func TestCheckHealthy(t *testing.T) {
	s := newSimStation(t, sim.DefaultFixtureModel(), 1)
	ref := register(t, s)
	var worst time.Duration
	for i := range 1000 {
		res := s.check(t, ref)
		if !res.OK {
			t.Fatalf("shift %d: healthy fixture refused: %q", i, res.Faults)
		}
		worst = max(worst, res.FixtureTime)
	}
	t.Logf("registered %.3f pF; slowest check %v of fixture time", ref.TripPF, worst)
	if worst > 30*time.Second {
		t.Errorf("check takes %v of fixture time, target < 30 s", worst)
	}
}

// TestCheckFaults injects each fixture fault into the simulated FX-07 and
// wants it caught (the check refuses) and named. Reference unit trip ≈ 18.3 pF.
func TestCheckFaults(t *testing.T) {
	base := newSimStation(t, sim.DefaultFixtureModel(), 1)
	ref := register(t, base)
	type tc struct {
		name string
		mod  func(*sim.FixtureModel)
		// want is a fragment every fault list must contain.
		want string
		// entered: the change is to the station file's rung value only
		// (drift: the sim keeps its truth).
		entered bool
	}
	cases := []tc{
		{"pad pin", func(m *sim.FixtureModel) { m.Faults.PadPinOpen = true }, "pad or latch pogo pin open", false},
		{"latch pin", func(m *sim.FixtureModel) { m.Faults.LatchPinOpen = true }, "pad or latch pogo pin open", false},
		// Rungs 0 and 1: stuck open and stuck closed both make the pair read
		// alike on either side, and which side is the trip moved by the
		// fault itself: named together (either is a refusal).
		{"open 0", func(m *sim.FixtureModel) { m.Faults.RungStuckOpen = []int{0} }, "rung 0 (0.51 pF) stuck", false},
		{"closed 0", func(m *sim.FixtureModel) { m.Faults.RungStuckClosed = []int{0} }, "rung 0 (0.51 pF) stuck", false},
		{"open 1", func(m *sim.FixtureModel) { m.Faults.RungStuckOpen = []int{1} }, "rung 1 (1.02 pF) stuck", false},
		{"closed 1", func(m *sim.FixtureModel) { m.Faults.RungStuckClosed = []int{1} }, "rung 1 (1.02 pF) stuck closed", false},
		{"closed 2", func(m *sim.FixtureModel) { m.Faults.RungStuckClosed = []int{2} }, "rung 2 (1.98 pF) stuck closed", false},
		{"closed 3", func(m *sim.FixtureModel) { m.Faults.RungStuckClosed = []int{3} }, "rung 3 (4.03 pF) stuck closed", false},
		{"closed 4", func(m *sim.FixtureModel) { m.Faults.RungStuckClosed = []int{4} }, "rung 4 (7.96 pF) stuck closed", false},
		{"closed 5", func(m *sim.FixtureModel) { m.Faults.RungStuckClosed = []int{5} }, "rung 5 (16.05 pF) stuck closed", false},
		{"closed 6", func(m *sim.FixtureModel) { m.Faults.RungStuckClosed = []int{6} }, "rung 6 (31.90 pF) stuck closed", false},
		{"closed 7", func(m *sim.FixtureModel) { m.Faults.RungStuckClosed = []int{7} }, "rung 7 (64.20 pF) stuck closed", false},
		{"open 2", func(m *sim.FixtureModel) { m.Faults.RungStuckOpen = []int{2} }, "rung 2 (1.98 pF) stuck open", false},
		{"open 3", func(m *sim.FixtureModel) { m.Faults.RungStuckOpen = []int{3} }, "rung 3 (4.03 pF) stuck open", false},
		{"open 4", func(m *sim.FixtureModel) { m.Faults.RungStuckOpen = []int{4} }, "rung 4 (7.96 pF) stuck open", false},
		{"open 5", func(m *sim.FixtureModel) { m.Faults.RungStuckOpen = []int{5} }, "rung 5 (16.05 pF) stuck open", false},
		{"open 6", func(m *sim.FixtureModel) { m.Faults.RungStuckOpen = []int{6} }, "rung 6 (31.90 pF) stuck open", false},
		{"open 7", func(m *sim.FixtureModel) { m.Faults.RungStuckOpen = []int{7} }, "rung 7 (64.20 pF) stuck open", false},
		{"drift 3", func(m *sim.FixtureModel) { m.RungsPF[3] += 0.5 }, "rung 3 (4.53 pF)", true},
		{"drift 4", func(m *sim.FixtureModel) { m.RungsPF[4] += 0.5 }, "rung 4 (8.46 pF)", true},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			fm := sim.DefaultFixtureModel()
			fm.RungsPF = append([]float64(nil), fm.RungsPF...)
			c.mod(&fm)
			var s *simStation
			if c.entered {
				s = newSimStation(t, sim.DefaultFixtureModel(), 1)
				lad, _ := fixture.NewLadder(fm.RungsPF, fm.StrayPF)
				fx, err := fixture.New(s.line.Pins(), lad, fixture.Config{Operate: fm.Operate, Bounce: fm.Bounce, LatchDelay: 20 * time.Microsecond}, s.line.Clock())
				if err != nil {
					t.Fatal(err)
				}
				s.fx, s.cfg.RungsPF = fx, fm.RungsPF
			} else {
				s = newSimStation(t, fm, 1)
			}
			res := s.check(t, ref)
			all := strings.Join(res.Faults, "; ") + " " + res.Suspects
			if res.OK || !strings.Contains(all, c.want) {
				t.Errorf("ok %v, faults %q, suspects %q; want %q named", res.OK, res.Faults, res.Suspects, c.want)
			}
		})
	}
}

func fmtp(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}
