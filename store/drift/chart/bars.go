package chart

import (
	"fmt"
	"image/color"
	"io"
	"math"
	"sort"
	"strconv"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"

	"padline/store/drift"
)

// Count is one bar of a Pareto chart: a fail code and its runs.
type Count struct {
	Label string
	N     int
}

// Pareto draws fail codes as bars, most frequent first, on an axis up to
// their total, with the cumulative count as a line labelled in per cent
// and a dotted line at 80 % (the Pareto chart of Juran's quality
// handbook; Montgomery, Introduction to Statistical Quality Control,
// §5.4).
func Pareto(w io.Writer, f Format, title string, counts []Count) (Drawn, error) {
	d := Drawn{Format: f}
	cs := append([]Count(nil), counts...)
	sort.SliceStable(cs, func(i, j int) bool { return cs[i].N > cs[j].N || (cs[i].N == cs[j].N && cs[i].Label < cs[j].Label) })
	total := 0
	for _, c := range cs {
		total += c.N
	}
	if total == 0 {
		return d, fmt.Errorf("render Pareto chart: no failed runs")
	}
	p := plot.New()
	p.Title.Text = fmt.Sprintf("%s (%d failed runs)", title, total)
	p.Title.TextStyle.Font.Size = vg.Points(11)
	p.X.Label.Text = "fail code"
	p.Y.Label.Text = "runs"
	vals := make(plotter.Values, len(cs))
	names := make([]string, len(cs))
	var cum plotter.XYs
	var cumLabels, barLabels []string
	var barTops plotter.XYs
	run := 0
	for i, c := range cs {
		vals[i], names[i] = float64(c.N), c.Label
		run += c.N
		cum = append(cum, plotter.XY{X: float64(i), Y: float64(run)})
		cumLabels = append(cumLabels, strconv.Itoa(int(math.Round(100*float64(run)/float64(total))))+" %")
		// The count sits inside a tall bar's top, above a short one.
		top := float64(c.N)
		if float64(c.N) < 0.15*float64(total) {
			top += 0.09 * float64(total)
		}
		barTops = append(barTops, plotter.XY{X: float64(i), Y: top})
		barLabels = append(barLabels, strconv.Itoa(c.N))
	}
	barW := (14 * vg.Centimeter) / vg.Length(len(cs)+1) * 0.7
	bars, err := plotter.NewBarChart(vals, barW)
	if err != nil {
		return d, err
	}
	bars.Color, bars.LineStyle.Color, bars.LineStyle.Width = lightGrey, darkGrey, 0.6
	line, pts, err := plotter.NewLinePoints(cum)
	if err != nil {
		return d, err
	}
	line.Color, line.Width = black, 1
	pts.Shape, pts.Radius = draw.CircleGlyph{}, vg.Points(2)
	p.Add(bars, line, pts)
	for _, l := range []struct {
		xy     plotter.XYs
		labels []string
		dy     vg.Length
		dx     vg.Length
		align  draw.XAlignment
	}{{cum, cumLabels, 4, -4, draw.XRight}, {barTops, barLabels, -11, 0, draw.XCenter}} {
		lb, err := plotter.NewLabels(plotter.XYLabels{XYs: l.xy, Labels: l.labels})
		if err != nil {
			return d, err
		}
		for i := range lb.TextStyle {
			lb.TextStyle[i].Font.Size, lb.TextStyle[i].XAlign = vg.Points(8), l.align
		}
		lb.Offset = vg.Point{X: l.dx, Y: l.dy}
		p.Add(lb)
	}
	p.NominalX(names...)
	p.X.Tick.Label.Rotation = math.Pi / 6
	p.X.Tick.Label.XAlign, p.X.Tick.Label.YAlign = draw.XRight, draw.YTop
	p.Y.Tick.Marker = readTicks{}
	p.X.Min, p.X.Max = -0.6, float64(len(cs))-0.4
	p.Y.Min, p.Y.Max = 0, float64(total)*1.12
	eighty, err := hline(p, 0.8*float64(total), p.X.Min, p.X.Max, midGrey, 0.6, vg.Points(1), vg.Points(2))
	if err != nil {
		return d, err
	}
	leg := newLegend()
	leg.Add("runs with this fail code", bars)
	leg.Add("cumulative share", line, pts)
	leg.Add("80 % of the runs", eighty)
	d.Panels = []PanelInfo{{Kind: "pareto", Title: p.Title.Text, XLabel: p.X.Label.Text, YLabel: p.Y.Label.Text, XTicks: names, Points: len(cs)}}
	return d, single(w, f, p, leg, 17*vg.Centimeter, 9*vg.Centimeter, &d)
}

// Hour is one hour's first units: how many there were and how many passed
// their first test.
type Hour struct {
	Start       time.Time
	Pass, Total int
}

// HourlyYield draws each hour's first-pass yield with its exact
// Clopper–Pearson 95 % interval (drift.FirstPassYield), the whole
// selection's yield as a dashed line, each hour's count of first units
// under its point, and the marks (shift changes).
func HourlyYield(w io.Writer, f Format, title string, hours []Hour, marks []Mark) (Drawn, error) {
	d := Drawn{Format: f}
	var pts, ns plotter.XYs
	var errs plotter.YErrors
	var nLabels []string
	pass, total := 0, 0
	lo := 100.0
	for _, h := range hours {
		if h.Total == 0 {
			continue
		}
		y, err := drift.FirstPassYield(h.Pass, h.Total, 0.95)
		if err != nil {
			return d, err
		}
		x := float64(h.Start.Unix()) + 1800
		pts = append(pts, plotter.XY{X: x, Y: 100 * y.Rate})
		errs = append(errs, struct{ Low, High float64 }{100 * (y.Rate - y.Low), 100 * (y.High - y.Rate)})
		ns = append(ns, plotter.XY{X: x, Y: 100 + 0.1*(100-lo)})
		nLabels = append(nLabels, "n "+strconv.Itoa(h.Total))
		lo = math.Min(lo, 100*y.Low)
		pass, total = pass+h.Pass, total+h.Total
	}
	if total == 0 {
		return d, fmt.Errorf("render hourly yield chart: no first units")
	}
	p := plot.New()
	p.Title.Text = title
	p.Title.TextStyle.Font.Size = vg.Points(11)
	p.X.Label.Text = "hour (local), each serial's first unit verdict"
	p.Y.Label.Text = "first-pass yield (%)"
	xlo, xhi := pts[0].X-1800, pts[len(pts)-1].X+1800
	ylo := math.Max(0, math.Floor(lo)-2)
	yhi := 100.0 + 0.12*(100-ylo)
	for i := range ns {
		ns[i].Y = yhi
	}
	eb := &plotter.YErrorBars{XYs: pts, YErrors: errs, LineStyle: draw.LineStyle{Color: black, Width: 0.8}, CapWidth: vg.Points(5)}
	sc, err := plotter.NewScatter(pts)
	if err != nil {
		return d, err
	}
	sc.Shape, sc.Radius = draw.CircleGlyph{}, vg.Points(2.2)
	p.Add(eb, sc)
	all := 100 * float64(pass) / float64(total)
	whole, err := hline(p, all, xlo, xhi, darkGrey, 1, vg.Points(6), vg.Points(3))
	if err != nil {
		return d, err
	}
	lb, err := plotter.NewLabels(plotter.XYLabels{XYs: ns, Labels: nLabels})
	if err != nil {
		return d, err
	}
	for i := range lb.TextStyle {
		lb.TextStyle[i].Font.Size, lb.TextStyle[i].XAlign, lb.TextStyle[i].YAlign = vg.Points(7), draw.XCenter, draw.YTop
	}
	lb.Offset = vg.Point{Y: -vg.Points(2)}
	p.Add(lb)
	cl := &cell{p: p, g: Group{Times: []int64{int64(xlo * 1e9), int64(xhi * 1e9)}}, xlo: xlo, xhi: xhi, ylo: ylo, yhi: yhi}
	if err := cl.addMarks(Options{X: XTime, Marks: marks}); err != nil {
		return d, err
	}
	p.X.Tick.Marker = timeTicks{max: max(4, min(12, len(hours)+1))}
	p.Y.Tick.Marker = readTicks{}
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = xlo, xhi, ylo, yhi
	leg := newLegend()
	leg.Add("the hour's yield", sc)
	leg.Add("95 % CI, Clopper–Pearson", barThumb{})
	leg.Add(fmt.Sprintf("whole selection %.1f %%", all), whole)
	for _, e := range cl.legend {
		leg.Add(e.label, e.thumbs...)
	}
	var ticks []string
	for _, tk := range p.X.Tick.Marker.Ticks(xlo, xhi) {
		if tk.Label != "" {
			ticks = append(ticks, tk.Label)
		}
	}
	d.Panels = []PanelInfo{{Kind: "hourly-yield", Title: p.Title.Text, XLabel: p.X.Label.Text, YLabel: p.Y.Label.Text, XTicks: ticks, Points: len(pts)}}
	return d, single(w, f, p, leg, 17*vg.Centimeter, 8*vg.Centimeter, &d)
}

// WritePareto and WriteHourlyYield write to a file by its extension.
func WritePareto(path, title string, counts []Count) (Drawn, error) {
	return writeFile(path, func(w io.Writer, f Format) (Drawn, error) { return Pareto(w, f, title, counts) })
}

// WriteHourlyYield writes HourlyYield to path.
func WriteHourlyYield(path, title string, hours []Hour, marks []Mark) (Drawn, error) {
	return writeFile(path, func(w io.Writer, f Format) (Drawn, error) { return HourlyYield(w, f, title, hours, marks) })
}

func hline(p *plot.Plot, y, x0, x1 float64, c color.Color, w vg.Length, dashes ...vg.Length) (*plotter.Line, error) {
	l, err := plotter.NewLine(plotter.XYs{{X: x0, Y: y}, {X: x1, Y: y}})
	if err != nil {
		return nil, err
	}
	l.Color, l.Width, l.Dashes = c, w, dashes
	p.Add(l)
	return l, nil
}

// single draws one plot with its legend at the right and writes it.
func single(w io.Writer, f Format, p *plot.Plot, leg plot.Legend, width, height vg.Length, d *Drawn) error {
	W := width + legendW
	var (
		canvas vg.CanvasSizer
		svg    *vgsvg.Canvas
		img    *vgimg.Canvas
	)
	switch f {
	case SVG:
		svg = vgsvg.New(W, height)
		canvas = svg
	case PNG:
		img = vgimg.NewWith(vgimg.UseWH(W, height), vgimg.UseDPI(150))
		canvas = img
	default:
		return fmt.Errorf("render chart as %q: %w", f, ErrFormat)
	}
	dc := draw.New(canvas)
	area := draw.Crop(dc, vg.Millimeter*2, -legendW, vg.Millimeter*2, -vg.Millimeter*2)
	p.Draw(area)
	lc := area
	lc.Min.X, lc.Max.X = area.Max.X+vg.Millimeter*2, area.Max.X+legendW
	lc.Max.Y -= vg.Centimeter
	leg.Draw(lc)
	cw := &countWriter{w: w}
	var err error
	if f == SVG {
		_, err = svg.WriteTo(cw)
	} else {
		err = writeGrayPNG(cw, img.Image())
	}
	if err != nil {
		return fmt.Errorf("write chart: %w", err)
	}
	d.Bytes = cw.n
	return nil
}

// barThumb is an error bar's legend thumbnail: a capped vertical line.
type barThumb struct{}

func (barThumb) Thumbnail(c *draw.Canvas) {
	x := (c.Min.X + c.Max.X) / 2
	sty := draw.LineStyle{Color: black, Width: 0.8}
	c.StrokeLine2(sty, x, c.Min.Y, x, c.Max.Y)
	c.StrokeLine2(sty, x-vg.Points(2.5), c.Min.Y, x+vg.Points(2.5), c.Min.Y)
	c.StrokeLine2(sty, x-vg.Points(2.5), c.Max.Y, x+vg.Points(2.5), c.Max.Y)
}
