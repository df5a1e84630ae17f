package drift

import (
	"errors"
	"fmt"
	"sort"
	"time"
)

// Sentinel errors; test with errors.Is.
var (
	// ErrSubgroupSize reports a subgroup size outside the constants table.
	ErrSubgroupSize = errors.New("drift: subgroup size outside 2…10")
	// ErrShortBaseline reports a baseline window with too few points to
	// estimate limits from.
	ErrShortBaseline = errors.New("drift: baseline too short")
	// ErrWindow reports a baseline window that does not fit the series.
	ErrWindow = errors.New("drift: bad baseline window")
	// ErrParam reports an out-of-range option (λ, k, h, width, confidence …).
	ErrParam = errors.New("drift: bad parameter")
)

// Window is the phase I baseline: the half-open range [Start, End) of
// series indices (0-based) that limits are estimated from. From and To are
// set when the window was chosen by time; they are zero otherwise.
type Window struct {
	Start, End int
	From, To   time.Time
}

// FirstN is the window holding the first n points.
func FirstN(n int) Window { return Window{Start: 0, End: n} }

// TimeWindow is the window of the points whose times fall in [from, to).
// times must be sorted ascending and parallel to the series.
func TimeWindow(times []time.Time, from, to time.Time) (Window, error) {
	if !to.After(from) {
		return Window{}, fmt.Errorf("time window %s … %s: %w", from.Format(time.RFC3339), to.Format(time.RFC3339), ErrWindow)
	}
	if !sort.SliceIsSorted(times, func(i, j int) bool { return times[i].Before(times[j]) }) {
		return Window{}, fmt.Errorf("time window: times not sorted: %w", ErrWindow)
	}
	s := sort.Search(len(times), func(i int) bool { return !times[i].Before(from) })
	e := sort.Search(len(times), func(i int) bool { return !times[i].Before(to) })
	return Window{Start: s, End: e, From: from, To: to}, nil
}

// Len is the number of points in the window.
func (w Window) Len() int { return w.End - w.Start }

// String states the window for people, numbering units from 1:
// "units 1–50 (50 points)" or, for a time window,
// "units 1–50 (50 points), 2025-03-01T06:00:00Z … 2025-03-01T10:00:00Z".
func (w Window) String() string {
	s := fmt.Sprintf("units %d–%d (%d points)", w.Start+1, w.End, w.Len())
	if !w.From.IsZero() || !w.To.IsZero() {
		s += fmt.Sprintf(", %s … %s", w.From.Format(time.RFC3339), w.To.Format(time.RFC3339))
	}
	return s
}

// check verifies the window lies inside a series of n points and holds at
// least min points.
func (w Window) check(n, min int) error {
	if w.Start < 0 || w.End > n || w.Start > w.End {
		return fmt.Errorf("baseline %s of %d points: %w", w, n, ErrWindow)
	}
	if w.Len() < min {
		return fmt.Errorf("baseline %s, need %d: %w", w, min, ErrShortBaseline)
	}
	return nil
}
