package chart

import (
	"math"
	"strconv"
	"time"

	"gonum.org/v1/plot"
)

// XAxis says what the x axis of a control chart counts.
type XAxis string

// X axes.
const (
	XTime   XAxis = "time"   // time of day the unit finished (the default when times are known)
	XSerial XAxis = "serial" // the units in test order, ticks named by serial
	XPoint  XAxis = "point"  // the units in test order, numbered from 1
)

// timeSteps are the tick spacings a person reads on a clock, in seconds.
var timeSteps = []int64{1, 2, 5, 10, 15, 30, 60, 120, 300, 600, 900, 1800, 3600, 2 * 3600, 3 * 3600, 6 * 3600, 12 * 3600, 86400, 2 * 86400, 7 * 86400}

// timeTicks puts ticks at whole clock times (10:00, 10:30 …, local time)
// on an axis in Unix seconds: at most about max labelled ticks, each
// labelled "15:04" ("15:04:05" below a minute), with the date on the first
// tick and on the first tick of each new day when the axis spans days.
type timeTicks struct {
	loc *time.Location
	max int
}

func (t timeTicks) Ticks(lo, hi float64) []plot.Tick {
	if !(hi > lo) {
		return nil
	}
	want := t.max
	if want < 2 {
		want = 6
	}
	span := hi - lo
	step := timeSteps[len(timeSteps)-1]
	for _, s := range timeSteps {
		if span/float64(s) <= float64(want) {
			step = s
			break
		}
	}
	minor := step / 2
	for _, m := range []struct{ major, minor int64 }{{300, 60}, {900, 300}, {1800, 600}, {3600, 900}, {3 * 3600, 3600}, {6 * 3600, 3600}, {86400, 6 * 3600}} {
		if step == m.major {
			minor = m.minor
		}
	}
	if minor < 1 {
		minor = step
	}
	loc := t.loc
	if loc == nil {
		loc = time.Local
	}
	// Align to local midnight, so 10:00 and 10:30 are ticks in any zone.
	first := time.Unix(int64(math.Floor(lo)), 0).In(loc)
	day := time.Date(first.Year(), first.Month(), first.Day(), 0, 0, 0, 0, loc).Unix()
	layout := "15:04"
	if step < 60 {
		layout = "15:04:05"
	}
	multiDay := time.Unix(int64(lo), 0).In(loc).YearDay() != time.Unix(int64(hi), 0).In(loc).YearDay()
	var ticks []plot.Tick
	lastDay := -1
	start := day + (int64(math.Ceil(lo))-day+minor-1)/minor*minor
	for s := start; float64(s) <= hi; s += minor {
		tk := plot.Tick{Value: float64(s)}
		if (s-day)%step == 0 {
			at := time.Unix(s, 0).In(loc)
			l := layout
			if step >= 86400 {
				l = "Jan 2"
			} else if multiDay && at.YearDay() != lastDay {
				l = "Jan 2 " + layout
			}
			lastDay = at.YearDay()
			tk.Label = at.Format(l)
		}
		ticks = append(ticks, tk)
	}
	return ticks
}

// unitTicks are plot.DefaultTicks on unit numbers, labelled as whole
// numbers (unit 250, not 250.00), or by name when name is set (its serial).
type unitTicks struct {
	name func(unit int) string // unit is 0-based
	n    int                   // number of units
}

func (u unitTicks) Ticks(lo, hi float64) []plot.Tick {
	t := plot.DefaultTicks{}.Ticks(lo, hi)
	var out []plot.Tick
	for _, tk := range t {
		if tk.Label == "" {
			out = append(out, tk)
			continue
		}
		v := math.Round(tk.Value)
		tk.Value = v
		if u.name != nil {
			i := int(v) - 1
			if i < 0 || i >= u.n {
				continue
			}
			tk.Label = u.name(i)
		} else {
			tk.Label = strconv.FormatFloat(v, 'f', 0, 64)
		}
		out = append(out, tk)
	}
	return out
}

// readTicks are ticks at whole multiples of 1, 2 or 5 × 10^k, three to six
// of them, labelled as a person writes them ("40", "2.5", never
// "40.00"), with unlabelled minor ticks between.
type readTicks struct{}

func (readTicks) Ticks(lo, hi float64) []plot.Tick {
	if !(hi > lo) || math.IsInf(hi-lo, 0) {
		return nil
	}
	// The finest step that gives at most six labelled ticks.
	raw := (hi - lo) / 6
	mag := math.Pow(10, math.Floor(math.Log10(raw)))
	step, minor := 10*mag, 2*mag
	for _, m := range []struct{ f, minor float64 }{{1, 0.2}, {2, 0.5}, {5, 1}} {
		if m.f*mag >= raw {
			step, minor = m.f*mag, m.minor*mag
			break
		}
	}
	var t []plot.Tick
	for k := math.Ceil(lo / minor); k*minor <= hi; k++ {
		v := k * minor
		tk := plot.Tick{Value: v}
		if r := v / step; math.Abs(r-math.Round(r)) < 1e-9 {
			tk.Label = strconv.FormatFloat(math.Round(v/mag*1e6)/1e6*mag, 'f', -1, 64)
		}
		t = append(t, tk)
	}
	return t
}
