package session

import (
	"context"
	"fmt"
	"time"

	"padline/fixture"
	"padline/fixture/sim"
	"padline/sequences"
	"padline/sequences/timing"
)

// The plan drives the fixture as a sequences.Station and finds its lamps
// by type assertion (sequences.Lamps).
var (
	_ sequences.Station = (*fixture.Fixture)(nil)
	_ sequences.Lamps   = (*fixture.Fixture)(nil)
)

// Rig is a station made ready to test one variant: the variant and station
// files, the limits computed for them, the plan, and the fixture over the
// opened pins. It is built once by the one sequence every command shares
// (load variant → load station → limits → pins → fixture → plan): 'padline
// run', 'padline station check|study' and 'padline demo' all call NewRig.
//
// A Rig owns hardware: Halt it on every exit path.
type Rig struct {
	Variant *Variant
	Station *Station
	// Limits is the timing model's report with the guard band applied.
	Limits timing.Report
	// UncertaintyPF is the guard band U the limits use; UncertaintyFrom
	// says where it came from (shift log study, station file or stand-in).
	UncertaintyPF   float64
	UncertaintyFrom string
	// PlanConfig is what the plan was built from (its Limits are the test
	// limits a verdict is judged against).
	PlanConfig sequences.PlanConfig
	Plan       *sequences.Plan
	Fixture    *fixture.Fixture
	// Clock is the fixture's clock: virtual on the simulator, the wall
	// clock on GPIO.
	Clock fixture.Clock
	// Line is the simulated line (driver: sim), nil on GPIO.
	Line *sim.Line
}

// RigOptions are the choices a command may make over the files.
type RigOptions struct {
	// UncertaintyPF and UncertaintyFrom set the guard band; zero takes
	// the station file's uncertainty_pf or the stand-in (StatedUncertainty).
	UncertaintyPF   float64
	UncertaintyFrom string
	// Strategy overrides plan.search.strategy when not empty ("bracket"
	// or "staircase"; SearchLaplace for the earlier plan).
	Strategy string
	// GPIO opens real pins for driver: gpio (see GPIOOpener).
	GPIO GPIOOpener
	// PanelGPIO opens a panel station's real pins (see PanelGPIOOpener).
	PanelGPIO PanelGPIOOpener
}

// guardBand is the guard band U o sets and where it came from, else the
// station file's or the stand-in (StatedUncertainty).
func (o RigOptions) guardBand(st *Station) (float64, string) {
	if o.UncertaintyPF > 0 {
		return o.UncertaintyPF, o.UncertaintyFrom
	}
	return StatedUncertainty(st)
}

// Load resolves and parses a variant and a station reference: each a .yaml
// file or a built-in name.
func Load(variantRef, stationRef string) (*Variant, *Station, error) {
	v, err := LoadVariant(variantRef)
	if err != nil {
		return nil, nil, err
	}
	st, err := LoadStation(stationRef)
	if err != nil {
		return nil, nil, err
	}
	return v, st, nil
}

// NewRig computes the limits for v on st, opens the station's pins, builds
// the fixture and the plan. On error nothing is left open.
func NewRig(v *Variant, st *Station, o RigOptions) (*Rig, error) {
	if st.Sites != nil {
		// One unit per closure on a panel fixture would drive every
		// site's ladder with site 1's values: refuse instead.
		return nil, fmt.Errorf("station %s is a panel station (sites:): this command tests one unit per closure; use 'padline run', 'padline station check' or 'padline demo --panel'", st.Source.Name)
	}
	r := &Rig{Variant: v, Station: st}
	r.UncertaintyPF, r.UncertaintyFrom = o.guardBand(st)
	var err error
	if r.Limits, err = v.StationLimits(r.UncertaintyPF); err != nil {
		return nil, err
	}
	if r.PlanConfig, err = PlanConfig(v, r.Limits, st.Pins.Clock != "", o.Strategy); err != nil {
		return nil, err
	}
	// The search weighs a change of level by the relay time that does not
	// hide inside a unit clock period.
	r.PlanConfig.RelaySettle = st.Ladder.Operate + st.Ladder.Bounce
	if err := r.open(o.GPIO); err != nil {
		return nil, err
	}
	return r, nil
}

// open opens the station's pins, builds the fixture and the plan from
// r.PlanConfig. On error nothing is left open.
func (r *Rig) open(gpio GPIOOpener) error {
	pins, clk, line, err := OpenPins(r.Station, r.Variant, gpio)
	if err != nil {
		return err
	}
	r.Clock, r.Line = clk, line
	if r.Fixture, err = NewFixture(r.Station, pins, clk); err != nil {
		return err
	}
	if r.Plan, err = sequences.NewPlan(r.PlanConfig, r.Fixture.Ladder().Distinct()); err != nil {
		_ = r.Fixture.Halt()
		return err
	}
	return nil
}

// Reopen is a simulated rig again from the start: the same variant,
// station, limits and plan configuration on a new simulated line, fixture
// and plan (the line's units, clock and relay counts start anew), without
// computing the limits again. r is left as it was. A rig on real pins is
// refused.
func (r *Rig) Reopen() (*Rig, error) {
	if !r.Simulated() {
		return nil, fmt.Errorf("station %s: driver %s: only a simulated rig can be reopened", r.Station.Source.Name, r.Station.Driver)
	}
	n := &Rig{Variant: r.Variant, Station: r.Station, Limits: r.Limits, UncertaintyPF: r.UncertaintyPF,
		UncertaintyFrom: r.UncertaintyFrom, PlanConfig: r.PlanConfig}
	if err := n.open(nil); err != nil {
		return nil, err
	}
	return n, nil
}

// OpenRig is Load, the shift log's uncertainty for the station (see
// Uncertainty) and NewRig in one call. Setting up is quick and is not cut
// half-way by a stop request (ctx's values are kept, its end is not).
func OpenRig(ctx context.Context, variantRef, stationRef, shiftLog string, o RigOptions) (*Rig, error) {
	ctx = context.WithoutCancel(ctx)
	v, st, err := Load(variantRef, stationRef)
	if err != nil {
		return nil, err
	}
	if o.UncertaintyPF <= 0 {
		if o.UncertaintyPF, o.UncertaintyFrom, err = Uncertainty(ctx, shiftLog, st); err != nil {
			return nil, err
		}
	}
	return NewRig(v, st, o)
}

// SafeHold is how long a GPIO rig keeps driving its safe state after Halt
// before it returns, so that the lines are held Low (unit power off, every
// rung open) for longer than any relay takes to open and than a watchdog or
// test reading the lines needs to see it, before an exit releases them to
// their pulls. Common practice, no source: a few relay release times and
// several line-poll periods; it costs nothing a technician notices.
const SafeHold = 20 * time.Millisecond

// Halt opens every rung and removes unit power. On GPIO it then holds that
// state for SafeHold (or the relay settling time, if longer) before it
// returns, since a process that exits next releases its lines.
func (r *Rig) Halt() error {
	if err := r.Fixture.Halt(); err != nil {
		return fmt.Errorf("halt fixture: %w", err)
	}
	if !r.Simulated() {
		time.Sleep(max(SafeHold, r.PlanConfig.RelaySettle))
	}
	return nil
}

// Simulated reports whether the rig drives the built-in simulated line.
func (r *Rig) Simulated() bool { return r.Line != nil }
