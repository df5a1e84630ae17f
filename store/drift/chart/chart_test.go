package chart_test

import (
	"bytes"
	"errors"
	"flag"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"padline/store/drift"
	"padline/store/drift/chart"
)

var keep = flag.String("keep", "", "also write the test charts into this directory for viewing")

// maxBytes is the budget for one chart of 2,000 points.
const maxBytes = 200 << 10

// shift is 2,000 trip points as the demo makes them: about 29.5 pF with
// σ 3.5 pF, a 4 pF step at unit 1,001, one unit every 6 s from 12:30
// local with a 15-minute break at 14:30, serials QM205-000001 on.
func shift() (x []float64, times []int64, serial func(int) string) {
	rng := rand.New(rand.NewPCG(11, 0))
	x = make([]float64, 2000)
	times = make([]int64, len(x))
	t := time.Date(2026, 12, 1, 12, 30, 0, 0, time.Local)
	for i := range x {
		x[i] = 29.5 + 3.5*rng.NormFloat64()
		if i >= 1000 {
			x[i] += 4
		}
		if i == 1200 {
			t = t.Add(15 * time.Minute)
		}
		t = t.Add(6 * time.Second)
		times[i] = t.UnixNano()
	}
	return x, times, func(i int) string { return fmt.Sprintf("QM205-%06d", i+1) }
}

// shiftMarks are the shift changes in the series: 14:00, late shift.
func shiftMarks() []chart.Mark {
	return []chart.Mark{{At: time.Date(2026, 12, 1, 14, 0, 0, 0, time.Local), Label: "14:00 late shift"}}
}

// check writes the chart in both formats, asserts the budget and the
// labels in the SVG, and returns what was drawn (the SVG's).
func check(t *testing.T, name string, render func(path string) (chart.Drawn, error)) chart.Drawn {
	t.Helper()
	dir := t.TempDir()
	var svg chart.Drawn
	for _, ext := range []string{"svg", "png"} {
		path := filepath.Join(dir, name+"."+ext)
		d, err := render(path)
		if err != nil {
			t.Fatalf("%s: %v", path, err)
		}
		b, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		header := map[string]string{"svg": "<?xml", "png": "\x89PNG\r\n\x1a\n"}[ext]
		if !bytes.HasPrefix(b, []byte(header)) || int64(len(b)) != d.Bytes {
			t.Errorf("%s: %d bytes (drawn says %d), header %q", path, len(b), d.Bytes, b[:min(len(b), 8)])
		}
		if len(b) > maxBytes {
			t.Errorf("%s: %d bytes, budget %d", path, len(b), maxBytes)
		}
		t.Logf("%-14s %s %7d bytes", name, ext, len(b))
		if ext == "svg" {
			svg = d
			for _, p := range d.Panels {
				for _, s := range append(append([]string{p.XLabel, p.YLabel}, p.XTicks...), p.YTicks...) {
					if !bytes.Contains(b, []byte(">"+escape(s)+"<")) {
						t.Errorf("%s: SVG lacks the text %q", name, s)
					}
				}
			}
		}
		if *keep != "" {
			if err := os.WriteFile(filepath.Join(*keep, name+"."+ext), b, 0o644); err != nil {
				t.Fatal(err)
			}
		}
	}
	return svg
}

func escape(s string) string {
	return strings.NewReplacer("&", "&amp;", "<", "&lt;", ">", "&gt;", "'", "&#39;").Replace(s)
}

// TestControlCharts renders every control chart kind over 2,000 points on
// a time axis and checks axis labels, the alarm runs marked and the size.
func TestControlCharts(t *testing.T) {
	x, times, serial := shift()
	w := drift.FirstN(50)
	o := drift.Options{}
	watch, err := drift.WatchSeries(x, w, o, drift.DefaultSet)
	if err != nil {
		t.Fatal(err)
	}
	imr, err := drift.IndividualsChart(x, w, o)
	if err != nil {
		t.Fatal(err)
	}
	xr, err := drift.XbarRChart(x, 5, w, o)
	if err != nil {
		t.Fatal(err)
	}
	xs, err := drift.XbarSChart(x, 5, w, o)
	if err != nil {
		t.Fatal(err)
	}
	ew, err := drift.EWMAChart(x, w, o)
	if err != nil {
		t.Fatal(err)
	}
	cu, err := drift.CUSUMChart(x, w, o)
	if err != nil {
		t.Fatal(err)
	}
	opts := chart.Options{Title: "QM-205 trip point", Quantity: "trip point", Unit: "pF", Marks: shiftMarks()}
	for _, tc := range []struct {
		name   string
		charts []drift.Chart
		y      []string
	}{
		{"watch", watch.Charts, []string{"trip point (pF)", "C+ and −C− (pF)"}},
		{"imr", []drift.Chart{imr.Location, imr.Spread}, []string{"trip point (pF)", "moving range (pF)"}},
		{"xbar-r", []drift.Chart{xr.Location, xr.Spread}, []string{"mean trip point (pF)", "range (pF)"}},
		{"xbar-s", []drift.Chart{xs.Location, xs.Spread}, []string{"mean trip point (pF)", "std. deviation (pF)"}},
		{"ewma", []drift.Chart{ew}, []string{"EWMA of trip point (pF)"}},
		{"cusum", []drift.Chart{cu}, []string{"C+ and −C− (pF)"}},
	} {
		g := chart.Group{Charts: tc.charts, Times: times, Serial: serial}
		d := check(t, tc.name, func(p string) (chart.Drawn, error) { return chart.WriteFile(p, opts, g) })
		if len(d.Panels) != len(tc.charts) {
			t.Fatalf("%s: %d panels", tc.name, len(d.Panels))
		}
		for i, p := range d.Panels {
			if p.YLabel != tc.y[i] || !strings.HasPrefix(p.XLabel, "time on 2026-12-01") {
				t.Errorf("%s panel %d: axes %q, %q", tc.name, i, p.XLabel, p.YLabel)
			}
			// Ticks read as clock times: 12:30 … 16:00, no decimals.
			if len(p.XTicks) < 3 || p.XTicks[0] != "12:30" {
				t.Errorf("%s panel %d: x ticks %q", tc.name, i, p.XTicks)
			}
			for _, tk := range p.XTicks {
				if _, err := time.Parse("15:04", tk); err != nil {
					t.Errorf("%s: tick %q is not a time of day", tc.name, tk)
				}
			}
			// y ticks as written by hand: "40", "2.5", never "40.00".
			if len(p.YTicks) < 3 {
				t.Errorf("%s panel %d: y ticks %q", tc.name, i, p.YTicks)
			}
			for _, tk := range p.YTicks {
				if v, err := strconv.ParseFloat(tk, 64); err != nil || strconv.FormatFloat(v, 'f', -1, 64) != tk {
					t.Errorf("%s panel %d: y tick %q", tc.name, i, tk)
				}
			}
			// One mark per run: as many as the runs of the chart's alarms
			// at the drawing's resolution, fewer than its alarms when
			// alarms crowd.
			c := tc.charts[i]
			if p.Alarms != len(c.Alarms) || p.Runs > p.Alarms || (p.Alarms > 0 && (p.Runs == 0 || p.Labelled == 0 || p.Labelled > p.Runs)) {
				t.Errorf("%s panel %d: %d alarms, %d runs marked, %d labelled", tc.name, i, p.Alarms, p.Runs, p.Labelled)
			}
			if p.Points > 1000 && p.Drawn >= p.Points {
				t.Errorf("%s panel %d: %d of %d points drawn: no reduction", tc.name, i, p.Drawn, p.Points)
			}
			t.Logf("%-8s %-12s %4d alarms, %3d runs marked, %2d labelled, %4d of %4d points drawn",
				tc.name, p.Kind, p.Alarms, p.Runs, p.Labelled, p.Drawn, p.Points)
		}
	}
	// The watch's CUSUM runs far past h after the step: drawn to ±3h, not
	// to its peak, so ±h stays readable.
	if d := check(t, "cusum-scale", func(p string) (chart.Drawn, error) {
		return chart.WriteFile(p, opts, chart.Group{Charts: []drift.Chart{cu}, Times: times})
	}); !d.Panels[0].OffScale {
		t.Error("CUSUM: the sums beyond 3h are not reported off scale")
	}
	// Serial axis: ticks named by serial.
	os := opts
	os.X = chart.XSerial
	d := check(t, "watch-serial", func(p string) (chart.Drawn, error) {
		return chart.WriteFile(p, os, chart.Group{Charts: watch.Charts, Times: times, Serial: serial})
	})
	if p := d.Panels[0]; p.XLabel != "serial (in test order)" || len(p.XTicks) < 2 || !strings.HasPrefix(p.XTicks[0], "QM205-") {
		t.Errorf("serial axis: %q %q", p.XLabel, p.XTicks)
	}
}

// TestAlarmRuns: alarms close together on the drawing are one mark.
func TestAlarmRuns(t *testing.T) {
	x, times, _ := shift()
	c, err := drift.IndividualsChart(x, drift.FirstN(50), drift.Options{})
	if err != nil {
		t.Fatal(err)
	}
	ch := c.Location
	// Four runs: 100–102 above; 500 above; 1500…1520 every 5 above; 1800
	// below (a run of its own side even beside 1520's).
	ch.Alarms = nil
	add := func(i, side int) {
		ch.Alarms = append(ch.Alarms, drift.Alarm{Seq: len(ch.Alarms) + 1, Chart: drift.Individuals, Rule: drift.WE1, Index: i, Unit: i, Side: side, Onset: -1})
	}
	for _, i := range []int{100, 101, 102, 500, 1500, 1505, 1510, 1515, 1520} {
		add(i, 1)
	}
	add(1800, -1)
	d := check(t, "runs", func(p string) (chart.Drawn, error) {
		return chart.WriteFile(p, chart.Options{Quantity: "trip point", Unit: "pF"}, chart.Group{Charts: []drift.Chart{ch}, Times: times})
	})
	if p := d.Panels[0]; p.Alarms != 10 || p.Runs != 4 || p.Labelled != 4 {
		t.Errorf("%d alarms, %d runs, %d labelled; want 10, 4, 4", p.Alarms, p.Runs, p.Labelled)
	}
	runs := chart.Runs(ch, func(i int) float64 { return float64(i) }, 10)
	if len(runs) != 4 || runs[0].Count != 3 || runs[2].Count != 5 || runs[2].First.Seq != 5 || runs[2].Last.Seq != 9 || runs[3].First.Side != -1 {
		t.Errorf("runs %+v", runs)
	}
}

// TestSmallMultiples: --by groups in one picture, one row per group.
func TestSmallMultiples(t *testing.T) {
	x, times, serial := shift()
	var groups []chart.Group
	for k, name := range []string{"L2-S1", "L2-S2"} {
		var gx []float64
		var gt []int64
		for i := k; i < len(x); i += 2 {
			gx, gt = append(gx, x[i]), append(gt, times[i])
		}
		wt, err := drift.WatchSeries(gx, drift.FirstN(50), drift.Options{}, drift.DefaultSet)
		if err != nil {
			t.Fatal(err)
		}
		groups = append(groups, chart.Group{Name: name, Charts: wt.Charts, Times: gt, Serial: serial})
	}
	o := chart.Options{Title: "QM-205 trip point by station", By: "station", Quantity: "trip point", Unit: "pF", Marks: shiftMarks()}
	d := check(t, "by-station", func(p string) (chart.Drawn, error) { return chart.WriteFile(p, o, groups...) })
	if len(d.Panels) != 4 || d.Panels[0].Group != "L2-S1" || d.Panels[3].Group != "L2-S2" || !strings.Contains(d.Panels[2].Title, "station L2-S2") {
		t.Errorf("panels %+v", d.Panels)
	}
}

// TestParetoAndYield renders the fail-code Pareto and the hourly yield.
func TestParetoAndYield(t *testing.T) {
	counts := []chart.Count{{"trip_high", 17}, {"no_trip", 10}, {"clock_high", 6}, {"idle_latched", 8}, {"stuck_latched", 4}, {"clock_low", 5}, {"lid_open", 1}}
	d := check(t, "pareto", func(p string) (chart.Drawn, error) { return chart.WritePareto(p, "QM-205 fail codes", counts) })
	if p := d.Panels[0]; p.XLabel != "fail code" || p.YLabel != "runs" || strings.Join(p.XTicks, " ") != "trip_high no_trip idle_latched clock_high clock_low stuck_latched lid_open" {
		t.Errorf("Pareto: %q %q %q", p.XLabel, p.YLabel, p.XTicks)
	}
	var hours []chart.Hour
	start := time.Date(2026, 12, 1, 12, 0, 0, 0, time.Local)
	for h, n := range []int{300, 600, 580, 520} {
		hours = append(hours, chart.Hour{Start: start.Add(time.Duration(h) * time.Hour), Total: n, Pass: n - 5 - 3*h})
	}
	d = check(t, "yield", func(p string) (chart.Drawn, error) {
		return chart.WriteHourlyYield(p, "QM-205 first-pass yield by hour", hours, shiftMarks())
	})
	if p := d.Panels[0]; p.YLabel != "first-pass yield (%)" || p.Points != 4 || len(p.XTicks) < 3 || p.XTicks[0] != "12:00" {
		t.Errorf("yield: %q %d %q", p.YLabel, p.Points, p.XTicks)
	}
	if _, err := chart.Pareto(&bytes.Buffer{}, chart.SVG, "none", nil); err == nil {
		t.Error("Pareto of nothing: want an error")
	}
}

func TestRenderErrors(t *testing.T) {
	x, _, _ := shift()
	c, err := drift.EWMAChart(x, drift.FirstN(50), drift.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := chart.WriteFile(filepath.Join(t.TempDir(), "x.pdf"), chart.Options{}, chart.Group{Charts: []drift.Chart{c}}); !errors.Is(err, chart.ErrFormat) {
		t.Errorf("pdf: %v", err)
	}
	if _, err := chart.Render(&bytes.Buffer{}, chart.SVG, chart.Options{}); err == nil {
		t.Error("no charts: want an error")
	}
}
