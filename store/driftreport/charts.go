package driftreport

import (
	"context"
	"fmt"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"padline/sequences"
	"padline/store/drift"
	"padline/store/drift/chart"
)

// ChartFile is one picture drift wrote.
type ChartFile struct {
	Path  string `json:"path"`
	Kind  string `json:"kind"` // control, pareto or hourly-yield
	Bytes int64  `json:"bytes"`
	// AlarmRuns counts the runs of alarms marked (one ring each) on a
	// control chart, over all its panels; Alarms the alarms in them.
	AlarmRuns int `json:"alarm_runs_marked,omitempty"`
	Alarms    int `json:"alarms,omitempty"`
}

// chartGroup is one group's charts with what names their points.
func chartGroup(ctx context.Context, db runLog, o Options, g driftSeries, charts []drift.Chart) chart.Group {
	cg := chart.Group{Name: g.key, Charts: charts, Times: g.times}
	if db != nil && len(g.runIDs) > 0 {
		cg.Serial = func(i int) string {
			return g.runOf(ctx, db, i).Serial
		}
	}
	if o.approved != nil {
		cg.Approved = fmt.Sprintf("%q", o.approved.Name)
	}
	return cg
}

// writeCharts draws the control charts (under --by the groups side by
// side in one picture) to --svg and --png, and beside each, from the shift
// log, the fail-code Pareto (FILE-pareto.svg) and the hourly first-pass
// yield (FILE-yield.svg).
func writeCharts(ctx context.Context, db runLog, o Options, series []driftSeries, groups []chart.Group, rep *Report) error {
	title := "trip point"
	if rep.Variant != "" {
		title = rep.Variant + " trip point"
	}
	unit := "pF"
	if o.CSVFile != "" {
		title, unit = o.Column, ""
	}
	if o.By != "" {
		title += " by " + o.By
	}
	copts := chart.Options{Title: title + " (" + driftChartTitle(o.Chart) + ")", Quantity: "trip point", Unit: unit, By: o.By, X: chart.XAxis(o.X)}
	if o.CSVFile != "" {
		copts.Quantity = o.Column
	}
	var first, last int64
	for _, g := range series {
		if len(g.times) > 0 {
			if first == 0 || g.times[0] < first {
				first = g.times[0]
			}
			last = max(last, g.times[len(g.times)-1])
		}
	}
	if first != 0 {
		copts.Marks = ShiftMarks(time.Unix(0, first), time.Unix(0, last))
	}
	var pareto []chart.Count
	var hours []chart.Hour
	if db != nil {
		var err error
		if pareto, hours, err = failsAndHours(ctx, db, o, series); err != nil {
			return err
		}
	}
	for _, path := range []string{o.SVG, o.PNG} {
		if path == "" {
			continue
		}
		d, err := chart.WriteFile(path, copts, groups...)
		if err != nil {
			return err
		}
		cf := ChartFile{Path: path, Kind: "control", Bytes: d.Bytes}
		for _, p := range d.Panels {
			cf.AlarmRuns += p.Runs
			cf.Alarms += p.Alarms
		}
		rep.ChartFiles = append(rep.ChartFiles, cf)
		for i := range rep.Groups {
			if rep.Groups[i].ChartFile == "" {
				rep.Groups[i].ChartFile = path
			}
		}
		if db == nil {
			continue
		}
		ext := filepath.Ext(path)
		base := strings.TrimSuffix(path, ext)
		if len(pareto) > 0 {
			p := base + "-pareto" + ext
			d, err := chart.WritePareto(p, rep.Variant+" fail codes", pareto)
			if err != nil {
				return err
			}
			rep.ChartFiles = append(rep.ChartFiles, ChartFile{Path: p, Kind: "pareto", Bytes: d.Bytes})
		}
		if len(hours) > 0 {
			p := base + "-yield" + ext
			d, err := chart.WriteHourlyYield(p, rep.Variant+" first-pass yield by hour", hours, copts.Marks)
			if err != nil {
				return err
			}
			rep.ChartFiles = append(rep.ChartFiles, ChartFile{Path: p, Kind: "hourly-yield", Bytes: d.Bytes})
		}
	}
	return nil
}

// ShiftMarks are the shift changes (ShiftOf's 06:00, 14:00 and 22:00,
// local) after first and up to last, each labelled with its time and the
// shift it starts.
func ShiftMarks(first, last time.Time) []chart.Mark {
	var marks []chart.Mark
	_, _, end := ShiftOf(first.Local())
	for !end.After(last) {
		name, _, next := ShiftOf(end)
		marks = append(marks, chart.Mark{At: end, Label: end.Format("15:04") + " " + name[strings.LastIndexByte(name, ' ')+1:] + " shift"})
		end = next
	}
	return marks
}

// failsAndHours reads the selection's runs once: the count of each fail
// code (unit fails and station faults) for the Pareto, and each hour's
// first units (a serial's first unit verdict, station faults not counted,
// as the report's first-pass yield counts them) with how many passed.
func failsAndHours(ctx context.Context, db runLog, o Options, series []driftSeries) ([]chart.Count, []chart.Hour, error) {
	f := o.Filter
	f.Variant = series[0].filter.Variant
	if o.Last > 0 && len(series) == 1 {
		f.Since = series[0].filter.Since
	}
	since := f.Since
	// Serials first seen before the selection are no first units in it.
	f.Since = time.Time{}
	codes := map[string]int{}
	seen := map[string]bool{}
	byHour := map[int64]*chart.Hour{}
	for e, err := range db.Runs(ctx, f) {
		if err != nil {
			return nil, nil, err
		}
		in := !e.Finished.Before(since)
		if in && e.Verdict != sequences.Pass && e.FailCode != "" {
			c := string(e.FailCode)
			if e.Verdict == sequences.StationFault {
				c += " (station)"
			}
			codes[c]++
		}
		if e.Verdict == sequences.StationFault || seen[e.Serial] {
			continue
		}
		seen[e.Serial] = true
		if !in {
			continue
		}
		t := e.Finished.Local()
		h := time.Date(t.Year(), t.Month(), t.Day(), t.Hour(), 0, 0, 0, t.Location())
		b := byHour[h.Unix()]
		if b == nil {
			b = &chart.Hour{Start: h}
			byHour[h.Unix()] = b
		}
		b.Total++
		if e.Verdict == sequences.Pass {
			b.Pass++
		}
	}
	var counts []chart.Count
	for c, n := range codes {
		counts = append(counts, chart.Count{Label: c, N: n})
	}
	var hours []chart.Hour
	for _, h := range byHour {
		hours = append(hours, *h)
	}
	sort.Slice(hours, func(i, j int) bool { return hours[i].Start.Before(hours[j].Start) })
	return counts, hours, nil
}

func driftChartTitle(kind string) string {
	if kind == "watch" {
		return "default watch"
	}
	return kind
}
