package chart

import (
	"math"
	"sort"
	"strconv"

	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"padline/store/drift"
)

// AlarmRun is a run of alarms of one chart on one side that the eye sees
// as one: each alarm within ringGap of drawing width of the one before.
type AlarmRun struct {
	First, Last drift.Alarm
	Count       int
}

// Gaps on the drawing: alarms closer than a ring's width and a little air
// (4 pt rings, so 8 pt across, plus 6 pt) cannot be told apart and form
// one run; a run's numbers are left out where they would overlap the
// previous run's.
const (
	ringGap = 14 * vg.Length(1)
)

// Runs groups a chart's alarms into runs: alarms on the same side (rules
// without a side join the upper side) whose points lie within gap of x
// of the previous alarm of the run.
func Runs(c drift.Chart, x func(point int) float64, gap float64) []AlarmRun {
	al := append([]drift.Alarm(nil), c.Alarms...)
	sort.SliceStable(al, func(i, j int) bool { return al[i].Index < al[j].Index })
	var runs []AlarmRun
	open := map[int]int{} // side → index into runs
	for _, a := range al {
		side := 1
		if a.Side < 0 {
			side = -1
		}
		if i, ok := open[side]; ok && x(a.Index)-x(runs[i].Last.Index) <= gap {
			runs[i].Last = a
			runs[i].Count++
			continue
		}
		open[side] = len(runs)
		runs = append(runs, AlarmRun{First: a, Last: a, Count: 1})
	}
	return runs
}

// addAlarms marks each run of alarms once: a ring on its first alarm's
// point and, for a run of several, a bar over its span in the band at the
// top (upper side) or bottom (lower side) of the panel, numbered "33–110"
// as the text lists them; numbers that would crowd their neighbour are
// left out.
func (cl *cell) addAlarms(o Options, info *PanelInfo) error {
	c := cl.c
	if len(c.Alarms) == 0 {
		return nil
	}
	xOfPoint := func(i int) float64 { return cl.x(unitOf(c, i)) }
	scale := (cl.xhi - cl.xlo) / float64(plotWidth(o))
	runs := Runs(c, xOfPoint, scale*float64(ringGap))
	info.Runs = len(runs)
	ySpan := cl.yhi - cl.ylo
	clamp := func(y float64) float64 { return math.Min(math.Max(y, cl.ylo), cl.yhi) }
	var rings plotter.XYs
	type span struct{ lo, hi float64 }
	placed := map[int][]span{}
	labels := map[int]*plotter.XYLabels{1: {}, -1: {}}
	type pending struct {
		r    AlarmRun
		side int
		x0   float64
		band float64
		text string
	}
	var todo []pending
	for _, r := range runs {
		side := 1
		if r.First.Side < 0 {
			side = -1
		}
		i := r.First.Index
		if i >= len(c.Stat) {
			continue
		}
		y := c.Stat[i]
		if side < 0 && c.Stat2 != nil {
			y = c.Stat2[i]
		}
		if math.IsNaN(y) {
			continue
		}
		x0, x1 := xOfPoint(r.First.Index), xOfPoint(r.Last.Index)
		rings = append(rings, plotter.XY{X: x0, Y: clamp(y)})
		band := cl.yhi - 0.07*ySpan
		if side < 0 {
			band = cl.ylo + 0.07*ySpan
		}
		if r.Count > 1 {
			bar, err := plotter.NewLine(plotter.XYs{{X: x0, Y: band}, {X: x1, Y: band}})
			if err != nil {
				return err
			}
			bar.Color, bar.Width = black, 2.2
			cl.p.Add(bar)
			if len(cl.legend) == 0 || cl.legend[len(cl.legend)-1].label != "span of a run of alarms" {
				cl.addLegend("span of a run of alarms", bar)
			}
		}
		text := strconv.Itoa(r.First.Seq)
		if r.Count > 1 {
			text += "–" + strconv.Itoa(r.Last.Seq)
		}
		todo = append(todo, pending{r, side, x0, band, text})
	}
	// Numbers go to the earliest run, then the longest runs first, each where it overlaps no
	// number already written on its side: about 4.5 pt a character at
	// 8 pt, plus air.
	// The earliest run (when it began) comes before all others.
	if len(todo) > 1 {
		sort.SliceStable(todo[1:], func(i, j int) bool { return todo[1+i].r.Count > todo[1+j].r.Count })
	}
	for _, t := range todo {
		s := span{t.x0, t.x0 + scale*float64(vg.Points(4.5*float64(len([]rune(t.text)))+8))}
		free := true
		for _, q := range placed[t.side] {
			if s.lo < q.hi && q.lo < s.hi {
				free = false
				break
			}
		}
		if !free {
			continue
		}
		placed[t.side] = append(placed[t.side], s)
		l := labels[t.side]
		l.XYs, l.Labels = append(l.XYs, plotter.XY{X: t.x0, Y: t.band}), append(l.Labels, t.text)
		info.Labelled++
	}
	if len(rings) == 0 {
		return nil
	}
	sc, err := plotter.NewScatter(rings)
	if err != nil {
		return err
	}
	sc.Shape, sc.Color, sc.Radius = draw.RingGlyph{}, black, vg.Points(4)
	cl.p.Add(sc)
	cl.addLegend("first alarm of a run", sc)
	for _, side := range []int{1, -1} {
		l := labels[side]
		if len(l.XYs) == 0 {
			continue
		}
		lb, err := plotter.NewLabels(*l)
		if err != nil {
			return err
		}
		for i := range lb.TextStyle {
			lb.TextStyle[i].Font.Size = vg.Points(8)
			lb.TextStyle[i].XAlign = draw.XLeft
		}
		lb.Offset = vg.Point{X: vg.Points(1), Y: vg.Points(3)}
		if side < 0 {
			lb.Offset.Y = vg.Points(3) // above the bar too: the shift labels sit below it
		}
		cl.p.Add(lb)
	}
	return nil
}
