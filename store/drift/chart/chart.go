package chart

import (
	"errors"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"

	"padline/store/drift"
)

// Format is an output format.
type Format string

// Formats.
const (
	SVG Format = "svg"
	PNG Format = "png"
)

// ErrFormat reports an output format other than SVG or PNG.
var ErrFormat = errors.New("chart: unknown format (want .svg or .png)")

// Options label and size the drawing.
type Options struct {
	Title    string // heading over the first panel; default the chart kinds
	Quantity string // what the series is, e.g. "trip point"; default "value"
	Unit     string // unit of the series, e.g. "pF"
	By       string // what the groups are ("station"), for panel titles
	// X is what the x axis counts; default XTime when the groups have
	// times, else XPoint.
	X XAxis
	// Marks are vertical lines at these times (shift boundaries), drawn
	// when the groups have times.
	Marks  []Mark
	Width  vg.Length // of one column of panels; default 17 cm (12 cm with several groups)
	Height vg.Length // of one panel; default 7.5 cm (5.5 cm with several groups)
	DPI    int       // PNG only; default 150
}

// Mark is a labelled moment on a time axis, e.g. "14:00 late shift".
type Mark struct {
	At    time.Time
	Label string
}

// Group is one series' charts (one group of --by), with what names its
// points.
type Group struct {
	Name   string        // the group's key under --by; "" for the only one
	Charts []drift.Chart // of the one series, drawn side by side under --by
	// Times are the series' points' times, Unix ns (nil: points only by
	// number).
	Times []int64
	// Serial names unit i (0-based) for XSerial ticks.
	Serial func(unit int) string
	// Approved names the approved baseline the charts use: no window of
	// the series is shaded then.
	Approved string
}

// Drawn is what a rendering drew, for tests and reports.
type Drawn struct {
	Format Format
	Bytes  int64
	Panels []PanelInfo
}

// PanelInfo describes one drawn panel.
type PanelInfo struct {
	Group, Kind    string
	Title          string
	XLabel, YLabel string
	XTicks, YTicks []string // the labelled ticks
	Points, Drawn  int      // chart points, and how many the lines pass through
	Alarms         int      // alarms of the chart
	Runs           int      // alarm runs marked (one ring and bar each)
	Labelled       int      // runs with their numbers written
	OffScale       bool     // a CUSUM went beyond the drawn 3h
}

var (
	black     = color.Gray{0}
	darkGrey  = color.Gray{80}
	midGrey   = color.Gray{140}
	lightGrey = color.Gray{225}
)

const legendW = 4.6 * vg.Centimeter

// Render draws the groups' charts and writes them to w in format f. One
// group's charts are stacked top to bottom (individuals over moving
// range); several groups are small multiples, a row per group and a
// column per chart kind, on one time (or unit) axis and one y scale per
// column, so groups compare at a glance.
func Render(w io.Writer, f Format, o Options, groups ...Group) (Drawn, error) {
	d := Drawn{Format: f}
	if len(groups) == 0 || len(groups[0].Charts) == 0 {
		return d, errors.New("render chart: nothing to draw")
	}
	if f != SVG && f != PNG {
		return d, fmt.Errorf("render chart as %q: %w", f, ErrFormat)
	}
	multi := len(groups) > 1
	if o.Width == 0 {
		o.Width = 17 * vg.Centimeter
		if multi {
			o.Width = 12 * vg.Centimeter
		}
	}
	if o.Height == 0 {
		o.Height = 7.5 * vg.Centimeter
		if multi {
			o.Height = 5.5 * vg.Centimeter
		}
	}
	if o.DPI == 0 {
		o.DPI = 150
	}
	if o.X == "" || o.X == XTime {
		o.X = XTime
		for _, g := range groups {
			if len(g.Times) == 0 {
				o.X = XPoint
			}
		}
	}
	if o.X == XSerial {
		for _, g := range groups {
			if g.Serial == nil {
				o.X = XPoint
			}
		}
	}
	cols := len(groups[0].Charts)
	rows := len(groups)
	if !multi {
		rows, cols = cols, 1
	}
	cells := make([][]*cell, rows)
	for r := range cells {
		cells[r] = make([]*cell, cols)
	}
	for gi, g := range groups {
		if len(g.Charts) != len(groups[0].Charts) {
			return d, fmt.Errorf("render chart: group %s has %d charts, the first %d", g.Name, len(g.Charts), len(groups[0].Charts))
		}
		for ci, c := range g.Charts {
			r, col := gi, ci
			if !multi {
				r, col = ci, 0
			}
			cells[r][col] = &cell{c: c, g: g, col: ci}
		}
	}
	// One x range for all; one y range per chart kind (column).
	xlo, xhi := math.Inf(1), math.Inf(-1)
	ylo, yhi := map[int]float64{}, map[int]float64{}
	for _, row := range cells {
		for _, cl := range row {
			cl.x = xMap(cl.g, o.X)
			if len(cl.c.Stat) > 0 {
				xlo = math.Min(xlo, cl.x(unitOf(cl.c, 0)))
				xhi = math.Max(xhi, cl.x(unitOf(cl.c, len(cl.c.Stat)-1)))
			}
			lo, hi, off := yRange(cl.c)
			if math.IsInf(lo, 0) {
				return d, fmt.Errorf("render %s chart: no finite points", cl.c.Kind)
			}
			cl.offScale = off
			k := cl.col
			if !multi {
				k = -1 - cl.col // stacked charts of one group keep their own scales
			}
			if v, ok := ylo[k]; !ok || lo < v {
				ylo[k] = lo
			}
			if v, ok := yhi[k]; !ok || hi > v {
				yhi[k] = hi
			}
		}
	}
	if o.X == XTime {
		pad := 0.01 * (xhi - xlo)
		xlo, xhi = xlo-pad, xhi+pad
	} else {
		xlo, xhi = xlo-0.5, xhi+0.5
	}
	if !(xhi > xlo) {
		xlo, xhi = xlo-1, xhi+1
	}
	plots := make([][]*plot.Plot, rows)
	var legends []plot.Legend
	for r, row := range cells {
		plots[r] = make([]*plot.Plot, cols)
		for ci, cl := range row {
			k := cl.col
			if !multi {
				k = -1 - cl.col
			}
			lo, hi := ylo[k], yhi[k]
			if hi == lo {
				lo, hi = lo-1, hi+1
			}
			// Room above and below for the alarm bars and their numbers.
			pad := 0.2 * (hi - lo)
			cl.xlo, cl.xhi, cl.ylo, cl.yhi = xlo, xhi, lo-pad, hi+pad
			first := r == 0 && ci == 0
			info, err := cl.build(o, multi, first)
			if err != nil {
				return d, fmt.Errorf("render %s chart: %w", cl.c.Kind, err)
			}
			plots[r][ci] = cl.p
			d.Panels = append(d.Panels, info)
		}
		if !multi || r == 0 {
			leg := newLegend()
			seen := map[string]bool{}
			for _, cl := range row {
				for _, e := range cl.legend {
					if !seen[e.label] {
						seen[e.label] = true
						leg.Add(e.label, e.thumbs...)
					}
				}
			}
			legends = append(legends, leg)
		}
	}
	W := o.Width*vg.Length(cols) + legendW
	H := o.Height * vg.Length(rows)
	var (
		canvas vg.CanvasSizer
		svg    *vgsvg.Canvas
		img    *vgimg.Canvas
	)
	if f == SVG {
		svg = vgsvg.New(W, H)
		canvas = svg
	} else {
		img = vgimg.NewWith(vgimg.UseWH(W, H), vgimg.UseDPI(o.DPI))
		canvas = img
	}
	dc := draw.New(canvas)
	area := draw.Crop(dc, 0, -legendW, 0, 0)
	tiles := draw.Tiles{Rows: rows, Cols: cols, PadTop: vg.Millimeter * 2, PadBottom: vg.Millimeter * 2,
		PadLeft: vg.Millimeter * 2, PadRight: vg.Millimeter * 3, PadX: vg.Millimeter * 4, PadY: vg.Millimeter * 4}
	cs := plot.Align(plots, tiles, area)
	for r := range plots {
		for c := range plots[r] {
			plots[r][c].Draw(cs[r][c])
		}
		if r < len(legends) {
			lc := cs[r][cols-1]
			lc.Min.X, lc.Max.X = lc.Max.X+vg.Millimeter*2, lc.Max.X+legendW
			lc.Max.Y -= vg.Centimeter
			legends[r].Draw(lc)
		}
	}
	cw := &countWriter{w: w}
	var err error
	if f == SVG {
		_, err = svg.WriteTo(cw)
	} else {
		err = writeGrayPNG(cw, img.Image())
	}
	if err != nil {
		return d, fmt.Errorf("write chart: %w", err)
	}
	d.Bytes = cw.n
	return d, nil
}

// writeGrayPNG writes m as an 8-bit grey PNG: the charts are drawn in
// greys only (line styles, not colours, tell lines apart), so nothing is
// lost and the file is about a third of an RGBA one.
func writeGrayPNG(w io.Writer, m image.Image) error {
	b := m.Bounds()
	g := image.NewGray(b)
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			g.Set(x, y, m.At(x, y))
		}
	}
	enc := png.Encoder{CompressionLevel: png.BestCompression}
	return enc.Encode(w, g)
}

type countWriter struct {
	w io.Writer
	n int64
}

func (c *countWriter) Write(p []byte) (int, error) {
	n, err := c.w.Write(p)
	c.n += int64(n)
	return n, err
}

// FormatOf is the format a path's extension asks for.
func FormatOf(path string) (Format, error) {
	f := Format(strings.ToLower(strings.TrimPrefix(filepath.Ext(path), ".")))
	if f != SVG && f != PNG {
		return f, fmt.Errorf("write chart %s: %w", path, ErrFormat)
	}
	return f, nil
}

// WriteFile renders to path, choosing SVG or PNG by its extension.
func WriteFile(path string, o Options, groups ...Group) (Drawn, error) {
	return writeFile(path, func(w io.Writer, f Format) (Drawn, error) { return Render(w, f, o, groups...) })
}

func writeFile(path string, render func(io.Writer, Format) (Drawn, error)) (d Drawn, err error) {
	f, err := FormatOf(path)
	if err != nil {
		return d, err
	}
	out, err := os.Create(path)
	if err != nil {
		return d, fmt.Errorf("write chart: %w", err)
	}
	defer func() {
		if cerr := out.Close(); err == nil && cerr != nil {
			err = fmt.Errorf("write chart: %w", cerr)
		}
	}()
	return render(out, f)
}

// unitOf is the series index of chart point i's last observation.
func unitOf(c drift.Chart, i int) int {
	s := c.Size
	if s < 1 {
		s = 1
	}
	return (i+1)*s - 1
}

// xMap places a series index on the x axis: its time in Unix seconds, or
// its unit number (from 1).
func xMap(g Group, x XAxis) func(unit int) float64 {
	if x == XTime {
		t := g.Times
		return func(u int) float64 {
			u = min(max(u, 0), len(t)-1)
			return float64(t[u]) / 1e9
		}
	}
	return func(u int) float64 { return float64(u + 1) }
}

// yRange is the y range a chart needs: data, centre and limits; a CUSUM
// is scaled to its decision interval h: at least ±h, at most ±3h (off
// reports sums beyond it, drawn clipped at the edge).
func yRange(c drift.Chart) (lo, hi float64, off bool) {
	lo, hi = math.Inf(1), math.Inf(-1)
	for _, s := range [][]float64{c.Stat, c.Stat2, c.Upper, c.Lower, {c.Center}} {
		for _, v := range s {
			if !math.IsNaN(v) && !math.IsInf(v, 0) {
				lo, hi = math.Min(lo, v), math.Max(hi, v)
			}
		}
	}
	if c.Kind == drift.CUSUM {
		h := cusumH(c)
		if h > 0 {
			if hi > 3*h || lo < -3*h {
				off = true
			}
			lo, hi = math.Max(lo, -3*h), math.Min(hi, 3*h)
			lo, hi = math.Min(lo, -1.1*h), math.Max(hi, 1.1*h)
		}
	}
	return lo, hi, off
}

// cusumH is a CUSUM chart's decision interval H (its upper limit).
func cusumH(c drift.Chart) float64 {
	for _, v := range c.Upper {
		if v > 0 && !math.IsInf(v, 0) {
			return v
		}
	}
	return 0
}

func yLabel(c drift.Chart, o Options) string {
	q := o.Quantity
	if q == "" {
		q = "value"
	}
	var s string
	switch c.Kind {
	case drift.Individuals:
		s = q
	case drift.Xbar:
		s = "mean " + q
	case drift.MovingRange:
		s = "moving range"
	case drift.Range:
		s = "range"
	case drift.StdDev:
		s = "std. deviation"
	case drift.EWMA:
		s = "EWMA of " + q
	case drift.CUSUM:
		s = "C+ and −C−"
	default:
		s = string(c.Kind)
	}
	if o.Unit != "" {
		s += " (" + o.Unit + ")"
	}
	return s
}

func xLabel(c drift.Chart, x XAxis, times []int64) string {
	var s string
	switch x {
	case XTime:
		s = "time (local)"
		if len(times) > 0 {
			a, b := time.Unix(0, times[0]), time.Unix(0, times[len(times)-1])
			if a.Local().YearDay() == b.Local().YearDay() {
				s = "time on " + a.Local().Format("2006-01-02") + " (local)"
			}
		}
	case XSerial:
		s = "serial (in test order)"
	default:
		s = "unit (in test order)"
	}
	if c.Size > 1 {
		s += fmt.Sprintf(", subgroups of %d at their last unit", c.Size)
	}
	return s
}

// cell is one panel while it is built.
type cell struct {
	c                  drift.Chart
	g                  Group
	col                int
	x                  func(unit int) float64
	xlo, xhi, ylo, yhi float64
	offScale           bool
	p                  *plot.Plot
	legend             []legendEntry
}

type legendEntry struct {
	label  string
	thumbs []plot.Thumbnailer
}

func newLegend() plot.Legend {
	leg := plot.NewLegend()
	leg.Top, leg.Left = true, true
	leg.Padding = vg.Millimeter
	leg.TextStyle.Font.Size = vg.Points(9)
	return leg
}

func (cl *cell) addLegend(label string, t ...plot.Thumbnailer) {
	cl.legend = append(cl.legend, legendEntry{label, t})
}

// hline is a line across the panel at y.
func (cl *cell) hline(y float64, col color.Color, w vg.Length, dashes ...vg.Length) (*plotter.Line, error) {
	l, err := plotter.NewLine(plotter.XYs{{X: cl.xlo, Y: y}, {X: cl.xhi, Y: y}})
	if err != nil {
		return nil, err
	}
	l.Color, l.Width, l.Dashes = col, w, dashes
	cl.p.Add(l)
	return l, nil
}

// plotWidth is about how wide the data area of a panel is.
func plotWidth(o Options) vg.Length { return o.Width - 2.2*vg.Centimeter }

// build draws the cell's panel on the ranges already set.
func (cl *cell) build(o Options, multi, first bool) (PanelInfo, error) {
	c := cl.c
	p := plot.New()
	cl.p = p
	info := PanelInfo{Group: cl.g.Name, Kind: string(c.Kind), Points: len(c.Stat), Alarms: len(c.Alarms), OffScale: cl.offScale}
	title := c.Kind.Title()
	switch {
	case multi:
		title = strings.TrimSpace(o.By+" "+cl.g.Name) + ": " + title
		if first && o.Title != "" {
			title = o.Title + "\n" + title
		}
	case first && o.Title != "":
		title = o.Title
	case c.Kind == drift.Individuals || c.Kind == drift.Xbar || c.Kind == drift.EWMA || c.Kind == drift.CUSUM:
		if cl.g.Approved != "" {
			title += " — approved baseline " + cl.g.Approved
		} else {
			title += " — baseline " + c.Window.String()
		}
	}
	// The fonts place a combining overline badly: spell X̄ out.
	p.Title.Text = strings.ReplaceAll(title, "X̄", "X-bar")
	p.Title.TextStyle.Font.Size = vg.Points(11)
	p.X.Label.Text = xLabel(c, o.X, cl.g.Times)
	p.Y.Label.Text = yLabel(c, o)
	info.Title, info.XLabel, info.YLabel = p.Title.Text, p.X.Label.Text, p.Y.Label.Text
	switch o.X {
	case XTime:
		p.X.Tick.Marker = timeTicks{max: int(plotWidth(o) / (1.6 * vg.Centimeter))}
	case XSerial:
		p.X.Tick.Marker = unitTicks{name: cl.g.Serial, n: len(cl.g.Times)}
	default:
		p.X.Tick.Marker = unitTicks{}
	}
	p.Y.Tick.Marker = readTicks{}
	for _, tk := range p.X.Tick.Marker.Ticks(cl.xlo, cl.xhi) {
		if tk.Label != "" {
			info.XTicks = append(info.XTicks, tk.Label)
		}
	}
	for _, tk := range p.Y.Tick.Marker.Ticks(cl.ylo, cl.yhi) {
		if tk.Label != "" {
			info.YTicks = append(info.YTicks, tk.Label)
		}
	}
	num := func(v float64) string {
		if multi {
			return ""
		}
		return fmt.Sprintf(" %.4g", v)
	}

	// Baseline window, shaded (not when the baseline is an approved one
	// from outside the series).
	if c.Base.Len() > 0 && cl.g.Approved == "" {
		a, b := cl.x(unitOf(c, c.Base.Start)), cl.x(unitOf(c, c.Base.End-1))
		if o.X != XTime {
			a, b = a-0.5*float64(max(c.Size, 1)), b+0.5
		}
		poly, err := plotter.NewPolygon(plotter.XYs{{X: a, Y: cl.ylo}, {X: b, Y: cl.ylo}, {X: b, Y: cl.yhi}, {X: a, Y: cl.yhi}})
		if err != nil {
			return info, err
		}
		poly.Color, poly.LineStyle.Width = lightGrey, 0
		p.Add(poly)
		cl.addLegend("baseline window", poly)
	}
	if err := cl.addMarks(o); err != nil {
		return info, err
	}
	if c.Zone > 0 {
		for _, k := range []float64{-2, -1, 1, 2} {
			l, err := cl.hline(c.Center+k*c.Zone, midGrey, 0.5, vg.Points(1), vg.Points(2))
			if err != nil {
				return info, err
			}
			if k == 1 {
				cl.addLegend("±1σ, ±2σ", l)
			}
		}
	}
	centre, err := cl.hline(c.Center, darkGrey, 1.2)
	if err != nil {
		return info, err
	}
	cl.addLegend("centre"+num(c.Center), centre)

	cols := int(plotWidth(o) / vg.Points(1.5))
	idx := drawn(c, cols)
	info.Drawn = len(idx)
	xy := func(v []float64) plotter.XYs {
		var out plotter.XYs
		for _, i := range idx {
			if i >= len(v) {
				break
			}
			if y := v[i]; !math.IsNaN(y) && !math.IsInf(y, 0) {
				out = append(out, plotter.XY{X: cl.x(unitOf(c, i)), Y: y})
			}
		}
		return out
	}
	for j, lim := range [][]float64{c.Upper, c.Lower} {
		if j == 1 && allZero(lim) && c.Kind != drift.CUSUM {
			continue
		}
		var pts plotter.XYs
		if v, ok := constant(lim); ok {
			pts = plotter.XYs{{X: cl.xlo, Y: v}, {X: cl.xhi, Y: v}}
		} else {
			pts = xy(lim)
		}
		if len(pts) == 0 {
			continue
		}
		l, err := plotter.NewLine(pts)
		if err != nil {
			return info, err
		}
		l.Color, l.Width, l.Dashes = black, 1.2, []vg.Length{vg.Points(6), vg.Points(3)}
		p.Add(l)
		if j == 0 {
			cl.addLegend(limitLabel(c, multi), l)
		}
	}
	for j, s := range [][]float64{c.Stat, c.Stat2} {
		pts := xy(s)
		if len(pts) == 0 {
			continue
		}
		var l *plotter.Line
		for _, seg := range cl.segments(pts, o.X) {
			sl, err := plotter.NewLine(seg)
			if err != nil {
				return info, err
			}
			sl.Color, sl.Width = black, 0.7
			if j == 1 {
				sl.Color, sl.Dashes = darkGrey, []vg.Length{vg.Points(2), vg.Points(1)}
			}
			p.Add(sl)
			l = sl
		}
		// Dots only where they stay apart; a long series is its line.
		if len(pts) <= 250 {
			sc, err := plotter.NewScatter(pts)
			if err != nil {
				return info, err
			}
			sc.Shape, sc.Color, sc.Radius = draw.CircleGlyph{}, l.Color, vg.Points(1.3)
			p.Add(sc)
		}
		if c.Kind == drift.CUSUM {
			cl.addLegend([]string{"C+ (upper sum)", "−C− (lower sum)"}[j], l)
		}
	}
	if err := cl.addAlarms(o, &info); err != nil {
		return info, err
	}
	if cl.offScale {
		l, err := cl.hline(cl.yhi, black, 0)
		if err != nil {
			return info, err
		}
		cl.addLegend("sums beyond ±3h: off scale", l)
	}
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = cl.xlo, cl.xhi, cl.ylo, cl.yhi
	return info, nil
}

// segments cuts a time series' line where the line stood still for long
// (a break, the night): a gap over 10 times the mean spacing of the
// series' points is left open instead of drawn as a slope.
func (cl *cell) segments(pts plotter.XYs, x XAxis) []plotter.XYs {
	n := len(cl.c.Stat)
	if x != XTime || n < 2 || len(pts) < 2 {
		return []plotter.XYs{pts}
	}
	gap := 10 * (cl.x(unitOf(cl.c, n-1)) - cl.x(unitOf(cl.c, 0))) / float64(n-1)
	var out []plotter.XYs
	start := 0
	for i := 1; i < len(pts); i++ {
		if pts[i].X-pts[i-1].X > gap {
			out = append(out, pts[start:i])
			start = i
		}
	}
	return append(out, pts[start:])
}

// addMarks draws the shift boundaries as dotted verticals labelled at
// the top.
func (cl *cell) addMarks(o Options) error {
	t := cl.g.Times
	if len(t) == 0 || len(o.Marks) == 0 {
		return nil
	}
	var xs plotter.XYs
	var labels []string
	for _, m := range o.Marks {
		x := float64(m.At.UnixNano()) / 1e9
		if o.X != XTime {
			i := sort.Search(len(t), func(i int) bool { return t[i] >= m.At.UnixNano() })
			x = float64(i) + 0.5
		}
		if x <= cl.xlo || x >= cl.xhi {
			continue
		}
		l, err := plotter.NewLine(plotter.XYs{{X: x, Y: cl.ylo}, {X: x, Y: cl.yhi}})
		if err != nil {
			return err
		}
		l.Color, l.Width, l.Dashes = darkGrey, 0.8, []vg.Length{vg.Points(0.8), vg.Points(2.4)}
		cl.p.Add(l)
		if len(xs) == 0 {
			cl.addLegend("shift change", l)
		}
		xs = append(xs, plotter.XY{X: x, Y: cl.ylo})
		labels = append(labels, m.Label)
	}
	if len(xs) == 0 {
		return nil
	}
	lb, err := plotter.NewLabels(plotter.XYLabels{XYs: xs, Labels: labels})
	if err != nil {
		return err
	}
	for i := range lb.TextStyle {
		lb.TextStyle[i].Font.Size = vg.Points(7)
		lb.TextStyle[i].Color = darkGrey
		lb.TextStyle[i].YAlign = draw.YBottom
	}
	lb.Offset = vg.Point{X: vg.Points(2), Y: vg.Points(1)}
	cl.p.Add(lb)
	return nil
}

func allZero(v []float64) bool {
	for _, x := range v {
		if x != 0 {
			return false
		}
	}
	return true
}

// constant reports whether every finite value of v is the same.
func constant(v []float64) (float64, bool) {
	c, ok := math.NaN(), false
	for _, x := range v {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			continue
		}
		if ok && x != c {
			return 0, false
		}
		c, ok = x, true
	}
	return c, ok
}

func limitLabel(c drift.Chart, multi bool) string {
	switch {
	case c.Kind == drift.EWMA:
		return "limits (exact, time-varying)"
	case c.Kind == drift.CUSUM && !multi:
		return fmt.Sprintf("decision interval ±h = ±%.4g", cusumH(c))
	case c.Kind == drift.CUSUM:
		return "decision interval ±h"
	case multi || len(c.Upper) == 0:
		return "limits"
	}
	return fmt.Sprintf("limits %.4g / %.4g", c.Upper[0], c.Lower[0])
}
