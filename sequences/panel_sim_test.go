package sequences_test

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"
	"testing"
	"time"

	"padline/fixture"
	"padline/fixture/sim"
	"padline/sequences"
)

// qm205Units are the QM-205 demo variant's units as testdata/variants/
// QM-205.yaml states its parts (the same mapping padline's simulated
// station makes), with the simulator's default noise and no defects drawn.
func qm205Units() sim.UnitModel {
	return sim.UnitModel{
		SupplyV: sim.Tol(5, 5), OscR: sim.Tol(22000, 1), OscC: sim.Tol(100e-9, 10),
		VTPosFrac: sim.MinTypMax(0.55, 0.62, 0.70), VTNegFrac: sim.MinTypMax(0.30, 0.38, 0.45),
		SenseR: sim.Tol(100000, 1), PadPF: sim.Tol(8, 15), InputPF: sim.MinTypMax(3, 5, 7.5),
		DelayNs: sim.MinTypMax(2700, 3000, 3400), SetupNs: sim.MinTypMax(20, 40, 80),
		ThetaFrac: sim.Spread{Mean: 0.5, SD: 0.03, Min: 0.3, Max: 0.7},
		Noise:     sim.DefaultNoise(),
	}
}

// qm205Plan is the QM-205 plan with the variant's default plan keys and the
// test limits 'padline limits --variant QM-205' prints (10.30 … 59.70 pF,
// clock 241.4 … 1271.1 Hz).
func qm205Plan() sequences.PlanConfig {
	return sequences.PlanConfig{
		PowerSettle: 50 * time.Millisecond, ClockPeriods: 16, IdlePeriods: 8, ReleasePeriods: 8,
		Period: time.Duration(math.Ceil(1e9 / 241.4)), StepTimeout: 5 * time.Second,
		Search: sequences.SearchOptions{SETargetPF: 0.1, MaxRefineSamples: 32},
		Limits: sequences.Limits{TripLowPF: 10.30, TripHighPF: 59.70, ClockLowHz: 241.4, ClockHighHz: 1271.1, SpreadMaxPF: 1.5},
	}
}

const testLatchDelay = 20 * time.Microsecond

// simPanel is a simulated panel fixture with its panel plan.
type simPanel struct {
	sim  *sim.Panel
	fx   *fixture.Panel
	plan *sequences.PanelPlan
}

func newSimPanel(t testing.TB, pm sim.PanelModel, um sim.UnitModel, seed uint64) *simPanel {
	t.Helper()
	sp, err := sim.NewPanel(pm, um, seed)
	if err != nil {
		t.Fatal(err)
	}
	pins := sp.Pins()
	var ladders []*fixture.Ladder
	for _, fm := range pm.Sites {
		l, err := fixture.NewLadder(fm.RungsPF, fm.StrayPF)
		if err != nil {
			t.Fatal(err)
		}
		ladders = append(ladders, l)
	}
	fp := fixture.PanelPins{
		Latch: pins.Latch, LatchGroup: pins.LatchGroup, Clock: pins.Clock, ClockGroup: pins.ClockGroup,
		Power: pins.Power, Lid: pins.Lid, PassLamp: pins.PassLamp, FailLamp: pins.FailLamp,
	}
	if pm.Ganged {
		fp.Ladder, fp.LadderGroup = pins.Ladder, pins.LadderGroup
	} else {
		fp.SiteLadders = pins.SiteLadders
		for _, g := range pins.SiteLadderGroups {
			fp.SiteLadderGroups = append(fp.SiteLadderGroups, g)
		}
	}
	fm := pm.Sites[0]
	fx, err := fixture.NewPanel(fp, ladders, fixture.Config{Operate: fm.Operate, Bounce: fm.Bounce, LatchDelay: testLatchDelay}, sp.Clock())
	if err != nil {
		t.Fatal(err)
	}
	var levels [][]fixture.Level
	if pm.Ganged {
		levels = fixture.GangedLevels(ladders)
	} else {
		for _, l := range ladders {
			levels = append(levels, l.Distinct())
		}
	}
	plan, err := sequences.NewPanelPlan(qm205Plan(), levels, pm.Ganged)
	if err != nil {
		t.Fatal(err)
	}
	return &simPanel{sim: sp, fx: fx, plan: plan}
}

// test loads a panel of serials and runs the plan on the sites in mask.
func (p *simPanel) test(t testing.TB, ctx context.Context, serials []string, mask uint32) ([]*sequences.Run, *sequences.PanelTrial, error) {
	t.Helper()
	if _, err := p.sim.Load(serials); err != nil {
		t.Fatal(err)
	}
	defer p.sim.Unload()
	runs := make([]*sequences.Run, len(serials))
	for s := range runs {
		if mask&(1<<s) != 0 {
			runs[s] = &sequences.Run{Serial: serials[s]}
		}
	}
	tr, err := p.plan.Execute(ctx, p.fx, p.sim.Clock(), runs, mask)
	return runs, tr, err
}

func panelSerials(panel, n int) []string {
	out := make([]string, n)
	for s := range out {
		out[s] = fmt.Sprintf("QM205-%04d%02d", panel, s+1)
	}
	return out
}

func allSites(n int) uint32 { return 1<<n - 1 }

func TestPanelGangedGoodUnits(t *testing.T) {
	p := newSimPanel(t, sim.DefaultPanelModel(8), qm205Units(), 1)
	for panel := range 4 {
		serials := panelSerials(panel+1, 8)
		if _, err := p.sim.Load(serials); err != nil {
			t.Fatal(err)
		}
		want := make([]float64, 8)
		for s := range want {
			want[s] = p.sim.TripInPanelPF(s)
		}
		p.sim.Unload()
		runs, tr, err := p.test(t, context.Background(), serials, allSites(8))
		if err != nil {
			t.Fatal(err)
		}
		for s, r := range runs {
			if r.Verdict != sequences.Pass {
				t.Fatalf("panel %d site %d: %s %s, want pass (good unit)", panel+1, s+1, r.Verdict, r.FailCode)
			}
			// The trip point found against the simulator's truth at this
			// site (its unit's own trip point less the neighbours'
			// coupling): within the fixture's calibration error and a few
			// standard errors (DEVELOPERS.md, "Simulator realism floor": rung σ 0.05 pF, stray σ 0.1 pF).
			if d := tr.Trips[s].TripPF - want[s]; math.Abs(d) > 0.6 {
				t.Errorf("panel %d site %d: trip %.3f pF, truth in panel %.3f pF", panel+1, s+1, tr.Trips[s].TripPF, want[s])
			}
		}
	}
}

func TestPanelCouplingMovesTripALittle(t *testing.T) {
	pm := sim.DefaultPanelModel(3)
	p, err := sim.NewPanel(pm, qm205Units(), 1)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := p.Load(panelSerials(1, 3)); err != nil {
		t.Fatal(err)
	}
	// The middle site has two neighbours: each couples through 0.5 pF in
	// series with a node of tens of pF, so a little under 0.5 pF each, and
	// a neighbour with more ladder closed couples a little more.
	c20 := p.CouplingPF(1, 20)
	c60 := p.CouplingPF(1, 60)
	if !(c20 > 0.9 && c20 < 1.0) || !(c60 > c20) || c60-c20 > 0.02 {
		t.Fatalf("coupling at 20 pF %.4f, at 60 pF %.4f: want just under 2 × 0.5 pF, rising slightly", c20, c60)
	}
	if d := p.Site(1).Unit().Truth().TripPF - p.TripInPanelPF(1); math.Abs(d-p.CouplingPF(1, p.TripInPanelPF(1))) > 1e-6 {
		t.Fatalf("trip in panel differs from the unit's own by %.4f pF, want the coupling there", d)
	}
}

func TestPanelXOutNotTested(t *testing.T) {
	p := newSimPanel(t, sim.DefaultPanelModel(4), qm205Units(), 2)
	mask := allSites(4) &^ (1 << 2) // site 3 is an x-out
	runs, tr, err := p.test(t, context.Background(), panelSerials(7, 4), mask)
	if err != nil {
		t.Fatal(err)
	}
	if runs[2] != nil || tr.Trips[2] != nil {
		t.Fatalf("x-out site 3 got a run or a search: %+v", runs[2])
	}
	for _, s := range []int{0, 1, 3} {
		if runs[s].Verdict != sequences.Pass {
			t.Fatalf("site %d: %s %s", s+1, runs[s].Verdict, runs[s].FailCode)
		}
	}
}

func TestPanelStuckLatchOnOneSite(t *testing.T) {
	p := newSimPanel(t, sim.DefaultPanelModel(4), qm205Units(), 3)
	serials := panelSerials(9, 4)
	if err := p.sim.ForceDefects(serials[1], sim.DefectLatchStuckHigh); err != nil {
		t.Fatal(err)
	}
	runs, _, err := p.test(t, context.Background(), serials, allSites(4))
	if err != nil {
		t.Fatal(err)
	}
	for s, r := range runs {
		want := sequences.Pass
		if s == 1 {
			want = sequences.Fail
		}
		if r.Verdict != want {
			t.Fatalf("site %d: %s %s, want %s", s+1, r.Verdict, r.FailCode, want)
		}
	}
	if runs[1].FailCode != sequences.CodeIdleLatched {
		t.Fatalf("site 2 fail code %s, want %s", runs[1].FailCode, sequences.CodeIdleLatched)
	}
}

func TestPanelDeadClockIsThatSitesFail(t *testing.T) {
	p := newSimPanel(t, sim.DefaultPanelModel(4), qm205Units(), 4)
	serials := panelSerials(11, 4)
	if err := p.sim.ForceDefects(serials[3], sim.DefectDeadOsc); err != nil {
		t.Fatal(err)
	}
	runs, _, err := p.test(t, context.Background(), serials, allSites(4))
	if err != nil {
		t.Fatal(err)
	}
	if runs[3].FailCode != sequences.CodeClockDead {
		t.Fatalf("site 4: %s %s, want clock_dead", runs[3].Verdict, runs[3].FailCode)
	}
	for s := range 3 {
		if runs[s].Verdict != sequences.Pass {
			t.Fatalf("site %d: %s %s", s+1, runs[s].Verdict, runs[s].FailCode)
		}
	}
}

// stopAfter is a panel station that cancels the test's context after a
// number of reading rounds: a stop request arriving half-way through a
// panel.
type stopAfter struct {
	sequences.PanelStation
	rounds int
	cancel context.CancelFunc
}

func (s *stopAfter) SampleAll(sites uint32, k int, period time.Duration) ([]int, error) {
	if s.rounds--; s.rounds == 0 {
		s.cancel()
	}
	return s.PanelStation.SampleAll(sites, k, period)
}

func (s *stopAfter) SampleFresh(read, need uint32, k int, periods []time.Duration) ([]int, []int, error) {
	if s.rounds--; s.rounds == 0 {
		s.cancel()
	}
	return s.PanelStation.SampleFresh(read, need, k, periods)
}

func TestPanelStoppedHalfWay(t *testing.T) {
	p := newSimPanel(t, sim.DefaultPanelModel(4), qm205Units(), 5)
	serials := panelSerials(3, 4)
	if _, err := p.sim.Load(serials); err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	runs := make([]*sequences.Run, 4)
	for s := range runs {
		runs[s] = &sequences.Run{Serial: serials[s]}
	}
	// Idle and release take three reading rounds; the fifth is inside the
	// trip search.
	st := &stopAfter{PanelStation: p.fx, rounds: 5, cancel: cancel}
	_, err := p.plan.Execute(ctx, st, p.sim.Clock(), runs, allSites(4))
	if !errors.Is(err, sequences.ErrAborted) {
		t.Fatalf("err %v, want ErrAborted", err)
	}
	for s, r := range runs {
		if r.Verdict != "" {
			t.Fatalf("site %d got verdict %s after a stop", s+1, r.Verdict)
		}
	}
	if p.sim.Site(0).Powered() {
		t.Fatal("panel left powered after a stop")
	}
}

func TestPanelOwnLadders(t *testing.T) {
	pm := sim.DefaultPanelModel(4)
	pm.Ganged, pm.SharedPower = false, false // own ladders and a power switch per site
	p := newSimPanel(t, pm, qm205Units(), 6)
	if n := len(p.sim.Pins().Power); n != 4 {
		t.Fatalf("%d power pins, want one per site", n)
	}
	serials := panelSerials(5, 4)
	if _, err := p.sim.Load(serials); err != nil {
		t.Fatal(err)
	}
	want := make([]float64, 4)
	for s := range want {
		want[s] = p.sim.TripInPanelPF(s)
	}
	p.sim.Unload()
	runs, tr, err := p.test(t, context.Background(), serials, allSites(4))
	if err != nil {
		t.Fatal(err)
	}
	for s, r := range runs {
		if r.Verdict != sequences.Pass {
			t.Fatalf("site %d: %s %s", s+1, r.Verdict, r.FailCode)
		}
		// Own ladders: each neighbour's ladder stands elsewhere, so the
		// coupling differs a little from the ganged truth (hundredths of
		// a pF); the calibration errors dominate.
		if d := tr.Trips[s].TripPF - want[s]; math.Abs(d) > 0.6 {
			t.Errorf("site %d: trip %.3f pF, truth in panel %.3f pF", s+1, tr.Trips[s].TripPF, want[s])
		}
	}
}

// clockPinFault is a panel station whose clock test point of one site
// fails as a pin (not a dead oscillator): that site's station fault.
type clockPinFault struct {
	sequences.PanelStation
	site int
}

func (c clockPinFault) MeasureClocks(sites uint32, periods int, timeout time.Duration) ([]float64, []error, error) {
	hz, errs, err := c.PanelStation.MeasureClocks(sites, periods, timeout)
	if err == nil {
		errs[c.site] = &fixture.PinError{Role: "site 3 clock", Pin: "SIM_S03_CLOCK", Err: errors.New("line request failed")}
		hz[c.site] = 0
	}
	return hz, errs, err
}

func TestPanelSiteStationFaultStaysThatSites(t *testing.T) {
	p := newSimPanel(t, sim.DefaultPanelModel(4), qm205Units(), 8)
	serials := panelSerials(13, 4)
	if _, err := p.sim.Load(serials); err != nil {
		t.Fatal(err)
	}
	defer p.sim.Unload()
	runs := make([]*sequences.Run, 4)
	for s := range runs {
		runs[s] = &sequences.Run{Serial: serials[s]}
	}
	tr, err := p.plan.Execute(context.Background(), clockPinFault{PanelStation: p.fx, site: 2}, p.sim.Clock(), runs, allSites(4))
	if err != nil {
		t.Fatalf("a site's pin fault stopped the panel: %v", err)
	}
	for s, r := range runs {
		want := sequences.Pass
		if s == 2 {
			want = sequences.StationFault
		}
		if r.Verdict != want {
			t.Fatalf("site %d: %s %s, want %s", s+1, r.Verdict, r.FailCode, want)
		}
	}
	if runs[2].FailCode != sequences.CodePinError || tr.Errs[2] == nil || !strings.Contains(tr.Errs[2].Error(), "SIM_S03_CLOCK") {
		t.Fatalf("site 3: %s, error %v: want pin_error naming the pin", runs[2].FailCode, tr.Errs[2])
	}
}
