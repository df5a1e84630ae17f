package drift

import (
	"fmt"
	"math"
)

// Finding is the answer to "is it drifting, since when, by how much" for
// one series: the estimated change point, the size of the shift, and the
// alarm that signalled it.
type Finding struct {
	// Drifting is true when an alarm fired at or after the estimated
	// change, on the side the mean moved to.
	Drifting bool
	// Alarms is the number of alarms in the series; Before how many of
	// them came before Change (false alarms, or an earlier episode).
	Alarms, Before int
	// Change is the series index of the first point after the estimated
	// change; −1 when there are no alarms.
	Change int
	// Signal is the first alarm at or after Change on the shift's side
	// (valid when Drifting); Earliest is the earliest alarm of all (valid
	// when Alarms > 0).
	Signal, Earliest Alarm
	// ShiftX is the mean of the points from Change to the end minus the
	// target, in the units of x; ShiftSigma is ShiftX/σ.
	ShiftX, ShiftSigma float64
	Target, Sigma      float64
}

// ChangePoint is the maximum-likelihood position of a single step in the
// mean of x away from a known mean mu0 with known σ (Hinkley, "Inference
// about the change-point from cumulative sum tests", Biometrika 58(3),
// 1971): the index τ in [from, len(x)) that maximises
// (n − τ)·(x̄[τ:n] − mu0)², i.e. the square of the cumulative sum of
// x − mu0 taken from the end, divided by the number of points summed. It
// returns τ (the first point after the change) and x̄[τ:n] − mu0; −1 when
// from is outside x.
func ChangePoint(x []float64, mu0 float64, from int) (int, float64) {
	if from < 0 || from >= len(x) {
		return -1, math.NaN()
	}
	best, at, sum := -1.0, -1, 0.0
	var shift float64
	for t := len(x) - 1; t >= from; t-- {
		sum += x[t] - mu0
		m := float64(len(x) - t)
		if s := sum * sum / m; s >= best {
			best, at, shift = s, t, sum/m
		}
	}
	return at, shift
}

// Assess finds the drift in x given the alarms of its charts (in Seq
// order, as Number returns them) and the baseline target and σ. The change
// point is ChangePoint over the points after the baseline window w; the
// signal is the first alarm at or after it on the side the mean moved to.
func Assess(x []float64, alarms []Alarm, target, sigma float64, w Window) Finding {
	t := newTally(x, target, sigma, w)
	for _, a := range alarms {
		t.add(a)
	}
	return t.finding()
}

// tally builds a Finding one alarm at a time, so Summarize can assess a
// series without keeping its alarms: the change point depends on x and the
// target only, and each alarm is placed against it as it comes.
type tally struct {
	f     Finding
	at    int
	shift float64
	side  int
}

func newTally(x []float64, target, sigma float64, w Window) *tally {
	t := &tally{f: Finding{Change: -1, Target: target, Sigma: sigma, ShiftX: math.NaN(), ShiftSigma: math.NaN()}, at: -1}
	if len(x) == 0 {
		return t
	}
	from := w.End
	if from >= len(x) {
		from = 0
	}
	t.at, t.shift = ChangePoint(x, target, from)
	t.side = 1
	if t.shift < 0 {
		t.side = -1
	}
	return t
}

// add takes the next alarm, in Seq order.
func (t *tally) add(a Alarm) {
	f := &t.f
	if f.Alarms == 0 || a.Unit < f.Earliest.Unit {
		f.Earliest = a
	}
	f.Alarms++
	if t.at < 0 {
		return
	}
	if a.Unit < t.at {
		f.Before++
	}
	if a.Unit >= t.at && (a.Side == t.side || a.Side == 0) && (!f.Drifting || a.Unit < f.Signal.Unit) {
		f.Signal, f.Drifting = a, true
	}
}

// finding is the Finding so far: no change point without an alarm.
func (t *tally) finding() Finding {
	f := t.f
	if f.Alarms == 0 || t.at < 0 {
		return f
	}
	f.Change, f.ShiftX = t.at, t.shift
	if f.Sigma > 0 {
		f.ShiftSigma = t.shift / f.Sigma
	}
	return f
}

// RuleName is a rule as a quality engineer says it ("CUSUM+",
// "individuals beyond 3σ").
func RuleName(a Alarm) string {
	switch a.Rule {
	case CUSUMUp:
		return "CUSUM+"
	case CUSUMDown:
		return "CUSUM−"
	case EWMASignal:
		return "EWMA"
	}
	return a.Chart.Title() + " (" + a.Rule.Description() + ")"
}

// Sentence is the finding in one sentence. what names the quantity
// ("trip point of QM-205"), unit its unit ("pF"), where the group or place
// ("L2-S1 / FX-07", may be empty), and name a series index as a person
// finds it ("QM205-000998 at 10:42").
func (f Finding) Sentence(what, unit, where string, name func(i int) string) string {
	on := ""
	if where != "" {
		on = " on " + where
	}
	if f.Alarms == 0 {
		return fmt.Sprintf("%s in control%s: no alarm", what, on)
	}
	if !f.Drifting {
		return fmt.Sprintf("%s: %d alarm(s)%s, the first %s at %s, but no sustained shift after it",
			what, f.Alarms, on, RuleName(f.Earliest), name(f.Earliest.Unit))
	}
	verb := "rose"
	if f.ShiftX < 0 {
		verb = "fell"
	}
	sp := " "
	if unit == "" {
		sp = ""
	}
	s := fmt.Sprintf("%s %s %.2g%s%s (%.2g σ) from %s%s (%s signalled at %s)",
		what, verb, math.Abs(f.ShiftX), sp, unit, math.Abs(f.ShiftSigma), name(f.Change), on, RuleName(f.Signal), name(f.Signal.Unit))
	if f.Earliest.Unit < f.Change {
		s += fmt.Sprintf("; %d earlier alarm(s) from %s", f.Before, name(f.Earliest.Unit))
	}
	return s
}
