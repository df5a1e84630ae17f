package chart

import (
	"math"
	"sort"

	"padline/store/drift"
)

// drawn returns the chart points to draw, ascending, when the chart is
// drawn buckets pixels wide. A chart of no more than 4·buckets points is
// drawn whole. A longer one is cut into buckets of consecutive points, and
// of each bucket only the first, last, lowest and highest points of Stat
// and of Stat2 are drawn: the M4 aggregation (U. Jugel, Z. Jerzak,
// G. Hackenbroich, V. Markl, "M4: A Visualization-Oriented Time Series
// Data Aggregation", PVLDB 7(10), 2014), which draws the same line as every
// point would when a bucket is one pixel column, so the envelope is kept.
// Every alarm's point is drawn as well, so every ring sits on the line.
func drawn(c drift.Chart, buckets int) []int {
	n := len(c.Stat)
	if buckets < 1 || n <= 4*buckets {
		idx := make([]int, n)
		for i := range idx {
			idx[i] = i
		}
		return idx
	}
	keep := map[int]bool{}
	for b := range buckets {
		lo, hi := b*n/buckets, (b+1)*n/buckets
		if lo == hi {
			continue
		}
		keep[lo], keep[hi-1] = true, true
		for _, s := range [][]float64{c.Stat, c.Stat2} {
			if s == nil {
				continue
			}
			imin, imax := -1, -1
			for i := lo; i < hi; i++ {
				v := s[i]
				if math.IsNaN(v) || math.IsInf(v, 0) {
					continue
				}
				if imin < 0 || v < s[imin] {
					imin = i
				}
				if imax < 0 || v > s[imax] {
					imax = i
				}
			}
			if imin >= 0 {
				keep[imin], keep[imax] = true, true
			}
		}
	}
	for _, a := range c.Alarms {
		if a.Index >= 0 && a.Index < n {
			keep[a.Index] = true
		}
	}
	idx := make([]int, 0, len(keep))
	for i := range keep {
		idx = append(idx, i)
	}
	sort.Ints(idx)
	return idx
}
