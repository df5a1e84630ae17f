package sequences

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/bits"
	"slices"
	"sync"
	"time"

	"padline/fixture"
)

// PanelStation is a panel fixture as a panel plan drives it;
// *fixture.Panel satisfies it.
type PanelStation interface {
	Sites() int
	Power(on bool) error
	LidClosed() (bool, error)
	SetPatterns(ps []uint16) error
	SampleAll(sites uint32, k int, period time.Duration) ([]int, error)
	SampleFresh(read, need uint32, k int, periods []time.Duration) (n, highs []int, err error)
	MeasureClocks(sites uint32, periods int, timeout time.Duration) (hz []float64, errs []error, err error)
	Halt() error
}

var _ PanelStation = (*fixture.Panel)(nil)

// PanelPlan is a variant's plan run on every site of a panel in one fixture
// closure: power up, clock (every site in one gate time), idle and release
// checks read on every site at once, the trip search (joint on a ganged
// ladder, concurrent on own ladders), power down. A site that fails a step
// leaves the plan; the others go on.
type PanelPlan struct {
	cfg    PlanConfig
	levels [][]Level // levels[s][j]: site s's level j
	ganged bool
	rungs  int // the ladder's rung count (highest pattern bit + 1)

	mu      sync.Mutex
	offsets []*FixtureOffset // each site's (nil: none); SetOffsets
}

// SetOffsets makes every later panel's trip point on site s the trip found
// on that site's entered ladder values plus offs[s] at that trip, as
// Plan.SetOffset does for one unit: each site has its own stray and its
// own capacitors, so each has its own offset (DEVELOPERS.md "Panels").
// A nil offs, or a nil entry, corrects nothing there.
func (p *PanelPlan) SetOffsets(offs []*FixtureOffset) error {
	if offs != nil && len(offs) != len(p.levels) {
		return fmt.Errorf("panel plan: %d fixture offsets for %d sites", len(offs), len(p.levels))
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	p.offsets = slices.Clone(offs)
	return nil
}

// Offsets returns each site's fixture offset in force (nil: none).
func (p *PanelPlan) Offsets() []*FixtureOffset {
	p.mu.Lock()
	defer p.mu.Unlock()
	return slices.Clone(p.offsets)
}

// NewPanelPlan builds the plan for a panel whose sites have the given level
// lists (each strictly ascending in its site's basis). On a ganged ladder
// every site's list must hold the same patterns in the same order
// (fixture.GangedLevels makes such lists).
func NewPanelPlan(cfg PlanConfig, levels [][]Level, ganged bool) (*PanelPlan, error) {
	if len(levels) < 1 || len(levels) > 32 {
		return nil, fmt.Errorf("panel plan: %d sites, want 1..32", len(levels))
	}
	for s, lv := range levels {
		// NewPlan checks the rest of cfg and the order of the levels.
		if _, err := NewPlan(cfg, lv); err != nil {
			return nil, fmt.Errorf("panel plan: site %d: %w", s+1, err)
		}
		if ganged {
			if len(lv) != len(levels[0]) {
				return nil, fmt.Errorf("panel plan: site %d has %d levels on a ganged ladder, site 1 %d", s+1, len(lv), len(levels[0]))
			}
			for j := range lv {
				if lv[j].Pattern != levels[0][j].Pattern {
					return nil, fmt.Errorf("panel plan: site %d level %d is pattern %#x, site 1's %#x: a ganged ladder needs one pattern list",
						s+1, j, lv[j].Pattern, levels[0][j].Pattern)
				}
			}
		}
	}
	if cfg.StepTimeout <= 0 {
		cfg.StepTimeout = 5 * time.Second
	}
	var all uint16
	for _, lv := range levels {
		for _, l := range lv {
			all |= l.Pattern
		}
	}
	return &PanelPlan{cfg: cfg, levels: levels, ganged: ganged, rungs: bits.Len16(all)}, nil
}

// Sites returns the number of sites the plan was built for.
func (p *PanelPlan) Sites() int { return len(p.levels) }

// PanelTrial is one panel's test in progress and its details: fixture time
// per phase (for the whole panel), each site's trip search and the joint
// search's probes.
type PanelTrial struct {
	ctx      context.Context
	st       PanelStation
	clock    Clock
	runs     []*Run
	active   uint32 // sites still in the plan
	step     StepName
	deadline time.Time
	period   time.Duration   // the slowest site's, for readings of every site
	periods  []time.Duration // each site's, for readings a site needs

	// Phases is the panel's fixture time per phase, as Trial.Phases.
	Phases map[string]time.Duration
	// Trips holds each site's trip search result (nil where none ran).
	Trips []*TripResult
	// Search is the joint (or concurrent) search's record.
	Search JointResult
	// Errs holds each site's station error (nil where none).
	Errs []error
}

// siteRec records one site's measurements under the trial's current step.
type siteRec struct {
	t *PanelTrial
	s int
}

// Measure records a measurement for the site (see Trial.Measure).
func (r siteRec) Measure(name Quantity, value float64, unit string, low, high float64) Verdict {
	v := Pass
	if math.IsNaN(value) || (!math.IsNaN(low) && value < low) || (!math.IsNaN(high) && value > high) {
		v = Fail
	}
	run := r.t.runs[r.s]
	run.Measurements = append(run.Measurements, Measurement{
		Step: r.t.step, Name: name, Value: value, Unit: unit, Low: low, High: high, Verdict: v,
	})
	return v
}

// check fails when the context has ended or the step budget is spent.
func (t *PanelTrial) check() error {
	if err := t.ctx.Err(); err != nil {
		return err
	}
	if !t.deadline.IsZero() && t.clock.Now().After(t.deadline) {
		return ErrStepTimeout
	}
	return nil
}

// failSite ends site s's plan with a unit failure or a site station fault.
func (t *PanelTrial) failSite(s int, err error) {
	run := t.runs[s]
	var uf *UnitFailure
	if errors.As(err, &uf) {
		run.Verdict, run.FailCode = Fail, uf.Code
	} else {
		run.Verdict, run.FailCode = StationFault, stationCode(err)
		t.Errs[s] = fmt.Errorf("step %s: %w", t.step, err)
	}
	t.active &^= 1 << s
}

func (t *PanelTrial) setAll(level func(s int) int, plan *PanelPlan) error {
	ps := make([]uint16, len(plan.levels))
	for s := range ps {
		ps[s] = plan.levels[s][level(s)].Pattern
	}
	if err := t.check(); err != nil {
		return err
	}
	return t.st.SetPatterns(ps)
}

func (t *PanelTrial) sample(k int) ([]int, error) {
	if err := t.check(); err != nil {
		return nil, err
	}
	return t.st.SampleAll(t.active, k, t.period)
}

// Execute runs the plan on the sites in sites (bit s = site s; x-outs left
// out) and fills runs[s] for each: verdict, fail code, measurements, times.
// A panel-wide station problem (lid, ladder write, latch read, timeout)
// makes every site still in the plan a station fault and is returned; a
// site's own station problem (its clock pin) is that site's. The panel is
// left with power off and every rung open on every path; when ctx ends
// mid-panel no site gets a verdict (ErrAborted).
func (p *PanelPlan) Execute(ctx context.Context, st PanelStation, clk Clock, runs []*Run, sites uint32) (t *PanelTrial, err error) {
	n := len(p.levels)
	if st.Sites() != n || len(runs) != n {
		return nil, fmt.Errorf("panel plan for %d sites, station has %d, %d runs", n, st.Sites(), len(runs))
	}
	sites &= 1<<n - 1
	for s := range n {
		if sites&(1<<s) != 0 && runs[s] == nil {
			return nil, fmt.Errorf("panel plan: no run for site %d", s+1)
		}
	}
	t = &PanelTrial{ctx: ctx, st: st, clock: clk, runs: runs, active: sites, period: p.cfg.Period,
		periods: make([]time.Duration, n),
		Phases:  map[string]time.Duration{}, Trips: make([]*TripResult, n), Errs: make([]error, n)}
	for s := range t.periods {
		t.periods[s] = p.cfg.Period
	}
	defer func() {
		if r := recover(); r != nil {
			_ = st.Halt()
			panic(r)
		}
	}()
	start := clk.Now()
	steps := []struct {
		name StepName
		fn   func() error
	}{
		{StepPowerUp, p.powerUp(t)},
		{StepClock, p.clockStep(t)},
		{StepIdle, p.idle(t)},
		{StepRelease, p.release(t)},
		{StepTripSearch, p.tripSearch(t)},
	}
	var panelErr error
	for _, s := range steps {
		if s.name == StepClock && p.cfg.ClockPeriods == 0 {
			continue
		}
		if t.active == 0 {
			break
		}
		t.step = s.name
		t.deadline = clk.Now().Add(p.cfg.StepTimeout)
		t0 := clk.Now()
		err := s.fn()
		if err == nil && clk.Now().After(t.deadline) {
			err = ErrStepTimeout
		}
		t.Phases[string(s.name)] += clk.Now().Sub(t0)
		if err != nil {
			panelErr = fmt.Errorf("step %s: %w", s.name, err)
			break
		}
		if closed, err := st.LidClosed(); err != nil || !closed {
			panelErr = fmt.Errorf("after step %s: %w", s.name, errors.Join(fixture.ErrLidOpen, err))
			break
		}
	}
	// Power down even after a failure, whatever the caller's context.
	t.step, t.deadline = StepPowerDown, clk.Now().Add(p.cfg.StepTimeout)
	t0 := clk.Now()
	ps := make([]uint16, n)
	downErr := errors.Join(st.SetPatterns(ps), st.Power(false))
	t.Phases[string(StepPowerDown)] += clk.Now().Sub(t0)
	end := clk.Now()
	for s := range n {
		if sites&(1<<s) != 0 {
			runs[s].Started, runs[s].Finished = start, end
		}
	}
	if ctx.Err() != nil {
		_ = st.Halt()
		for s := range n {
			if sites&(1<<s) != 0 {
				runs[s].Verdict, runs[s].FailCode = "", ""
			}
		}
		return t, fmt.Errorf("%w: %w", ErrAborted, ctx.Err())
	}
	if err := errors.Join(panelErr, downErr); err != nil {
		_ = st.Halt()
		// Every site not already judged is the station's fault.
		for s := range n {
			if t.active&(1<<s) != 0 {
				runs[s].Verdict, runs[s].FailCode = StationFault, stationCode(err)
				t.Errs[s] = err
			}
		}
		return t, err
	}
	for s := range n {
		if t.active&(1<<s) != 0 {
			runs[s].Verdict, runs[s].FailCode = Pass, ""
		}
	}
	return t, nil
}

func (p *PanelPlan) powerUp(t *PanelTrial) func() error {
	return func() error {
		if err := t.check(); err != nil {
			return err
		}
		closed, err := t.st.LidClosed()
		if err != nil {
			return err
		}
		if !closed {
			return fixture.ErrLidOpen
		}
		if err := t.st.SetPatterns(make([]uint16, len(p.levels))); err != nil {
			return err
		}
		if err := t.st.Power(true); err != nil {
			return err
		}
		t.clock.Sleep(p.cfg.PowerSettle)
		return t.check()
	}
}

// periodMargin widens the slowest measured clock period for the panel's
// readings, so every site latches a fresh decision between two readings
// despite period jitter (our choice: 2 %, ten times the 0.2 % period jitter).
const periodMargin = 1.02

func (p *PanelPlan) clockStep(t *PanelTrial) func() error {
	return func() error {
		if err := t.check(); err != nil {
			return err
		}
		n := p.cfg.ClockPeriods
		hz, errs, err := t.st.MeasureClocks(t.active, n, time.Duration(n+4)*p.cfg.Period)
		if err != nil {
			return err
		}
		lim := p.cfg.Limits
		slowest := time.Duration(0)
		for s := range hz {
			if t.active&(1<<s) == 0 {
				continue
			}
			rec := siteRec{t, s}
			if e := errs[s]; e != nil {
				if errors.Is(e, fixture.ErrNoClockEdges) {
					rec.Measure(MeasClockHz, 0, "Hz", lim.ClockLowHz, lim.ClockHighHz)
					t.failSite(s, fail(CodeClockDead, "no edges at the clock test point"))
				} else {
					t.failSite(s, e)
				}
				continue
			}
			if rec.Measure(MeasClockHz, hz[s], "Hz", lim.ClockLowHz, lim.ClockHighHz) == Fail {
				if hz[s] < lim.ClockLowHz {
					t.failSite(s, fail(CodeClockLow, "%.1f Hz < %.1f Hz", hz[s], lim.ClockLowHz))
				} else {
					t.failSite(s, fail(CodeClockHigh, "%.1f Hz > %.1f Hz", hz[s], lim.ClockHighHz))
				}
				continue
			}
			t.periods[s] = time.Duration(periodMargin * float64(time.Second) / hz[s])
			slowest = max(slowest, t.periods[s])
		}
		if slowest > 0 {
			t.period = slowest
		}
		return t.check()
	}
}

func (p *PanelPlan) idle(t *PanelTrial) func() error {
	return func() error {
		if err := t.setAll(func(int) int { return 0 }, p); err != nil {
			return err
		}
		highs, err := t.sample(p.cfg.IdlePeriods)
		if err != nil {
			return err
		}
		for s := range highs {
			if t.active&(1<<s) == 0 {
				continue
			}
			if (siteRec{t, s}).Measure(MeasIdleHighs, float64(highs[s]), "count", 0, 0) == Fail {
				t.failSite(s, fail(CodeIdleLatched, "latch high %d of %d periods at %.2f pF",
					highs[s], p.cfg.IdlePeriods, p.levels[s][0].PF))
			}
		}
		return nil
	}
}

// touchLevel is site s's lowest level at or above the high test limit.
func (p *PanelPlan) touchLevel(s int) int {
	for i, l := range p.levels[s] {
		if l.PF >= p.cfg.Limits.TripHighPF {
			return i
		}
	}
	return len(p.levels[s]) - 1
}

// release is the plan's release check on every site at once: touch (on a
// ganged ladder the lowest shared level at or above the high limit on
// every site), then open the ladder; a site that latched at the touch must
// read 0 again for ReleasePeriods periods.
func (p *PanelPlan) release(t *PanelTrial) func() error {
	return func() error {
		touch := make([]int, len(p.levels))
		shared := 0
		for s := range touch {
			touch[s] = p.touchLevel(s)
			if t.active&(1<<s) != 0 {
				shared = max(shared, touch[s])
			}
		}
		if p.ganged {
			for s := range touch {
				touch[s] = shared
			}
		}
		if err := t.setAll(func(s int) int { return touch[s] }, p); err != nil {
			return err
		}
		latched, err := t.sample(2)
		if err != nil {
			return err
		}
		if err := t.setAll(func(int) int { return 0 }, p); err != nil {
			return err
		}
		highs, err := t.sample(p.cfg.ReleasePeriods)
		if err != nil {
			return err
		}
		for s := range highs {
			if t.active&(1<<s) == 0 || latched[s] == 0 {
				continue
			}
			if (siteRec{t, s}).Measure(MeasReleaseHighs, float64(highs[s]), "count", 0, 0) == Fail {
				t.failSite(s, fail(CodeStuckLatched, "latch still high %d of %d periods after the ladder opened from %.1f pF",
					highs[s], p.cfg.ReleasePeriods, p.levels[s][touch[s]].PF))
			}
		}
		return nil
	}
}

func (p *PanelPlan) tripSearch(t *PanelTrial) func() error {
	return func() error {
		pf := make([][]float64, len(p.levels))
		for s, lv := range p.levels {
			pf[s] = make([]float64, len(lv))
			for i, l := range lv {
				pf[s][i] = l.PF
			}
		}
		var res JointResult
		var err error
		if p.ganged {
			pr := PanelProberFunc(func(level, k int, read, need uint32) ([]int, []int, error) {
				if err := t.setAll(func(int) int { return level }, p); err != nil {
					return nil, nil, err
				}
				if err := t.check(); err != nil {
					return nil, nil, err
				}
				return t.st.SampleFresh(read&t.active, need&t.active, k, t.periods)
			})
			res, err = findTripsTimed(t, pr, pf, p.cfg.Search)
		} else {
			pr := SitesProberFunc(func(levels, ks []int) ([]int, error) {
				cur := make([]uint16, len(levels))
				var mask uint32
				k := 0
				for s, l := range levels {
					if l >= 0 {
						cur[s] = p.levels[s][l].Pattern
						mask |= 1 << s
						k = max(k, ks[s])
					}
				}
				if err := t.check(); err != nil {
					return nil, err
				}
				if err := t.st.SetPatterns(cur); err != nil {
					return nil, err
				}
				// Every probing site gets its first ks[s] readings.
				highs := make([]int, len(levels))
				for i := range k {
					h, err := t.st.SampleAll(mask, 1, t.period)
					if err != nil {
						return nil, err
					}
					for s := range h {
						if levels[s] >= 0 && i < ks[s] {
							highs[s] += h[s]
						}
					}
				}
				return highs, nil
			})
			t0 := t.clock.Now()
			res, err = FindTripsOwn(pr, pf, t.active, p.cfg.Search)
			t.Phases["own_search"] += t.clock.Now().Sub(t0)
		}
		t.Search = res
		if err != nil {
			return err
		}
		offsets := p.Offsets()
		for s := range res.Sites {
			if t.active&(1<<s) == 0 {
				continue
			}
			r := res.Sites[s]
			t.Trips[s] = &r
			if offsets != nil {
				if e := addOffset(siteRec{t, s}, offsets[s], p.levels[s], p.rungs, &r); e != nil {
					t.failSite(s, e)
					continue
				}
			}
			if e := judgeTrip(siteRec{t, s}, r, p.cfg.Limits, p.levels[s][len(p.levels[s])-1].PF); e != nil {
				t.failSite(s, e)
			}
		}
		return nil
	}
}

// findTripsTimed runs the joint search and books the fixture time of each
// probe to its phase.
func findTripsTimed(t *PanelTrial, pr PanelProberFunc, pf [][]float64, opt SearchOptions) (JointResult, error) {
	var spans []time.Duration
	timed := PanelProberFunc(func(level, k int, read, need uint32) ([]int, []int, error) {
		t0 := t.clock.Now()
		n, h, err := pr(level, k, read, need)
		spans = append(spans, t.clock.Now().Sub(t0))
		return n, h, err
	})
	res, err := FindTrips(timed, pf, t.active, opt)
	for i, d := range spans {
		if i < len(res.Probes) {
			t.Phases[res.Probes[i].Phase] += d
		}
	}
	return res, err
}

// ActiveSites returns the sites still in the plan (bit s = site s).
func (t *PanelTrial) ActiveSites() uint32 { return t.active }

// SiteCount is the number of sites in mask.
func SiteCount(mask uint32) int { return bits.OnesCount32(mask) }
