package session

import (
	"fmt"
	"math"
	"strings"
	"time"

	"padline/fixture"
	"padline/fixture/sim"
	"padline/sequences/timing"
)

// StationSim is a station file's optional `sim:` section. Every key has the
// simulator's realism-floor default (DEVELOPERS.md "Simulator realism floor"); a file that changes one
// says so in its own text.
type StationSim struct {
	// Seed seeds the simulated units and fixture (default 1; 'padline demo
	// --seed' overrides it).
	Seed uint64
	// NoiseMVAt5V is the σ of the D-input comparison noise at 5 V, mV.
	NoiseMVAt5V float64
	// JitterNs is the σ of the sample instant, ns.
	JitterNs float64
	// PeriodJitterPct is the σ of each unit clock period, %.
	PeriodJitterPct float64
	// RungErrSDPF and StrayErrSDPF are the σ of true − entered, pF.
	RungErrSDPF, StrayErrSDPF float64
	// OpenContactPF is the capacitance across one open relay contact.
	OpenContactPF float64
	// DefectRates are per-unit defect probabilities by defect name.
	DefectRates map[string]float64
	// Faults are injected fixture faults (all off by default).
	Faults sim.FixtureFaults
}

// readStationSim reads the `sim:` section strictly.
func readStationSim(d *doc) StationSim {
	fm, um := sim.DefaultFixtureModel(), sim.DefaultUnitModel()
	s := StationSim{
		Seed:            1,
		NoiseMVAt5V:     um.Noise.CompareMVAt5V,
		JitterNs:        um.Noise.SampleJitterNs,
		PeriodJitterPct: um.Noise.PeriodJitter * 100,
		RungErrSDPF:     fm.RungErrSD,
		StrayErrSDPF:    fm.StrayErrSD,
		OpenContactPF:   fm.OpenContactPF,
		DefectRates:     sim.DefaultDefectRates(),
	}
	if !d.section("sim", false) {
		return s
	}
	s.Seed = uint64(d.count("sim.seed", 0, int(s.Seed)))
	s.NoiseMVAt5V = d.nonNegative("sim.noise_mv_at_5v", false, s.NoiseMVAt5V)
	s.JitterNs = d.nonNegative("sim.jitter_ns", false, s.JitterNs)
	s.PeriodJitterPct = d.nonNegative("sim.period_jitter_pct", false, s.PeriodJitterPct)
	s.RungErrSDPF = d.nonNegative("sim.rung_err_sd_pf", false, s.RungErrSDPF)
	s.StrayErrSDPF = d.nonNegative("sim.stray_err_sd_pf", false, s.StrayErrSDPF)
	s.OpenContactPF = d.nonNegative("sim.open_contact_pf", false, s.OpenContactPF)
	if d.section("sim.defect_rates", false) {
		for _, name := range sim.DefectNames() {
			key := "sim.defect_rates." + name
			if r, ok := d.num(key, false, 0); ok {
				if r < 0 || r > 1 {
					d.fail(key, "must be a probability in [0, 1], got %g", r)
				}
				s.DefectRates[name] = r
			}
		}
	}
	if d.section("sim.faults", false) {
		f := &s.Faults
		f.RungStuckOpen = d.optIndexList("sim.faults.rung_stuck_open")
		f.RungStuckClosed = d.optIndexList("sim.faults.rung_stuck_closed")
		f.PadPinOpen = d.boolean("sim.faults.pad_pin_open", false)
		f.LatchPinOpen = d.boolean("sim.faults.latch_pin_open", false)
		f.LidOpen = d.boolean("sim.faults.lid_open", false)
	}
	return s
}

// optIndexList reads an optional list of rung indexes.
func (d *doc) optIndexList(key string) []int {
	if !d.has(key) {
		d.lookup(key)
		return nil
	}
	var out []int
	for i, f := range d.numList(key) {
		if f != math.Trunc(f) || f < 0 || f >= maxRungs {
			d.fail(fmtIndex(key, i), "want a rung index 0..%d, got %g", maxRungs-1, f)
			continue
		}
		out = append(out, int(f))
	}
	return out
}

// spread turns a toleranced variant value into the simulator's description
// of how it varies over units, in the variant's own distribution: uniform,
// triangular (mode typ), or normal — with its stated σ, else a split normal
// with each side's tolerance at 3σ — clipped to its limits.
func spread(v timing.Value) sim.Spread {
	if !(v.Max > v.Min) {
		return sim.Fixed(v.Typ)
	}
	s := sim.Spread{Mean: v.Typ, Min: v.Min, Max: v.Max}
	switch v.Dist {
	case timing.Uniform:
		s.Shape = sim.Uniform
	case timing.Triangular:
		s.Shape = sim.Triangular
	default:
		s.SD = v.SD
		if s.SD == 0 {
			s.SD = (v.Typ - v.Min) / 3
			if hi := (v.Max - v.Typ) / 3; hi != s.SD {
				s.SDHigh = hi
			}
		}
	}
	return s
}

// UnitModel describes the variant's units to the simulator. This is the one
// place the variant file and the simulator meet; the simulator computes its
// own physics from these component values.
func UnitModel(v *Variant, s StationSim) sim.UnitModel {
	// The simulator takes one value per input: a supply table is read at the
	// nominal supply (Validate has checked that it covers it).
	c, _ := v.Circuit.AtSupply(v.Circuit.SupplyV.Typ)
	return sim.UnitModel{
		SupplyV: spread(c.SupplyV), OscR: spread(c.OscROhm), OscC: spread(c.OscCF),
		VTPosFrac: spread(c.VtPosFrac), VTNegFrac: spread(c.VtNegFrac),
		SenseR: spread(c.SenseROhm), PadPF: spread(c.PadPF), InputPF: spread(c.InputPF),
		DelayNs: spread(c.DelayNS), SetupNs: spread(c.SetupNS), ThetaFrac: spread(c.ThresholdFrac),
		Noise: sim.Noise{
			CompareMVAt5V:  s.NoiseMVAt5V,
			SampleJitterNs: s.JitterNs,
			PeriodJitter:   s.PeriodJitterPct / 100,
		},
		DefectRates: s.DefectRates,
	}
}

// fixtureModel describes the station's fixture to the simulator.
func fixtureModel(st *Station) sim.FixtureModel {
	return sim.FixtureModel{
		RungsPF:       st.Ladder.RungsPF,
		StrayPF:       st.Ladder.StrayPF,
		RungErrSD:     st.Sim.RungErrSDPF,
		StrayErrSD:    st.Sim.StrayErrSDPF,
		OpenContactPF: st.Sim.OpenContactPF,
		Operate:       st.Ladder.Operate,
		Bounce:        st.Ladder.Bounce,
		Faults:        st.Sim.Faults,
	}
}

// LatchDelay is how long after the unit's falling clock edge the fixture
// reads the latch: past the clock-path delay and the flip-flop's output
// delay, with margin.
const LatchDelay = 20 * time.Microsecond

// NewSimLine builds the simulated line for a station and a variant.
func NewSimLine(st *Station, v *Variant) (*sim.Line, error) {
	line, err := sim.NewLine(fixtureModel(st), UnitModel(v, st.Sim), st.Sim.Seed)
	if err != nil {
		return nil, fmt.Errorf("station %s: simulated line: %w", st.Source.Name, err)
	}
	return line, nil
}

// NewFixture builds the fixture over pins with the station's ladder.
func NewFixture(st *Station, pins fixture.Pins, clk fixture.Clock) (*fixture.Fixture, error) {
	lad, err := fixture.NewLadder(st.Ladder.RungsPF, st.Ladder.StrayPF)
	if err != nil {
		return nil, fmt.Errorf("station %s: ladder: %w", st.Source.Name, err)
	}
	fx, err := fixture.New(pins, lad, fixture.Config{
		Operate: st.Ladder.Operate, Bounce: st.Ladder.Bounce, LatchDelay: LatchDelay,
	}, clk)
	if err != nil {
		return nil, fmt.Errorf("station %s: fixture: %w", st.Source.Name, err)
	}
	return fx, nil
}

// DemoSerial is serial number i (from 1) of the variant's simulated units:
// the variant name without dashes, a dash and six digits (QM-205, 1 →
// QM205-000001).
func DemoSerial(v *Variant, i int) string {
	return fmt.Sprintf("%s-%06d", strings.ReplaceAll(v.Name, "-", ""), i)
}
