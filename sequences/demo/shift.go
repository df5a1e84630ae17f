package demo

import (
	"context"
	"errors"
	"fmt"
	"io"
	"maps"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"syscall"
	"time"

	"padline/fixture/sim"
	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/timing"
	"padline/store"
)

// Options are what a demo shift simulates.
type Options struct {
	// Variant and Station are each a built-in name or a .yaml file; the
	// station must have driver: sim.
	Variant, Station string
	// Units is the shift's length; Seed seeds the simulated units and
	// fixture (same seed, same shift).
	Units int
	Seed  uint64
	// DB is the shift log to write; empty = a temporary one, removed.
	DB string
	// Search is the trip search ("bracket" or "staircase"); Compare runs
	// the same units with both.
	Search  string
	Compare bool
	// IntoRealLog allows DB to hold runs of a real (gpio) station.
	IntoRealLog bool
	// Drift puts a step or ramp into the shift.
	Drift Drift
	// Panel tests panels of this many sites (RunPanel); 0: single units.
	// OwnLadders gives every site its own ladder instead of a ganged one.
	Panel      int
	OwnLadders bool
	// NoOffset skips the shift-start reference check, so trip points are
	// not corrected by the fixture offset (the earlier plan's way).
	NoOffset bool
	// Software is the version string every run records.
	Software string
	// Progress, when not nil, is asked for a bar per pass.
	Progress func(label string, units int) Progress
	// EachUnit, when not nil, is given every unit of the first pass as it
	// is tested (the demo keeps no unit after its statistics have it); an
	// error stops the shift.
	EachUnit func(Unit) error
}

// Progress is told about each tested unit of a pass, then that it is done.
type Progress interface {
	Step()
	Done()
}

type noProgress struct{}

func (noProgress) Step() {}
func (noProgress) Done() {}

// Unit is one simulated unit's result beside its ground truth.
type Unit struct {
	Serial     string   `json:"serial"`
	Verdict    string   `json:"verdict"`
	FailCode   string   `json:"fail_code"`
	TripPF     *float64 `json:"trip_pf"`
	TripSEPF   *float64 `json:"trip_se_pf"`
	TrueTripPF *float64 `json:"true_trip_pf"`
	Defects    []string `json:"defects"`
	Probes     int      `json:"probes"`
	RelayOps   uint64   `json:"relay_ops"`
	FixtureMS  float64  `json:"fixture_ms"`

	spreadPF     float64
	trueSpreadPF float64
	phases       map[string]time.Duration
	samples      int           // the trip search's latch samples
	floorSamples float64       // the search floor at this unit's trip point and transition
	floorTime    time.Duration // floorSamples unit clock periods
	finished     time.Time     // the run's finish time, as logged
}

// Result is a finished demo shift: what was simulated, each pass's units
// beside their ground truth, and the drift watch.
type Result struct {
	Variant *session.Variant
	Station *session.Station
	Limits  timing.Report
	// DBPath is the shift log; Kept is false when it was a temporary one
	// (removed by now).
	DBPath string
	Kept   bool
	// Strategies names each pass, Stats its statistics (units are not
	// kept: a shift of any length runs in the same memory; Options.EachUnit
	// sees each one), CPU and Wall its computer time.
	Strategies []string
	Stats      []Stats
	CPU, Wall  []time.Duration
	// TrueStrayPF is the simulated fixture's true stray capacitance.
	TrueStrayPF float64
	// Check is the first pass's shift-start reference check, whose offset
	// corrected every trip point (nil with NoOffset or no reference units).
	Check *session.CheckReport
	// Drift is the drift watch over the first pass; nil without drift.
	Drift *DriftWatch

	series *watchSeries // the first pass's passed units, with drift only
}

// Run simulates the shift: every serial through the real plan, search and
// shift log on a fresh simulated line per pass.
func Run(ctx context.Context, o Options) (*Result, error) {
	if o.Units < 1 {
		return nil, errors.New("demo: --units must be at least 1")
	}
	if err := o.Drift.Check(o.Units); err != nil {
		return nil, err
	}
	v, st, err := session.Load(o.Variant, o.Station)
	if err != nil {
		return nil, err
	}
	if st.Driver != session.DriverSim {
		return nil, fmt.Errorf("demo: station %s has driver %q; the demo needs driver: sim", st.Source.Name, st.Driver)
	}
	st.Sim.Seed = o.Seed
	u, _ := session.StatedUncertainty(st)
	res := &Result{Variant: v, Station: st, Kept: o.DB != "", Strategies: []string{o.Search}}
	if res.Limits, err = v.StationLimits(u); err != nil {
		return nil, err
	}
	if o.Compare {
		res.Strategies = []string{"bracket", session.SearchLaplace, "staircase"}
	}
	var remove func()
	if res.DBPath, remove, err = shiftLogPath(o.DB); err != nil {
		return nil, err
	}
	defer remove()
	if err := res.passes(ctx, o); err != nil {
		return nil, err
	}
	if res.Drift, err = o.Drift.watch(res.series, v, st); err != nil {
		return nil, err
	}
	line, err := session.NewSimLine(st, v)
	if err != nil {
		return nil, err
	}
	res.TrueStrayPF = line.TrueStrayPF()
	return res, nil
}

// shiftLogPath is the demo's shift log: db when given, else shift.db in a
// new temporary folder that remove deletes (remove does nothing for db).
func shiftLogPath(db string) (path string, remove func(), err error) {
	if db != "" {
		return db, func() {}, nil
	}
	dir, err := os.MkdirTemp("", "padline-demo-")
	if err != nil {
		return "", nil, fmt.Errorf("demo: %w", err)
	}
	return filepath.Join(dir, "shift.db"), func() { os.RemoveAll(dir) }, nil
}

// passes runs the shift once per strategy; only the first pass is logged.
func (res *Result) passes(ctx context.Context, o Options) error {
	db, err := store.Open(res.DBPath)
	if err != nil {
		return err
	}
	defer db.Close()
	if err := session.CheckSimulatedInto(ctx, db, res.DBPath, o.IntoRealLog); err != nil {
		return fmt.Errorf("demo: %w", err)
	}
	hash, err := db.PutVariant(ctx, res.Variant.Name, res.Variant.Source.Raw)
	if err != nil {
		return err
	}
	if err := checkSerials(res.Variant, o.Units); err != nil {
		return err
	}
	if o.Drift.active() {
		res.series = &watchSeries{}
	}
	for i, strategy := range res.Strategies {
		var rec sequences.Recorder = db
		each, series := o.EachUnit, res.series
		if i > 0 {
			rec = discard{} // the comparison pass re-tests the same serials; log the shift once
			each, series = nil, nil
		}
		var prog Progress = noProgress{}
		if o.Progress != nil {
			prog = o.Progress("testing ("+strategy+")", o.Units)
		}
		var acc passStats
		t0, c0 := time.Now(), cpuTime()
		err := shift(ctx, res, hash, strategy, rec, prog, o, func(n int, u Unit) error {
			acc.add(u)
			series.add(n, u)
			if each != nil {
				return each(u)
			}
			return nil
		})
		if err != nil {
			return err
		}
		cpu, wall := cpuTime()-c0, time.Since(t0)
		res.CPU = append(res.CPU, cpu)
		res.Wall = append(res.Wall, wall)
		res.Stats = append(res.Stats, acc.stats(strategy, cpu, wall))
	}
	return nil
}

// discard records nothing (the comparison pass).
type discard struct{}

var _ sequences.Recorder = discard{}

func (discard) Record(context.Context, *sequences.Run) (int64, error) { return 0, nil }

// checkSerials checks the shift's serials (see session.DemoSerial, which
// makes them again as they are tested) against the variant's own pattern.
func checkSerials(v *session.Variant, n int) error {
	for i := 1; i <= n; i++ {
		if s := session.DemoSerial(v, i); !v.Serial.MatchString(s) {
			return fmt.Errorf("demo: serial %s does not match variant %s's serial_pattern %q; the demo numbers serials NAME-000001",
				s, v.Name, v.SerialPattern)
		}
	}
	return nil
}

// shift tests o.Units serials on a fresh simulated line and gives each
// unit, numbered from 1, to each as it is tested.
func shift(ctx context.Context, res *Result, hash, strategy string, rec sequences.Recorder, prog Progress, o Options, each func(n int, u Unit) error) error {
	v, st, dr := res.Variant, res.Station, o.Drift
	u, uFrom := session.StatedUncertainty(st)
	r, err := session.NewRig(v, st, session.RigOptions{UncertaintyPF: u, UncertaintyFrom: uFrom, Strategy: strategy})
	if err != nil {
		return err
	}
	defer r.Halt()
	if !o.NoOffset && len(st.Trust.References) > 0 {
		chk, err := shiftStartCheck(ctx, r, o.Seed)
		if err != nil {
			return err
		}
		if chk.OK {
			r.Plan.SetOffset(chk.Offset)
		}
		if res.Check == nil {
			res.Check = &chk
		}
	}
	line, fx, lv := r.Line, r.Fixture, r.Plan.Levels()
	// The shift's units are stamped on a plant timetable, not at the speed
	// the simulator runs: a takt of 5–7 s with breaks, starting 12:30 so a
	// long run crosses from the early into the late shift, on days that
	// end before today.
	shift := sim.NewShiftClock(demoShiftStart(time.Now(), o.Units), demoTakt, demoJitter, sim.DemoPauses, 1)
	var stamp time.Time
	sess := &sequences.Session{
		Plan: r.Plan, Station: fx, Clock: r.Clock, Recorder: rec, WallClock: func() time.Time { return stamp },
		Template: sequences.Run{
			Variant: v.Name, ConfigHash: hash, Station: st.Name, Fixture: st.Fixture,
			Operator: "demo", Lot: "DEMO-" + time.Now().UTC().Format("20060102"), Software: o.Software,
			Driver: string(session.DriverSim),
		},
	}
	lvPF := make([]float64, len(lv))
	for i, l := range lv {
		lvPF[i] = l.PF
	}
	base := session.UnitModel(v, st.Sim)
	for i := range o.Units {
		serial := session.DemoSerial(v, i+1)
		if err := dr.apply(line, base, i+1); err != nil {
			prog.Done()
			return err
		}
		stamp = shift.Next()
		unit := line.Load(serial)
		ops0 := sum(fx.RelayOps())
		oc, err := sess.Test(ctx, serial)
		line.Unload()
		if oc == nil {
			prog.Done()
			return err
		}
		truth := unit.Truth()
		du := Unit{
			Serial: serial, Verdict: string(oc.Run.Verdict), FailCode: string(oc.Run.FailCode),
			Defects: truth.Defects, Probes: oc.Trial.Probes, RelayOps: sum(fx.RelayOps()) - ops0,
			FixtureMS: ms(oc.Run.Finished.Sub(oc.Run.Started)), phases: oc.Trial.Phases, finished: oc.Run.Finished,
			trueSpreadPF: truth.TransitionPF,
		}
		if du.Defects == nil {
			du.Defects = []string{}
		}
		if truth.Trip == sim.TripsAt {
			du.TrueTripPF = ptr(truth.TripPF)
		}
		if tr := oc.Trial.Trip; tr != nil && tr.Found && !tr.Below {
			du.TripPF, du.TripSEPF, du.spreadPF = ptr(tr.TripPF), ptr(tr.SEPF), tr.SpreadPF
		}
		if tr := oc.Trial.Trip; tr != nil {
			du.samples = tr.Samples
		}
		if truth.Trip == sim.TripsAt && truth.ClockHz > 0 && len(truth.Defects) == 0 {
			// The floor in the station's basis: the level set as entered,
			// the unit's trip and transition as the simulator knows them.
			fl, err := sequences.TripSearchFloorAt(lvPF, truth.TripPF, truth.TransitionPF/(2*1.2815515655446004), r.PlanConfig.Search.SETargetPF)
			if err == nil {
				du.floorSamples = fl
				du.floorTime = time.Duration(fl * 1e9 / truth.ClockHz)
			}
		}
		if err := each(i+1, du); err != nil {
			prog.Done()
			return err
		}
		prog.Step()
	}
	prog.Done()
	return nil
}

// DemoLabUPF is the standard uncertainty of a simulated reference unit's
// lab trip point when the station file states none (demo data).
const DemoLabUPF = 0.02

// shiftStartCheck runs the reference check on the simulated line, as a
// shift starts, with each reference unit's lab trip point what a lab
// would measure on this line's unit: the simulator's true trip plus a lab
// error of σ lab_u_pf (DemoLabUPF when the file states none). Each seed
// draws its own reference units, so the station file's values belong to
// seed 1 only: every line registers its reference units as its own fixture
// finds them (what the mean of many checks tends to: the true trip less
// the fixture's true offset at the nearest level).
func shiftStartCheck(ctx context.Context, r *session.Rig, seed uint64) (session.CheckReport, error) {
	rng := rand.New(rand.NewPCG(seed, 0x1ab))
	refs := slices.Clone(r.Station.Trust.References)
	for i := range refs {
		ref := &refs[i]
		// A line keeps only a reference unit that is good apart from what
		// it was built with: the simulator draws every serial with the
		// line's defect rates, so a drawn unit with another defect is
		// passed over for the next serial.
		base := ref.Serial
		var tr sim.Truth
		for n := 2; ; n++ {
			if err := r.Line.ForceDefects(ref.Serial, ref.SimDefects...); err != nil {
				return session.CheckReport{}, err
			}
			if tr = r.Line.Draw(ref.Serial).Truth(); slices.Equal(tr.Defects, ref.SimDefects) || n > 100 {
				break
			}
			ref.Serial = fmt.Sprintf("%s-%d", base, n)
		}
		if tr.Trip != sim.TripsAt {
			continue
		}
		if ref.LabUPF == 0 {
			ref.LabUPF = DemoLabUPF
		}
		ref.LabTripPF = tr.TripPF + ref.LabUPF*rng.NormFloat64()
		best := math.Inf(1)
		for _, l := range r.Plan.Levels() {
			truePF := r.Line.TrueExternalPF(l.Pattern)
			if d := math.Abs(truePF - tr.TripPF); d < best {
				best, ref.TripPF = d, tr.TripPF-(truePF-l.PF)
			}
		}
	}
	return session.MeasureReferences(ctx, r, refs, nil)
}

func ptr(f float64) *float64 { return &f }

func sum(xs []uint64) uint64 {
	var s uint64
	for _, x := range xs {
		s += x
	}
	return s
}

func ms(d time.Duration) float64 { return float64(d) / float64(time.Millisecond) }

// cpuTime is the process's user + system CPU time so far.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// Stats summarises one pass over the shift.
type Stats struct {
	Strategy          string                    `json:"strategy"`
	Units             int                       `json:"units"`
	Pass              int                       `json:"pass"`
	Fail              int                       `json:"fail"`
	StationFault      int                       `json:"station_fault"`
	YieldPct          float64                   `json:"yield_pct"`
	FailCodes         map[string]int            `json:"fail_codes"`
	DefectOutcomes    map[string]map[string]int `json:"defect_outcomes"`
	GoodUnits         int                       `json:"good_units"`
	GoodFalseFails    int                       `json:"good_false_fails"`
	TripRMSErrPF      float64                   `json:"trip_rms_error_pf"`
	TripMaxErrPF      float64                   `json:"trip_max_error_pf"`
	TripBiasPF        float64                   `json:"trip_bias_pf"`
	TripRMSLessBiasPF float64                   `json:"trip_rms_error_less_bias_pf"`
	SpreadMedianPF    float64                   `json:"spread_median_pf"`
	TrueSpreadMedian  float64                   `json:"true_spread_median_pf"`
	ProbesMean        float64                   `json:"probes_mean"`
	RelayOpsMean      float64                   `json:"relay_ops_mean"`
	FixtureMSMean     float64                   `json:"fixture_ms_mean"`
	PhaseMSMean       map[string]float64        `json:"phase_ms_mean"`
	SearchSamples     float64                   `json:"search_samples_mean"`
	FloorSamples      float64                   `json:"search_floor_samples_mean"`
	FloorMS           float64                   `json:"search_floor_ms_mean"`
	SearchMS          float64                   `json:"search_ms_mean"`
	CPUPerUnitMS      float64                   `json:"cpu_ms_per_unit"`
	WallS             float64                   `json:"wall_s"`
}

// fixedPhases are the plan's steps outside the trip search.
var fixedPhases = []string{string(sequences.StepPowerUp), string(sequences.StepClock), string(sequences.StepIdle), string(sequences.StepRelease), string(sequences.StepPowerDown)}

// passStats accumulates one pass's statistics unit by unit, so a shift of
// any length keeps no per-unit record: counts and sums, and the medians on
// a 0.001 pF grid (see medianGrid).
type passStats struct {
	s             Stats
	n, nf, ne     int     // units, good units with a floor, good units with a trip error
	sq, bias      float64 // sums of the trip errors' squares and of the errors
	spread, truth medianGrid
}

func (p *passStats) add(u Unit) {
	s := &p.s
	if s.FailCodes == nil {
		s.FailCodes, s.DefectOutcomes, s.PhaseMSMean = map[string]int{}, map[string]map[string]int{}, map[string]float64{}
	}
	p.n++
	switch u.Verdict {
	case "pass":
		s.Pass++
	case "fail":
		s.Fail++
	default:
		s.StationFault++
	}
	if u.FailCode != "" {
		s.FailCodes[u.FailCode]++
	}
	outcome := u.FailCode
	if outcome == "" {
		outcome = "pass"
	}
	for _, d := range u.Defects {
		if s.DefectOutcomes[d] == nil {
			s.DefectOutcomes[d] = map[string]int{}
		}
		s.DefectOutcomes[d][outcome]++
	}
	s.ProbesMean += float64(u.Probes)
	s.RelayOpsMean += float64(u.RelayOps)
	s.FixtureMSMean += u.FixtureMS
	for ph, d := range u.phases {
		s.PhaseMSMean[ph] += ms(d)
	}
	if len(u.Defects) > 0 {
		return
	}
	if u.floorSamples > 0 {
		p.nf++
		s.SearchSamples += float64(u.samples)
		s.FloorSamples += u.floorSamples
		s.FloorMS += ms(u.floorTime)
		for _, ph := range []string{sequences.PhaseBracket, sequences.PhaseClimb, sequences.PhaseRefine, sequences.PhaseGuard} {
			s.SearchMS += ms(u.phases[ph])
		}
	}
	s.GoodUnits++
	if u.Verdict != "pass" {
		s.GoodFalseFails++
	}
	if u.TripPF != nil && u.TrueTripPF != nil {
		e := *u.TripPF - *u.TrueTripPF
		p.ne++
		p.sq += e * e
		p.bias += e
		s.TripMaxErrPF = math.Max(s.TripMaxErrPF, math.Abs(e))
		p.spread.add(u.spreadPF)
		p.truth.add(u.trueSpreadPF)
	}
}

// stats finishes the pass's statistics.
func (p *passStats) stats(strategy string, cpu, wall time.Duration) Stats {
	s := p.s
	s.Strategy, s.Units = strategy, p.n
	if s.FailCodes == nil {
		s.FailCodes, s.DefectOutcomes, s.PhaseMSMean = map[string]int{}, map[string]map[string]int{}, map[string]float64{}
	}
	n := float64(p.n)
	s.YieldPct = 100 * float64(s.Pass) / n
	s.ProbesMean /= n
	s.RelayOpsMean /= n
	s.FixtureMSMean /= n
	if nf := float64(p.nf); nf > 0 {
		s.SearchSamples /= nf
		s.FloorSamples /= nf
		s.FloorMS /= nf
		s.SearchMS /= nf
	}
	for ph := range s.PhaseMSMean {
		s.PhaseMSMean[ph] /= n
	}
	if p.ne > 0 {
		ne := float64(p.ne)
		s.TripRMSErrPF = math.Sqrt(p.sq / ne)
		s.TripBiasPF = p.bias / ne
		s.TripRMSLessBiasPF = math.Sqrt(math.Max(0, p.sq/ne-s.TripBiasPF*s.TripBiasPF))
		s.SpreadMedianPF = p.spread.median()
		s.TrueSpreadMedian = p.truth.median()
	}
	s.CPUPerUnitMS = ms(cpu) / n
	s.WallS = wall.Seconds()
	return s
}

// medianGrid finds the median of values rounded to a 0.001 pF grid: a
// count per grid point, so its memory grows with the values' range, not
// with their number. The median is within 0.0005 pF of the exact one; the
// summary prints it to 0.01 pF.
type medianGrid struct {
	n      int
	counts map[int64]int
}

const medianStepPF = 0.001

func (g *medianGrid) add(x float64) {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return
	}
	if g.counts == nil {
		g.counts = map[int64]int{}
	}
	g.counts[int64(math.Round(x/medianStepPF))]++
	g.n++
}

// median is the middle value (the mean of the two middle values for an
// even count); NaN without values.
func (g *medianGrid) median() float64 {
	if g.n == 0 {
		return math.NaN()
	}
	keys := slices.Sorted(maps.Keys(g.counts))
	// kth returns the k-th smallest value, 0-based.
	kth := func(k int) float64 {
		for _, key := range keys {
			if k < g.counts[key] {
				return float64(key) * medianStepPF
			}
			k -= g.counts[key]
		}
		return math.NaN()
	}
	if g.n%2 == 1 {
		return kth(g.n / 2)
	}
	return (kth(g.n/2-1) + kth(g.n/2)) / 2
}

type Summary struct {
	Summary      bool       `json:"summary"`
	Variant      string     `json:"variant"`
	Station      string     `json:"station"`
	TestLimitsPF [2]float64 `json:"test_limits_pf"`
	NoiseMVAt5V  float64    `json:"noise_mv_at_5v"`
	JitterNs     float64    `json:"jitter_ns"`
	RungErrSDPF  float64    `json:"rung_err_sd_pf"`
	Passes       []Stats    `json:"passes"`
	// FixtureOffsetPF is the shift-start check's fixture offset at the
	// nominal trip and FixtureOffsetUPF its standard uncertainty (absent:
	// no offset corrected the trip points).
	FixtureOffsetPF  *float64 `json:"fixture_offset_pf,omitempty"`
	FixtureOffsetUPF *float64 `json:"fixture_offset_u_pf,omitempty"`
	// Drift is the drift watch over the shift; nil without drift flags.
	Drift *DriftWatch `json:"drift,omitempty"`
}

// Summary is the shift's summary object (the demo's last JSON line).
func (res *Result) Summary() Summary {
	v, st, rep := res.Variant, res.Station, res.Limits
	s := Summary{Summary: true, Variant: v.Name, Station: st.Name,
		TestLimitsPF: [2]float64{rep.TestLimits.Low, rep.TestLimits.High},
		NoiseMVAt5V:  st.Sim.NoiseMVAt5V, JitterNs: st.Sim.JitterNs, RungErrSDPF: st.Sim.RungErrSDPF, Drift: res.Drift}
	if c := res.Check; c != nil && c.OK {
		s.FixtureOffsetPF, s.FixtureOffsetUPF = c.OffsetPF, c.OffsetU
	}
	s.Passes = res.Stats
	return s
}

// WriteText prints the shift's summary for people.
func WriteText(w io.Writer, res *Result) {
	v, st, rep := res.Variant, res.Station, res.Limits
	ss := res.Summary().Passes
	s := ss[0]
	fmt.Fprintf(w, "simulated shift  %s on %s/%s, %d units\n", v.Name, st.Name, st.Fixture, s.Units)
	fmt.Fprintf(w, "simulator        noise %.1f mV at 5 V, sample jitter %.1f ns, rung calibration σ %.2f pF (realism floor: DEVELOPERS.md, Simulator realism floor)\n",
		st.Sim.NoiseMVAt5V, st.Sim.JitterNs, st.Sim.RungErrSDPF)
	fmt.Fprintf(w, "test limits      trip %.2f … %.2f pF, clock %.0f … %.0f Hz\n\n",
		rep.TestLimits.Low, rep.TestLimits.High, rep.Clock.CornerLow, rep.Clock.CornerHigh)

	fmt.Fprintf(w, "yield            %.1f %%  (%d pass, %d fail, %d station-fault)\n", s.YieldPct, s.Pass, s.Fail, s.StationFault)
	fmt.Fprintf(w, "good units       %d, false fails %d\n", s.GoodUnits, s.GoodFalseFails)
	writeOutcomes(w, s)
	fmt.Fprintf(w, "\ntrip accuracy on good units against the simulator's ground truth\n")
	fmt.Fprintf(w, "  RMS error %.3f pF   max %.3f pF   bias %+.3f pF\n", s.TripRMSErrPF, s.TripMaxErrPF, s.TripBiasPF)
	fmt.Fprintf(w, "  RMS about the bias %.3f pF; the bias is what remains of this fixture's calibration error where units\n", s.TripRMSLessBiasPF)
	fmt.Fprintf(w, "  trip: its stray (true %.2f pF, entered %.2f pF) plus the errors of the rungs closed there\n", res.TrueStrayPF, st.Ladder.StrayPF)
	if c := res.Check; c != nil && c.OK && c.OffsetPF != nil {
		fmt.Fprintf(w, "  corrected by the fixture offset of the shift-start reference check: %+.3f ± %.3f pF at the nominal trip,\n", *c.OffsetPF, *c.OffsetU)
		fmt.Fprintf(w, "  from %d reference units with lab trip points (over 10 simulated fixtures the pooled trip RMS error is\n", len(c.Offset.Refs))
		fmt.Fprintf(w, "  printed by: go test -run '^$' -bench SearchTargets -benchtime 1x ./sequences/demo)\n")
	} else {
		fmt.Fprintf(w, "  not corrected: no passing reference check with lab trip points measured the fixture offset\n")
	}
	fmt.Fprintf(w, "  transition (10–90 %%) median: fitted %.2f pF, simulator's noise model %.2f pF\n", s.SpreadMedianPF, s.TrueSpreadMedian)
	writeTiming(w, ss, v.Plan.Search.SETargetPF)
	fmt.Fprintf(w, "\ncomputer time    %.3f ms CPU per unit, %.2f s wall for %d units\n", s.CPUPerUnitMS, s.WallS, s.Units)
	if res.Kept {
		fmt.Fprintf(w, "shift log        %s (see 'padline history --db %s --variant %s')\n", res.DBPath, res.DBPath, v.Name)
	}
	writeDrift(w, res.Drift)
}

// writeOutcomes prints the count per fail code and what each injected
// defect ended as.
func writeOutcomes(w io.Writer, s Stats) {
	codes := slices.Sorted(maps.Keys(s.FailCodes))
	if len(codes) > 0 {
		fmt.Fprintln(w, "\nfail code        units")
		for _, c := range codes {
			fmt.Fprintf(w, "  %-15s %5d\n", c, s.FailCodes[c])
		}
	}
	defects := slices.Sorted(maps.Keys(s.DefectOutcomes))
	if len(defects) > 0 {
		fmt.Fprintln(w, "\ninjected defect  ended as")
		for _, d := range defects {
			var parts []string
			for _, oc := range slices.Sorted(maps.Keys(s.DefectOutcomes[d])) {
				parts = append(parts, fmt.Sprintf("%s ×%d", oc, s.DefectOutcomes[d][oc]))
			}
			fmt.Fprintf(w, "  %-15s %s\n", d, strings.Join(parts, ", "))
		}
	}
}

// writeTiming prints fixture time per unit, one column per pass.
func writeTiming(w io.Writer, ss []Stats, seTarget float64) {
	s := ss[0]
	fmt.Fprintf(w, "\nfixture time per unit (mean, ms)")
	for _, x := range ss {
		fmt.Fprintf(w, "  %12s", x.Strategy)
	}
	fmt.Fprintln(w)
	row := func(name string, f func(Stats) float64) {
		fmt.Fprintf(w, "  %-30s", name)
		for _, x := range ss {
			fmt.Fprintf(w, "  %12.1f", f(x))
		}
		fmt.Fprintln(w)
	}
	row("fixed steps", func(x Stats) float64 {
		var t float64
		for _, p := range fixedPhases {
			t += x.PhaseMSMean[p]
		}
		return t
	})
	row("bracketing (bisection / climb)", func(x Stats) float64 {
		return x.PhaseMSMean[sequences.PhaseBracket] + x.PhaseMSMean[sequences.PhaseClimb]
	})
	row("refinement (incl. guard levels)", func(x Stats) float64 {
		return x.PhaseMSMean[sequences.PhaseRefine] + x.PhaseMSMean[sequences.PhaseGuard]
	})
	row("whole unit", func(x Stats) float64 { return x.FixtureMSMean })
	row("probes per unit", func(x Stats) float64 { return x.ProbesMean })
	row("relay operations per unit", func(x Stats) float64 { return x.RelayOpsMean })
	row("trip RMS error, pF ×1000", func(x Stats) float64 { return 1000 * x.TripRMSErrPF })
	row("search samples, good units", func(x Stats) float64 { return x.SearchSamples })
	fmt.Fprintf(w, "  search floor on good units: %.1f samples = %.1f ms at each unit's clock (a bisection of the whole ladder from\n", s.FloorSamples, s.FloorMS)
	fmt.Fprintf(w, "  no prior, then the samples at the nearest level that reach SE %.2f pF with the transition known; relays settle\n", seTarget)
	fmt.Fprintf(w, "  inside a period here); the %s search took %.1f samples, %.1f ms (%.2f× the floor)\n", s.Strategy, s.SearchSamples, s.SearchMS, s.SearchSamples/s.FloorSamples)
	for _, c := range ss[1:] {
		if c.Strategy == "staircase" {
			b := ss[0]
			fmt.Fprintf(w, "  bracketing is %.1f× faster than the climb; whole unit %.1f× faster (%.1f ms saved)\n",
				c.PhaseMSMean[sequences.PhaseClimb]/b.PhaseMSMean[sequences.PhaseBracket], c.FixtureMSMean/b.FixtureMSMean, c.FixtureMSMean-b.FixtureMSMean)
		}
	}
}

// The demo shift's timetable (invented demo data): one unit every 5 s plus
// up to 2 s of handling.
const (
	demoTakt   = 5 * time.Second
	demoJitter = 2 * time.Second
)

// demoShiftStart is 12:30 local on a day early enough that n units (about
// 6 s each, 14 working hours a day under sim.DemoPauses) finish before
// the day now falls on.
func demoShiftStart(now time.Time, n int) time.Time {
	days := 1 + int(time.Duration(n)*(demoTakt+demoJitter/2)/(14*time.Hour))
	d := time.Date(now.Year(), now.Month(), now.Day(), 12, 30, 0, 0, now.Location())
	return d.AddDate(0, 0, -days)
}
