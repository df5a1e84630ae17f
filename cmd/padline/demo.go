package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"maps"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"syscall"
	"time"

	"github.com/spf13/cobra"

	"padline/fixture/sim"
	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/timing"
	"padline/store"
)

type demoOptions struct {
	variant, station string
	units            int
	seed             uint64
	db               string
	search           string
	compare          bool
	asJSON           bool
	intoRealLog      bool
	drift            demoDrift
	panel            int  // sites per panel; 0: single units
	ownLadders       bool // panel demo: own ladders instead of a ganged one
}

// demoCmd builds `padline demo`.
func (a *app) demoCmd() *cobra.Command {
	var o demoOptions
	cmd := &cobra.Command{
		Use:   "demo",
		Short: "Run a simulated shift on the built-in simulated line",
		Long: `demo runs a whole shift of units through the real plan, search and shift log
on a simulated station: no hardware and no files needed.

The built-in demo variant (QM-205, a 5 V touch-lamp dimmer of the fictional
maker Quillmoor Padworks) is tested on the built-in simulated station
(FX-07: 8 reed-relay rungs, 0.5 … 64 pF). Simulated units carry the variant's
component tolerances and, at realistic rates, every kind of unit defect; the
simulator's noise, relay timing and rung calibration error sit at the realism
floor of a real bench, never below it.

The summary gives the yield, the count per fail code, which defects ended in
which fail code, the trip accuracy against the simulator's ground truth on
good units, and fixture time per unit split into fixed steps, bracketing and
refinement, and the search's floor: the fewest samples any search could
expect with the unit's transition known. --compare-search runs the same
units again with the earlier plan (laplace: separate clock, idle and release
checks, guard levels on every unit) and with the plain staircase (one sample
per ladder value from the bottom up) and shows them side by side.

--drift-at N --drift-pf D puts a step into the shift: from unit N on, the
pad laminate changes and the pad capacitance mean drops by D pF, so units
trip D pF higher. --ramp-pf-per-1000 R adds a slow ramp (R pF per 1000
units) from unit N, or from unit 1 with --drift-at 0. Afterwards the default
drift watch (individuals 3σ + CUSUM, limits from the first min(50, N−1)
units) runs over the good units' trip points and the summary gives the
first alarm at or after unit N: chart, rule, unit and lag.

--panel N tests panels of N boards (sites) in one fixture closure on the
built-in simulated panel station (demo-panel: one ganged reed-relay ladder,
each site with its own calibrated capacitors and stray, adjacent pads
coupled through 0.5 pF), one run per site in the shift log. The summary
gives the fixture time per panel against one unit tested alone, the trip
accuracy per site against the simulator's truth, and which injected defect
ended in which fail code on every site. --own-ladders gives every site its
own ladder instead: the sites then search concurrently.`,
		Example: `  padline demo
  padline demo --units 2000 --compare-search
  padline demo --units 100 --json > shift.jsonl
  padline demo --db shift.db && padline history --db shift.db --variant QM-205
  padline demo --units 300 --drift-at 150 --drift-pf 4
  padline demo --panel 8 --units 800`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return a.demo(cmd.Context(), o)
		},
	}
	f := cmd.Flags()
	f.StringVar(&o.variant, "variant", "QM-205", "variant to simulate: a built-in name or a .yaml file")
	f.StringVar(&o.station, "station", "demo-sim", "simulated station: a built-in name or a .yaml file with driver: sim")
	f.IntVar(&o.units, "units", 500, "number of units in the shift")
	f.Uint64Var(&o.seed, "seed", 1, "seed of the simulated units and fixture (same seed, same shift)")
	f.StringVar(&o.db, "db", "", "shift log to write (default: a temporary file, removed afterwards)")
	f.StringVar(&o.search, "search", "bracket", "trip search: bracket, staircase or laplace (the earlier plan: separate clock, idle and release checks)")
	f.BoolVar(&o.compare, "compare-search", false, "run the same units with the staircase too and compare")
	f.BoolVar(&o.asJSON, "json", false, "print one JSON object per unit, then a summary object")
	f.BoolVar(&o.intoRealLog, "into-real-log", false, "allow --db to name a shift log that holds runs of a real (gpio) station")
	f.IntVar(&o.drift.at, "drift-at", 0, "unit from which the pad capacitance drops (trip points step up); 0 = no step")
	f.Float64Var(&o.drift.stepPF, "drift-pf", 0, "size of the step at --drift-at, pF of trip point")
	f.IntVar(&o.panel, "panel", 0, "test panels of this many sites (2–32) on the simulated panel station instead of single units")
	f.BoolVar(&o.ownLadders, "own-ladders", false, "with --panel: every site has its own ladder (default: one ganged ladder)")
	f.Float64Var(&o.drift.rampPF, "ramp-pf-per-1000", 0, "slow ramp of the trip point, pF per 1000 units, from --drift-at (or unit 1)")
	return cmd
}

// demoUnit is one simulated unit's result beside its ground truth.
type demoUnit struct {
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

func (a *app) demo(ctx context.Context, o demoOptions) error {
	if o.units < 1 {
		return errors.New("demo: --units must be at least 1")
	}
	if o.panel > 0 {
		if o.compare || o.drift.at != 0 || o.drift.rampPF != 0 || o.station != "demo-sim" {
			return errors.New("demo: --panel runs on the built-in demo panel station; it takes --units, --seed, --db, --search, --own-ladders and --json")
		}
		return a.demoPanel(ctx, o)
	}
	if err := o.drift.check(o.units); err != nil {
		return err
	}
	v, err := session.LoadVariant(o.variant)
	if err != nil {
		return err
	}
	st, err := session.LoadStation(o.station)
	if err != nil {
		return err
	}
	if st.Driver != session.DriverSim {
		return fmt.Errorf("demo: station %s has driver %q; the demo needs driver: sim", st.Source.Name, st.Driver)
	}
	st.Sim.Seed = o.seed
	u, _ := session.StatedUncertainty(st)
	rep, err := v.Limits(timing.Options{Draws: timing.DefaultDraws, Seed: 1, UncertaintyPF: u})
	if err != nil {
		return err
	}
	dbPath := o.db
	if dbPath == "" {
		dir, err := os.MkdirTemp("", "padline-demo-")
		if err != nil {
			return fmt.Errorf("demo: %w", err)
		}
		defer os.RemoveAll(dir)
		dbPath = filepath.Join(dir, "shift.db")
	}
	db, err := store.Open(dbPath)
	if err != nil {
		return err
	}
	defer db.Close()
	if err := session.CheckSimulatedInto(ctx, db, dbPath, o.intoRealLog); err != nil {
		return fmt.Errorf("demo: %w", err)
	}
	hash, err := db.PutVariant(ctx, v.Name, v.Source.Raw)
	if err != nil {
		return err
	}

	serials, err := demoSerials(v, o.units)
	if err != nil {
		return err
	}
	strategies := []string{o.search}
	if o.compare {
		strategies = []string{"bracket", session.SearchLaplace, "staircase"}
	}
	var results [][]demoUnit
	var cpu []time.Duration
	var wall []time.Duration
	for i, strategy := range strategies {
		var rec sequences.Recorder = db
		if i > 0 {
			rec = discard{} // the comparison pass re-tests the same serials; log the shift once
		}
		t0, c0 := time.Now(), cpuTime()
		us, err := a.demoShift(ctx, v, st, rep, hash, strategy, serials, rec, o.asJSON || !isTerminal(a.stderr), o.drift)
		if err != nil {
			return err
		}
		cpu = append(cpu, cpuTime()-c0)
		wall = append(wall, time.Since(t0))
		results = append(results, us)
	}
	if o.asJSON {
		enc := json.NewEncoder(a.stdout)
		for _, u := range results[0] {
			if err := enc.Encode(u); err != nil {
				return err
			}
		}
		sum := demoSummaryJSON(v, st, rep, strategies, results, cpu, wall)
		if sum.Drift, err = o.drift.watch(results[0], v, st); err != nil {
			return err
		}
		return enc.Encode(sum)
	}
	dw, err := o.drift.watch(results[0], v, st)
	if err != nil {
		return err
	}
	line, err := session.NewSimLine(st, v)
	if err != nil {
		return err
	}
	writeDemoSummary(a.stdout, v, st, rep, dbPath, o.db != "", strategies, results, cpu, wall, line.TrueStrayPF())
	writeDemoDrift(a.stdout, dw)
	return nil
}

// discard records nothing (the comparison pass).
type discard struct{}

var _ sequences.Recorder = discard{}

func (discard) Record(context.Context, *sequences.Run) (int64, error) { return 0, nil }

// demoSerial is serial number i (from 1) of the variant's simulated units:
// the variant name without dashes, a dash and six digits (QM-205, 1 →
// QM205-000001).
func demoSerial(v *session.Variant, i int) string {
	return fmt.Sprintf("%s-%06d", strings.ReplaceAll(v.Name, "-", ""), i)
}

// demoSerials makes the shift's serials (see demoSerial) and checks them
// against the variant's own pattern.
func demoSerials(v *session.Variant, n int) ([]string, error) {
	out := make([]string, n)
	for i := range out {
		out[i] = demoSerial(v, i+1)
		if !v.Serial.MatchString(out[i]) {
			return nil, fmt.Errorf("demo: serial %s does not match variant %s's serial_pattern %q; the demo numbers serials NAME-000001",
				out[i], v.Name, v.SerialPattern)
		}
	}
	return out, nil
}

// demoShift tests every serial on a fresh simulated line.
func (a *app) demoShift(ctx context.Context, v *session.Variant, st *session.Station, rep timing.Report, hash, strategy string,
	serials []string, rec sequences.Recorder, quiet bool, dr demoDrift) ([]demoUnit, error) {
	u, uFrom := session.StatedUncertainty(st)
	r, err := session.NewRig(v, st, session.RigOptions{UncertaintyPF: u, UncertaintyFrom: uFrom, Strategy: strategy})
	if err != nil {
		return nil, err
	}
	defer r.Halt()
	line, fx, lv := r.Line, r.Fixture, r.Plan.Levels()
	sess := &sequences.Session{
		Plan: r.Plan, Station: fx, Clock: r.Clock, Recorder: rec, WallClock: time.Now,
		Template: sequences.Run{
			Variant: v.Name, ConfigHash: hash, Station: st.Name, Fixture: st.Fixture,
			Operator: "demo", Lot: "DEMO-" + time.Now().UTC().Format("20060102"), Software: softwareVersion(),
			Driver: string(session.DriverSim),
		},
	}
	lvPF := make([]float64, len(lv))
	for i, l := range lv {
		lvPF[i] = l.PF
	}
	prog := newProgress(a.stderr, len(serials), "testing ("+strategy+")", quiet)
	out := make([]demoUnit, 0, len(serials))
	base := session.UnitModel(v, st.Sim)
	for i, serial := range serials {
		if err := dr.apply(line, base, i+1); err != nil {
			prog.done()
			return nil, err
		}
		unit := line.Load(serial)
		ops0 := sum(fx.RelayOps())
		oc, err := sess.Test(ctx, serial)
		line.Unload()
		if oc == nil {
			prog.done()
			return nil, err
		}
		truth := unit.Truth()
		du := demoUnit{
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
		out = append(out, du)
		prog.step()
	}
	prog.done()
	return out, nil
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

// demoStats summarises one pass over the shift.
type demoStats struct {
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

func summarise(strategy string, us []demoUnit, cpu, wall time.Duration) demoStats {
	s := demoStats{Strategy: strategy, Units: len(us), FailCodes: map[string]int{},
		DefectOutcomes: map[string]map[string]int{}, PhaseMSMean: map[string]float64{}}
	var sq, bias float64
	var errs, spreads, trueSpreads []float64
	nf := 0 // good units with a floor
	for _, u := range us {
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
			continue
		}
		if u.floorSamples > 0 {
			nf++
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
			errs = append(errs, e)
			sq += e * e
			bias += e
			s.TripMaxErrPF = math.Max(s.TripMaxErrPF, math.Abs(e))
			spreads = append(spreads, u.spreadPF)
			trueSpreads = append(trueSpreads, u.trueSpreadPF)
		}
	}
	n := float64(len(us))
	s.YieldPct = 100 * float64(s.Pass) / n
	s.ProbesMean /= n
	s.RelayOpsMean /= n
	s.FixtureMSMean /= n
	if nf > 0 {
		s.SearchSamples /= float64(nf)
		s.FloorSamples /= float64(nf)
		s.FloorMS /= float64(nf)
		s.SearchMS /= float64(nf)
	}
	for ph := range s.PhaseMSMean {
		s.PhaseMSMean[ph] /= n
	}
	if len(errs) > 0 {
		s.TripRMSErrPF = math.Sqrt(sq / float64(len(errs)))
		s.TripBiasPF = bias / float64(len(errs))
		s.TripRMSLessBiasPF = math.Sqrt(math.Max(0, sq/float64(len(errs))-s.TripBiasPF*s.TripBiasPF))
		s.SpreadMedianPF = median(spreads)
		s.TrueSpreadMedian = median(trueSpreads)
	}
	s.CPUPerUnitMS = ms(cpu) / n
	s.WallS = wall.Seconds()
	return s
}

func median(xs []float64) float64 {
	ys := slices.Clone(xs)
	sort.Float64s(ys)
	if len(ys) == 0 {
		return math.NaN()
	}
	if len(ys)%2 == 1 {
		return ys[len(ys)/2]
	}
	return (ys[len(ys)/2-1] + ys[len(ys)/2]) / 2
}

type demoSummary struct {
	Summary      bool        `json:"summary"`
	Variant      string      `json:"variant"`
	Station      string      `json:"station"`
	TestLimitsPF [2]float64  `json:"test_limits_pf"`
	NoiseMVAt5V  float64     `json:"noise_mv_at_5v"`
	JitterNs     float64     `json:"jitter_ns"`
	RungErrSDPF  float64     `json:"rung_err_sd_pf"`
	Passes       []demoStats `json:"passes"`
	// Drift is the drift watch over the shift; nil without drift flags.
	Drift *demoDriftWatch `json:"drift,omitempty"`
}

func demoSummaryJSON(v *session.Variant, st *session.Station, rep timing.Report, strategies []string, results [][]demoUnit, cpu, wall []time.Duration) demoSummary {
	s := demoSummary{Summary: true, Variant: v.Name, Station: st.Name,
		TestLimitsPF: [2]float64{rep.TestLimits.Low, rep.TestLimits.High},
		NoiseMVAt5V:  st.Sim.NoiseMVAt5V, JitterNs: st.Sim.JitterNs, RungErrSDPF: st.Sim.RungErrSDPF}
	for i, us := range results {
		s.Passes = append(s.Passes, summarise(strategies[i], us, cpu[i], wall[i]))
	}
	return s
}

func writeDemoSummary(w io.Writer, v *session.Variant, st *session.Station, rep timing.Report, dbPath string, keep bool,
	strategies []string, results [][]demoUnit, cpu, wall []time.Duration, trueStray float64) {
	var ss []demoStats
	for i, us := range results {
		ss = append(ss, summarise(strategies[i], us, cpu[i], wall[i]))
	}
	s := ss[0]
	fmt.Fprintf(w, "simulated shift  %s on %s/%s, %d units\n", v.Name, st.Name, st.Fixture, s.Units)
	fmt.Fprintf(w, "simulator        noise %.1f mV at 5 V, sample jitter %.1f ns, rung calibration σ %.2f pF (realism floor: DEVELOPERS.md, Simulator realism floor)\n",
		st.Sim.NoiseMVAt5V, st.Sim.JitterNs, st.Sim.RungErrSDPF)
	fmt.Fprintf(w, "test limits      trip %.2f … %.2f pF, clock %.0f … %.0f Hz\n\n",
		rep.TestLimits.Low, rep.TestLimits.High, rep.Clock.CornerLow, rep.Clock.CornerHigh)

	fmt.Fprintf(w, "yield            %.1f %%  (%d pass, %d fail, %d station-fault)\n", s.YieldPct, s.Pass, s.Fail, s.StationFault)
	fmt.Fprintf(w, "good units       %d, false fails %d\n", s.GoodUnits, s.GoodFalseFails)
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
	fmt.Fprintf(w, "\ntrip accuracy on good units against the simulator's ground truth\n")
	fmt.Fprintf(w, "  RMS error %.3f pF   max %.3f pF   bias %+.3f pF\n", s.TripRMSErrPF, s.TripMaxErrPF, s.TripBiasPF)
	fmt.Fprintf(w, "  RMS about the bias %.3f pF; the bias is this fixture's calibration error where units trip: its stray\n", s.TripRMSLessBiasPF)
	fmt.Fprintf(w, "  (true %.2f pF, entered %.2f pF) plus the errors of the rungs closed there; the same for every unit,\n", trueStray, st.Ladder.StrayPF)
	fmt.Fprintf(w, "  it differs from fixture to fixture (--seed) and a reference unit of known trip point shows it\n")
	fmt.Fprintf(w, "  transition (10–90 %%) median: fitted %.2f pF, simulator's noise model %.2f pF\n", s.SpreadMedianPF, s.TrueSpreadMedian)

	fmt.Fprintf(w, "\nfixture time per unit (mean, ms)")
	for _, x := range ss {
		fmt.Fprintf(w, "  %12s", x.Strategy)
	}
	fmt.Fprintln(w)
	row := func(name string, f func(demoStats) float64) {
		fmt.Fprintf(w, "  %-30s", name)
		for _, x := range ss {
			fmt.Fprintf(w, "  %12.1f", f(x))
		}
		fmt.Fprintln(w)
	}
	row("fixed steps", func(x demoStats) float64 {
		var t float64
		for _, p := range fixedPhases {
			t += x.PhaseMSMean[p]
		}
		return t
	})
	row("bracketing (bisection / climb)", func(x demoStats) float64 {
		return x.PhaseMSMean[sequences.PhaseBracket] + x.PhaseMSMean[sequences.PhaseClimb]
	})
	row("refinement (incl. guard levels)", func(x demoStats) float64 {
		return x.PhaseMSMean[sequences.PhaseRefine] + x.PhaseMSMean[sequences.PhaseGuard]
	})
	row("whole unit", func(x demoStats) float64 { return x.FixtureMSMean })
	row("probes per unit", func(x demoStats) float64 { return x.ProbesMean })
	row("relay operations per unit", func(x demoStats) float64 { return x.RelayOpsMean })
	row("trip RMS error, pF ×1000", func(x demoStats) float64 { return 1000 * x.TripRMSErrPF })
	row("search samples, good units", func(x demoStats) float64 { return x.SearchSamples })
	fmt.Fprintf(w, "  search floor on good units: %.1f samples = %.1f ms at each unit's clock (the bisection's probes, then\n", s.FloorSamples, s.FloorMS)
	fmt.Fprintf(w, "  the samples at the nearest level that reach SE %.2f pF with the transition known; relays settle inside a\n", v.Plan.Search.SETargetPF)
	fmt.Fprintf(w, "  period here); the %s search took %.1f samples, %.1f ms (%.2f× the floor)\n", s.Strategy, s.SearchSamples, s.SearchMS, s.SearchSamples/s.FloorSamples)
	for _, c := range ss[1:] {
		if c.Strategy == "staircase" {
			b := ss[0]
			fmt.Fprintf(w, "  bracketing is %.1f× faster than the climb; whole unit %.1f× faster (%.1f ms saved)\n",
				c.PhaseMSMean[sequences.PhaseClimb]/b.PhaseMSMean[sequences.PhaseBracket], c.FixtureMSMean/b.FixtureMSMean, c.FixtureMSMean-b.FixtureMSMean)
		}
	}
	fmt.Fprintf(w, "\ncomputer time    %.3f ms CPU per unit, %.2f s wall for %d units\n", s.CPUPerUnitMS, s.WallS, s.Units)
	if keep {
		fmt.Fprintf(w, "shift log        %s (see 'padline history --db %s --variant %s')\n", dbPath, dbPath, v.Name)
	}
}
