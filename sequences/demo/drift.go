package demo

import (
	"errors"
	"fmt"
	"io"
	"math"
	"strings"
	"time"

	"padline/fixture/sim"
	"padline/sequences"
	"padline/sequences/session"
	"padline/store/drift"
	"padline/store/driftreport"
)

// Drift is the drift the demo puts into its shift: from unit at on, the
// pad laminate changes and the pad capacitance mean drops by stepPF (units
// trip stepPF higher: the node needs the same total capacitance to trip);
// a ramp drops it a further rampPF per 1000 units from unit at (or 1).
type Drift struct {
	At             int
	StepPF, RampPF float64
}

func (d Drift) active() bool { return d.At > 0 || d.StepPF != 0 || d.RampPF != 0 }

// check validates the drift flags against the shift length.
func (d Drift) Check(units int) error {
	switch {
	case !d.active():
		return nil
	case math.IsNaN(d.StepPF) || math.IsInf(d.StepPF, 0) || math.IsNaN(d.RampPF) || math.IsInf(d.RampPF, 0):
		return errors.New("demo: --drift-pf and --ramp-pf-per-1000 must be finite numbers")
	case d.At < 0:
		return fmt.Errorf("demo: --drift-at must be ≥ 0, got %d", d.At)
	case d.At == 0 && d.StepPF != 0:
		return errors.New("demo: --drift-pf needs --drift-at N, the unit the step starts at")
	case d.At == 1:
		return errors.New("demo: --drift-at must be 0 (a ramp from unit 1) or at least 2: the watch takes its baseline from the units before the step")
	case d.At > units:
		return fmt.Errorf("demo: --drift-at %d is past the shift's %d units", d.At, units)
	}
	return nil
}

// offset is the trip-point shift of unit n (1-based), pF.
func (d Drift) offset(n int) float64 {
	var off float64
	if d.At > 0 && n >= d.At {
		off += d.StepPF
	}
	if start := max(d.At, 1); d.RampPF != 0 && n >= start {
		off += d.RampPF * float64(n-start) / 1000
	}
	return off
}

// apply sets the line's unit model for unit n when the drift changes it.
func (d Drift) apply(line *sim.Line, base sim.UnitModel, n int) error {
	if !d.active() {
		return nil
	}
	off := d.offset(n)
	prev := 0.0
	if n > 1 {
		prev = d.offset(n - 1)
	}
	if off == prev {
		return nil
	}
	um := base
	um.PadPF.Mean -= off
	if um.PadPF.Min != 0 || um.PadPF.Max != 0 {
		um.PadPF.Min -= off
		um.PadPF.Max -= off
	}
	if um.PadPF.Mean-3*um.PadPF.SD < 0 {
		return fmt.Errorf("demo: drift of %+.2f pF at unit %d would leave the pad %.2f ± %.2f pF (3σ): the pad cannot lose more than it has",
			off, n, um.PadPF.Mean, 3*um.PadPF.SD)
	}
	if err := line.SetUnitModel(um); err != nil {
		return fmt.Errorf("demo: drift at unit %d: %w", n, err)
	}
	return nil
}

// DriftWatch is the drift part of the demo summary.
type DriftWatch struct {
	StepAtUnit    int     `json:"step_at_unit"`
	StepPF        float64 `json:"step_pf"`
	RampPFPer1000 float64 `json:"ramp_pf_per_1000"`
	Charts        string  `json:"charts"`
	GoodUnits     int     `json:"good_units_watched"`
	Baseline      string  `json:"baseline"`
	BaselineUnits [2]int  `json:"baseline_units"`
	TargetPF      float64 `json:"target_pf"`
	SigmaPF       float64 `json:"sigma_pf"`
	AlarmsBefore  int     `json:"alarms_before_step"`
	Alarms        int     `json:"alarms"`
	// First is the first alarm at or after the step; nil when none.
	First *Alarm `json:"first_alarm"`
	// Verdict is the sentence 'padline drift' prints on this shift's log;
	// ChangeAtUnit and ChangeSerial the estimated first unit after the
	// change (0, "" when there is no alarm).
	Verdict      string `json:"verdict"`
	ChangeAtUnit int    `json:"change_at_unit"`
	ChangeSerial string `json:"change_serial"`
}

// Alarm is one alarm in shift terms.
type Alarm struct {
	Seq         int    `json:"seq"`
	Chart       string `json:"chart"`
	Rule        string `json:"rule"`
	Description string `json:"description"`
	Unit        int    `json:"unit"` // shift unit number, 1-based
	Serial      string `json:"serial"`
	// LagUnits counts the units from the step to the alarm, both included
	// (an alarm on the step's own unit has lag 1); LagGoodUnits counts only
	// the good units the watch saw.
	LagUnits     int    `json:"lag_units"`
	LagGoodUnits int    `json:"lag_good_units"`
	Note         string `json:"note,omitempty"`
}

// watchSeries is what the drift watch needs of the first pass: each
// passed unit's trip point, unit number (1-based; its serial is
// session.DemoSerial's) and finish time, 20 bytes a passed unit.
type watchSeries struct {
	x        []float64
	unit     []int32
	finished []int64 // Unix nanoseconds
}

// add keeps unit n when it passed with a trip point; a nil series keeps
// nothing (no drift asked for).
func (w *watchSeries) add(n int, u Unit) {
	if w == nil || u.Verdict != string(sequences.Pass) || u.TripPF == nil {
		return
	}
	w.x = append(w.x, *u.TripPF)
	w.unit = append(w.unit, int32(n))
	w.finished = append(w.finished, u.finished.UnixNano())
}

// watch runs the default drift watch over the passed units' trip points
// in test order — the series 'padline drift' reads from the shift log —
// with limits from the first min(50, passed units before the step)
// points, as 'padline drift' takes its first 50; nil when the demo has no
// drift.
func (d Drift) watch(ser *watchSeries, v *session.Variant, st *session.Station) (*DriftWatch, error) {
	if !d.active() || ser == nil {
		return nil, nil
	}
	from := max(d.At, 1)
	x := ser.x
	before := 0
	for _, n := range ser.unit {
		if int(n) < from {
			before++
		}
	}
	unit := func(i int) int { return int(ser.unit[i]) }
	serial := func(i int) string { return session.DemoSerial(v, unit(i)) }
	finished := func(i int) time.Time { return time.Unix(0, ser.finished[i]) }
	basePts := min(driftreport.DefaultBaseline, len(x))
	if d.At > 0 {
		basePts = min(basePts, before)
	}
	if basePts < 2 || len(x) < 2 {
		return nil, fmt.Errorf("demo: drift watch needs at least 2 passed units before the step, got %d", basePts)
	}
	win := drift.FirstN(basePts)
	w, err := drift.WatchSeries(x, win, drift.Options{}, drift.DefaultSet)
	if err != nil {
		return nil, fmt.Errorf("demo: drift watch over %d passed units, baseline the first %d: %w", len(x), basePts, err)
	}
	lastBase := unit(basePts - 1)
	out := &DriftWatch{StepAtUnit: d.At, StepPF: d.StepPF, RampPFPer1000: d.RampPF,
		Charts:    fmt.Sprintf("individuals (3σ limit) + tabular CUSUM (k %gσ, h %gσ)", float64(drift.DefaultK), float64(drift.DefaultH)),
		GoodUnits: len(x), Baseline: fmt.Sprintf("units 1–%d (the first %d passed units)", lastBase, basePts),
		BaselineUnits: [2]int{1, lastBase}, Alarms: len(w.Alarms)}
	c := w.Charts[0]
	out.TargetPF, out.SigmaPF = c.Target, c.Sigma
	first := len(x)
	for i := range x {
		if unit(i) >= from {
			first = i
			break
		}
	}
	for _, al := range w.Alarms {
		if al.Unit < first {
			out.AlarmsBefore++
		}
	}
	if al, ok := w.First(first); ok {
		u := unit(al.Unit)
		out.First = &Alarm{Seq: al.Seq, Chart: string(al.Chart), Rule: string(al.Rule), Description: al.Description(),
			Unit: u, Serial: serial(al.Unit), LagUnits: u - from + 1,
			LagGoodUnits: al.Unit - first + 1, Note: al.Note}
		if al.Onset >= 0 && al.Chart == drift.CUSUM {
			out.First.Note = driftreport.OnsetNote(al, serial(al.Onset))
		}
	}
	f := drift.Assess(x, w.Alarms, c.Target, c.Sigma, win)
	multiDay := driftreport.SpansDays(finished(0), finished(len(x)-1))
	name := func(i int) string { return driftreport.PointName(serial(i), finished(i), multiDay) }
	out.Verdict = f.Sentence("trip point of "+v.Name, "pF", st.Name+" / "+st.Fixture, name)
	if f.Change >= 0 {
		out.ChangeAtUnit, out.ChangeSerial = unit(f.Change), serial(f.Change)
	}
	return out, nil
}

// writeDrift prints the drift lines of the demo summary.
func writeDrift(w io.Writer, d *DriftWatch) {
	if d == nil {
		return
	}
	var what []string
	if d.StepAtUnit > 0 {
		what = append(what, fmt.Sprintf("step %+.2f pF of trip point at unit %d (pad capacitance mean %.2f pF lower: another pad laminate)", d.StepPF, d.StepAtUnit, d.StepPF))
	}
	if d.RampPFPer1000 != 0 {
		what = append(what, fmt.Sprintf("ramp %+.2f pF per 1000 units from unit %d", d.RampPFPer1000, max(d.StepAtUnit, 1)))
	}
	fmt.Fprintf(w, "\nverdict          %s\n", d.Verdict)
	fmt.Fprintf(w, "drift            %s\n", strings.Join(what, "; "))
	fmt.Fprintf(w, "drift watch      %s over %d passed units' trip points\n", d.Charts, d.GoodUnits)
	fmt.Fprintf(w, "  baseline       %s: target %.2f pF, σ %.2f pF\n", d.Baseline, d.TargetPF, d.SigmaPF)
	if f := d.First; f != nil {
		fmt.Fprintf(w, "  first alarm    #%d %s %s (%s) at %s (unit %d): lag %d units from unit %d (%d passed units)\n",
			f.Seq, f.Chart, f.Rule, f.Description, f.Serial, f.Unit, f.LagUnits, max(d.StepAtUnit, 1), f.LagGoodUnits)
		if f.Note != "" {
			fmt.Fprintf(w, "                 %s\n", f.Note)
		}
	} else {
		fmt.Fprintf(w, "  first alarm    none at or after unit %d\n", max(d.StepAtUnit, 1))
	}
	fmt.Fprintf(w, "  alarms         %d in all, %d before unit %d (false alarms)\n", d.Alarms, d.AlarmsBefore, max(d.StepAtUnit, 1))
}
