package chart

import (
	"bytes"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"padline/store/drift"
)

// TestDrawnKeepsEnvelopeAndAlarms: a 600,000-point watch is drawn from a
// few points per pixel column that hold, in every column, the first, last,
// lowest and highest point of each statistic, and every alarm's point.
func TestDrawnKeepsEnvelopeAndAlarms(t *testing.T) {
	rng := rand.New(rand.NewPCG(19, 2))
	x := make([]float64, 600_000)
	for i := range x {
		x[i] = 29.8 + 4.2*rng.NormFloat64()
		if i > 540_000 {
			x[i] += 4.2
		}
	}
	w, err := drift.WatchSeries(x, drift.FirstN(50), drift.Options{}, drift.DefaultSet)
	if err != nil {
		t.Fatal(err)
	}
	const columns = 1000
	for _, c := range w.Charts {
		if len(c.Alarms) == 0 {
			t.Fatalf("%s: no alarms to keep", c.Kind)
		}
		idx := drawn(c, columns)
		if len(idx) > 8*columns+len(c.Alarms) || !slices.IsSorted(idx) {
			t.Fatalf("%s: %d points drawn of %d (sorted %v)", c.Kind, len(idx), len(c.Stat), slices.IsSorted(idx))
		}
		kept := map[int]bool{}
		for _, i := range idx {
			kept[i] = true
		}
		for _, a := range c.Alarms {
			if !kept[a.Index] {
				t.Fatalf("%s: alarm %d at point %d not drawn", c.Kind, a.Seq, a.Index)
			}
		}
		n := len(c.Stat)
		for b := range columns {
			lo, hi := b*n/columns, (b+1)*n/columns
			for _, s := range [][]float64{c.Stat, c.Stat2} {
				if s == nil {
					continue
				}
				want := [2]float64{math.Inf(1), math.Inf(-1)}
				got := want
				for i := lo; i < hi; i++ {
					want = [2]float64{min(want[0], s[i]), max(want[1], s[i])}
					if kept[i] {
						got = [2]float64{min(got[0], s[i]), max(got[1], s[i])}
					}
				}
				if got != want || !kept[lo] || !kept[hi-1] {
					t.Fatalf("%s, column %d: drawn range %v, want %v", c.Kind, b, got, want)
				}
			}
		}
	}
	// A short chart is drawn whole.
	short := w.Charts[0]
	short.Stat = short.Stat[:100]
	if got := drawn(short, columns); len(got) != 100 {
		t.Errorf("100 points: %d drawn", len(got))
	}
	// And the long one renders to a file of a size set by the plot and the
	// alarms, not by the series: under 10 bytes a point, where each point
	// drawn takes over 100 (a glyph and a line segment).
	var buf bytes.Buffer
	if _, err := Render(&buf, SVG, Options{}, Group{Charts: w.Charts}); err != nil {
		t.Fatal(err)
	}
	if buf.Len() > 10*len(x) {
		t.Errorf("SVG of %d bytes for %d points", buf.Len(), len(x))
	}
}
