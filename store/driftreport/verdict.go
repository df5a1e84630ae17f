package driftreport

import (
	"context"
	"fmt"
	"strings"
	"time"

	"padline/store"
	"padline/store/drift"
)

// Verdict is a group's finding: the one sentence and its parts.
type Verdict struct {
	Text       string `json:"text"`
	Drifting   bool   `json:"drifting"`
	Alarms     int    `json:"alarms"`
	Earlier    int    `json:"alarms_before_change"`
	ShiftPF    Num    `json:"shift"`
	ShiftSigma Num    `json:"shift_sigma"`
	Change     *Point `json:"change,omitempty"`
	Signal     *Point `json:"signal,omitempty"`
	Rule       string `json:"rule,omitempty"`
	Where      string `json:"where,omitempty"`
}

// Point is one point named as people find it: by serial and time
// (Unit, the 1-based position in the series, only for cross-reference).
type Point struct {
	Serial string     `json:"serial,omitempty"`
	Time   *time.Time `json:"time,omitempty"`
	Unit   int        `json:"unit"`
}

// driftVerdict assesses one group's series and puts the finding in words,
// naming points by serial and time and the place by the station and
// fixture of the run at the change.
func driftVerdict(ctx context.Context, db runLog, o Options, g driftSeries, an driftAnalysis) *Verdict {
	if len(an.sum.Charts) == 0 {
		return nil
	}
	f := an.sum.Finding
	multiDay := len(g.times) > 1 && SpansDays(time.Unix(0, g.times[0]), time.Unix(0, g.times[len(g.times)-1]))
	point := func(i int) (*Point, store.Entry) {
		p := &Point{Unit: i + 1}
		var e store.Entry
		if i >= 0 && i < len(g.times) {
			p.Time = tptr(g.times[i])
			if db != nil {
				e = g.runOf(ctx, db, i)
				p.Serial = e.Serial
			}
		}
		return p, e
	}
	name := func(i int) string {
		p, _ := point(i)
		if p.Time == nil {
			return fmt.Sprintf("point %d", i+1)
		}
		return PointName(p.Serial, *p.Time, multiDay)
	}
	v := &Verdict{Drifting: f.Drifting, Alarms: f.Alarms, Earlier: f.Before, ShiftPF: Num(f.ShiftX), ShiftSigma: Num(f.ShiftSigma)}
	what, unit := "trip point", "pF"
	if o.Variant != "" {
		what += " of " + o.Variant
	}
	if o.CSVFile != "" {
		what, unit = o.Column, ""
	}
	if f.Change >= 0 {
		var e store.Entry
		v.Change, e = point(f.Change)
		if e.Station != "" {
			v.Where = e.Station + " / " + e.Fixture
		}
	}
	if f.Drifting {
		v.Signal, _ = point(f.Signal.Unit)
		v.Rule = drift.RuleName(f.Signal)
	}
	v.Text = f.Sentence(what, unit, v.Where, name)
	return v
}

// topVerdict is the report's first line: the only group's sentence, or
// under --by the drifting group whose change came first (named), else a
// count of groups in control.
func topVerdict(by string, groups []GroupReport) string {
	var best *GroupReport
	for i := range groups {
		g := &groups[i]
		if g.Verdict == nil {
			continue
		}
		if len(groups) == 1 {
			return g.Verdict.Text
		}
		if !g.Verdict.Drifting || g.Verdict.Change == nil {
			continue
		}
		if best == nil || (g.Verdict.Change.Time != nil && best.Verdict.Change.Time != nil && g.Verdict.Change.Time.Before(*best.Verdict.Change.Time)) {
			best = g
		}
	}
	if best == nil {
		return fmt.Sprintf("no %s of the %d drifts: no sustained shift after an alarm", by, len(groups))
	}
	n := 0
	for _, g := range groups {
		if g.Verdict != nil && g.Verdict.Drifting {
			n++
		}
	}
	return fmt.Sprintf("%s %s: %s (%d of %d %s groups drifting)", by, best.Key, best.Verdict.Text, n, len(groups), by)
}

// PointName names a point as the verdict does, the same in the demo and in
// drift: serial and time of day (with the date when the series spans days).
func PointName(serial string, t time.Time, multiDay bool) string {
	layout := "15:04"
	if multiDay {
		layout = "2006-01-02 15:04"
	}
	return dashIfEmpty(serial) + " at " + t.Local().Format(layout)
}

// SpansDays reports whether the first and last time fall on different
// local days.
func SpansDays(first, last time.Time) bool {
	a, b := first.Local(), last.Local()
	return a.YearDay() != b.YearDay() || a.Year() != b.Year()
}

// OnsetNote restates a CUSUM alarm's note with its onset named by serial
// and time instead of a point number: "sums above zero from S at T, mean
// now ≈ …".
func OnsetNote(al drift.Alarm, onset string) string {
	return strings.Replace(al.Note, fmt.Sprintf("change after point %d", al.Onset), "sums above zero from "+onset, 1)
}
