package chart

import (
	"errors"
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"

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

// Options label the drawing. The zero value draws "value" against
// "unit index" at 22 cm (5 cm of it legend) by 8 cm per panel.
type Options struct {
	Title    string    // heading over the first panel; default the chart kinds
	Quantity string    // what the series is, e.g. "trip point"; default "value"
	Unit     string    // unit of the series, e.g. "pF"
	XLabel   string    // default "unit index" or "subgroup (n = N)"
	Width    vg.Length // default 22 cm, legend column included
	Height   vg.Length // per panel; default 8 cm
	DPI      int       // PNG only; default 150
}

var (
	black     = color.Gray{0}
	darkGrey  = color.Gray{80}
	midGrey   = color.Gray{140}
	lightGrey = color.Gray{225}
)

// Render draws the charts stacked top to bottom (for example individuals
// over moving range) and writes them to w in format f.
func Render(w io.Writer, f Format, o Options, charts ...drift.Chart) error {
	if len(charts) == 0 {
		return errors.New("render chart: nothing to draw")
	}
	if o.Width == 0 {
		o.Width = 22 * vg.Centimeter
	}
	if o.Height == 0 {
		o.Height = 8 * vg.Centimeter
	}
	if o.DPI == 0 {
		o.DPI = 150
	}
	// The legend sits in its own column right of the data, never over it.
	legendW := 5 * vg.Centimeter
	// A long series is drawn from at most a few points per pixel column.
	columns := int(float64(o.Width-legendW) / float64(vg.Inch) * float64(o.DPI))
	plots := make([][]*plot.Plot, len(charts))
	legends := make([]plot.Legend, len(charts))
	for i, c := range charts {
		p, l, err := panel(c, o, i == 0, columns)
		if err != nil {
			return fmt.Errorf("render %s chart: %w", c.Kind, err)
		}
		plots[i], legends[i] = []*plot.Plot{p}, l
	}
	h := o.Height * vg.Length(len(charts))
	var canvas vg.CanvasWriterTo
	switch f {
	case SVG:
		canvas = vgsvg.New(o.Width, h)
	case PNG:
		canvas = vgimg.PngCanvas{Canvas: vgimg.NewWith(vgimg.UseWH(o.Width, h), vgimg.UseDPI(o.DPI))}
	default:
		return fmt.Errorf("render chart as %q: %w", f, ErrFormat)
	}
	dc := draw.New(canvas)
	plotArea := draw.Crop(dc, 0, -legendW, 0, 0)
	tiles := draw.Tiles{Rows: len(charts), Cols: 1, PadTop: vg.Millimeter * 2, PadBottom: vg.Millimeter * 2, PadLeft: vg.Millimeter * 2, PadRight: vg.Millimeter * 4, PadY: vg.Millimeter * 4}
	cs := plot.Align(plots, tiles, plotArea)
	for i := range plots {
		plots[i][0].Draw(cs[i][0])
		lc := cs[i][0]
		lc.Min.X, lc.Max.X = lc.Max.X+vg.Millimeter*2, lc.Max.X+legendW
		lc.Max.Y -= vg.Centimeter
		legends[i].Draw(lc)
	}
	if _, err := canvas.WriteTo(w); err != nil {
		return fmt.Errorf("write chart: %w", err)
	}
	return nil
}

// WriteFile renders to path, choosing SVG or PNG by its extension.
func WriteFile(path string, o Options, charts ...drift.Chart) (err error) {
	f := Format(strings.ToLower(strings.TrimPrefix(filepath.Ext(path), ".")))
	if f != SVG && f != PNG {
		return fmt.Errorf("write chart %s: %w", path, ErrFormat)
	}
	out, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("write chart: %w", err)
	}
	defer func() {
		if cerr := out.Close(); err == nil && cerr != nil {
			err = fmt.Errorf("write chart: %w", cerr)
		}
	}()
	return Render(out, f, o, charts...)
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
		s = "upper C+, lower −C−"
	default:
		s = string(c.Kind)
	}
	if o.Unit != "" {
		s += " (" + o.Unit + ")"
	}
	return s
}

// xy is v at the points idx (numbered from 1 on the x axis), leaving out
// the undefined ones.
func xy(v []float64, idx []int) plotter.XYs {
	var out plotter.XYs
	for _, i := range idx {
		if i >= len(v) {
			break
		}
		if y := v[i]; !math.IsNaN(y) && !math.IsInf(y, 0) {
			out = append(out, plotter.XY{X: float64(i + 1), Y: y})
		}
	}
	return out
}

func lineStyle(l *plotter.Line, c color.Color, width vg.Length, dashes ...vg.Length) {
	l.Color, l.Width, l.Dashes = c, width, dashes
}

// panel builds one chart, drawn columns pixels wide; points are numbered
// from 1 on the x axis.
func panel(c drift.Chart, o Options, first bool, columns int) (*plot.Plot, plot.Legend, error) {
	p := plot.New()
	leg := plot.NewLegend()
	leg.Top, leg.Left = true, true
	leg.Padding = vg.Millimeter
	leg.TextStyle.Font.Size = vg.Points(9)
	title := o.Title
	if title == "" || !first {
		title = c.Kind.Title()
		if c.Kind == drift.Individuals || c.Kind == drift.Xbar || c.Kind == drift.EWMA || c.Kind == drift.CUSUM {
			title += " — baseline " + c.Window.String()
		}
	}
	// The fonts place a combining overline badly: spell X̄ out.
	p.Title.Text = strings.ReplaceAll(title, "X̄", "X-bar")
	p.X.Label.Text = o.XLabel
	if p.X.Label.Text == "" {
		p.X.Label.Text = "unit index"
		if c.Size > 1 {
			p.X.Label.Text = fmt.Sprintf("subgroup (n = %d)", c.Size)
		}
	}
	p.Y.Label.Text = yLabel(c, o)

	n := len(c.Stat)
	idx := drawn(c, columns)
	// Y range from data and limits, padded for the alarm numbers.
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, s := range [][]float64{c.Stat, c.Stat2, c.Upper, c.Lower} {
		for _, v := range s {
			if !math.IsNaN(v) && !math.IsInf(v, 0) {
				lo, hi = math.Min(lo, v), math.Max(hi, v)
			}
		}
	}
	if math.IsInf(lo, 0) {
		return nil, leg, errors.New("no finite points")
	}
	if hi == lo {
		hi, lo = hi+1, lo-1
	}
	pad := 0.12 * (hi - lo)
	p.Y.Min, p.Y.Max = lo-pad, hi+pad
	p.X.Min, p.X.Max = 0.5, float64(n)+0.5
	p.X.Tick.Marker = wholeTicks{}

	// Baseline window, shaded.
	if c.Base.Len() > 0 {
		b, err := plotter.NewPolygon(plotter.XYs{
			{X: float64(c.Base.Start) + 0.5, Y: p.Y.Min}, {X: float64(c.Base.End) + 0.5, Y: p.Y.Min},
			{X: float64(c.Base.End) + 0.5, Y: p.Y.Max}, {X: float64(c.Base.Start) + 0.5, Y: p.Y.Max},
		})
		if err != nil {
			return nil, leg, err
		}
		b.Color, b.LineStyle.Width = lightGrey, 0
		p.Add(b)
		leg.Add("baseline", b)
	}
	// Zone lines at ±1σ and ±2σ of the statistic (Shewhart location charts).
	if c.Zone > 0 {
		for _, k := range []float64{-2, -1, 1, 2} {
			l, err := plotter.NewLine(plotter.XYs{{X: p.X.Min, Y: c.Center + k*c.Zone}, {X: p.X.Max, Y: c.Center + k*c.Zone}})
			if err != nil {
				return nil, leg, err
			}
			lineStyle(l, midGrey, 0.5, vg.Points(1), vg.Points(2))
			p.Add(l)
			if k == 1 {
				leg.Add("±1σ, ±2σ", l)
			}
		}
	}
	centre, err := plotter.NewLine(plotter.XYs{{X: p.X.Min, Y: c.Center}, {X: p.X.Max, Y: c.Center}})
	if err != nil {
		return nil, leg, err
	}
	lineStyle(centre, darkGrey, 1.2)
	p.Add(centre)
	leg.Add(fmt.Sprintf("centre %.4g", c.Center), centre)
	for j, lim := range [][]float64{c.Upper, c.Lower} {
		pts := xy(lim, idx)
		if len(pts) == 0 || (j == 1 && allZero(lim) && c.Kind != drift.CUSUM) {
			continue
		}
		l, err := plotter.NewLine(pts)
		if err != nil {
			return nil, leg, err
		}
		l.StepStyle = plotter.MidStep
		lineStyle(l, black, 1.2, vg.Points(6), vg.Points(3))
		p.Add(l)
		if j == 0 {
			leg.Add(limitLabel(c), l)
		}
	}
	series := []struct {
		v     []float64
		shape draw.GlyphDrawer
		col   color.Color
	}{{c.Stat, draw.CircleGlyph{}, black}, {c.Stat2, draw.TriangleGlyph{}, darkGrey}}
	for _, s := range series {
		pts := xy(s.v, idx)
		if len(pts) == 0 {
			continue
		}
		l, sc, err := plotter.NewLinePoints(pts)
		if err != nil {
			return nil, leg, err
		}
		l.Color, l.Width = s.col, 0.8
		sc.Shape, sc.Color, sc.Radius = s.shape, s.col, vg.Points(1.6)
		p.Add(l, sc)
	}
	if err := addAlarms(p, &leg, c); err != nil {
		return nil, leg, err
	}
	return p, leg, nil
}

func allZero(v []float64) bool {
	for _, x := range v {
		if x != 0 {
			return false
		}
	}
	return true
}

func limitLabel(c drift.Chart) string {
	if c.Kind == drift.EWMA {
		return "limits (exact, time-varying)"
	}
	if len(c.Upper) > 0 {
		return fmt.Sprintf("limits %.4g / %.4g", c.Upper[0], c.Lower[0])
	}
	return "limits"
}

// addAlarms rings each alarm point and writes its Seq numbers beside it
// (above for alarms on the upper side, below otherwise); several alarms on
// one point share a label "3,4".
func addAlarms(p *plot.Plot, leg *plot.Legend, c drift.Chart) error {
	if len(c.Alarms) == 0 {
		return nil
	}
	type mark struct {
		seqs []string
		side int
	}
	marks := map[int]*mark{}
	for _, a := range c.Alarms {
		m := marks[a.Index]
		if m == nil {
			m = &mark{side: a.Side}
			marks[a.Index] = m
		}
		m.seqs = append(m.seqs, strconv.Itoa(a.Seq))
	}
	idx := make([]int, 0, len(marks))
	for i := range marks {
		idx = append(idx, i)
	}
	sort.Ints(idx)
	var ring plotter.XYs
	// Labels of nearby alarms are stacked in levels so "1" and "2" on
	// neighbouring points never read as "12".
	type key struct{ side, level int }
	groups := map[key]*plotter.XYLabels{}
	near := max(3, len(c.Stat)/40)
	last := map[int]struct{ idx, level int }{}
	for _, i := range idx {
		y := c.Stat[i]
		side := 1
		if marks[i].side < 0 {
			side = -1
			if c.Stat2 != nil {
				y = c.Stat2[i]
			}
		}
		if math.IsNaN(y) {
			continue
		}
		pt := plotter.XY{X: float64(i + 1), Y: y}
		ring = append(ring, pt)
		level := 0
		if l, ok := last[side]; ok && i-l.idx < near {
			level = (l.level + 1) % 3
		}
		last[side] = struct{ idx, level int }{i, level}
		g := groups[key{side, level}]
		if g == nil {
			g = &plotter.XYLabels{}
			groups[key{side, level}] = g
		}
		g.XYs, g.Labels = append(g.XYs, pt), append(g.Labels, strings.Join(marks[i].seqs, ","))
	}
	if len(ring) == 0 {
		return nil
	}
	sc, err := plotter.NewScatter(ring)
	if err != nil {
		return err
	}
	sc.Shape, sc.Color, sc.Radius = draw.RingGlyph{}, black, vg.Points(4)
	p.Add(sc)
	leg.Add("alarm (numbered as listed)", sc)
	keys := make([]key, 0, len(groups))
	for k := range groups {
		keys = append(keys, k)
	}
	sort.Slice(keys, func(a, b int) bool {
		return keys[a].side < keys[b].side || (keys[a].side == keys[b].side && keys[a].level < keys[b].level)
	})
	for _, k := range keys {
		lb, err := plotter.NewLabels(*groups[k])
		if err != nil {
			return err
		}
		for i := range lb.TextStyle {
			lb.TextStyle[i].Font.Size = vg.Points(8)
			lb.TextStyle[i].XAlign = draw.XCenter
		}
		dy := vg.Points(5) + vg.Points(9)*vg.Length(k.level)
		if k.side < 0 {
			dy = -vg.Points(13) - vg.Points(9)*vg.Length(k.level)
		}
		lb.Offset = vg.Point{Y: dy}
		p.Add(lb)
	}
	return nil
}

// wholeTicks are plot.DefaultTicks labelled as whole numbers (unit 250,
// not 250.00).
type wholeTicks struct{}

func (wholeTicks) Ticks(min, max float64) []plot.Tick {
	t := plot.DefaultTicks{}.Ticks(min, max)
	for i := range t {
		if t[i].Label != "" {
			t[i].Label = strconv.FormatFloat(math.Round(t[i].Value), 'f', 0, 64)
		}
	}
	return t
}
