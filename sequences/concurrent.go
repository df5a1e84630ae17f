package sequences

import (
	"errors"
	"fmt"
)

// SitesProber applies each site's own ladder level at once (levels[s] is
// an index into site s's level list, −1 for a site that does not probe this
// time), settles once and takes readings one (slowest) clock period apart:
// site s gets ks[s] readings; it returns each site's high count.
type SitesProber interface {
	ProbeSites(levels, ks []int) (highs []int, err error)
}

// SitesProberFunc adapts a function to a SitesProber.
type SitesProberFunc func(levels, ks []int) ([]int, error)

var _ SitesProber = SitesProberFunc(nil)

// ProbeSites calls f(levels, ks).
func (f SitesProberFunc) ProbeSites(levels, ks []int) ([]int, error) { return f(levels, ks) }

// errSiteStopped ends a site's search after another site's probe failed.
var errSiteStopped = errors.New("sequences: panel probe failed")

// FindTripsOwn searches the trip points of sites with their own ladders
// concurrently: each site in sites runs FindTrip unchanged on its own level
// list (levels[s], ascending), and the sites' probes are taken in lockstep
// rounds, one settle and one set of readings per round for every site still
// searching, so the fixture time is about the slowest site's. Probes counts
// the rounds.
func FindTripsOwn(p SitesProber, levels [][]float64, sites uint32, opt SearchOptions) (JointResult, error) {
	n := len(levels)
	if n == 0 || n > 32 {
		return JointResult{}, fmt.Errorf("%d sites: %w", n, ErrJointLevels)
	}
	type request struct {
		site, level, k int
		done           bool
		res            TripResult
		err            error
	}
	type reply struct {
		highs int
		err   error
	}
	reqs := make(chan request)
	replies := make([]chan reply, n)
	running := 0
	for s := range n {
		if sites&(1<<s) == 0 {
			continue
		}
		replies[s] = make(chan reply)
		running++
		go func() {
			pr := ProberFunc(func(level, k int) (int, error) {
				reqs <- request{site: s, level: level, k: k}
				r := <-replies[s]
				return r.highs, r.err
			})
			res, err := FindTrip(pr, levels[s], opt)
			reqs <- request{site: s, done: true, res: res, err: err}
		}()
	}
	out := JointResult{Sites: make([]TripResult, n)}
	var errs []error
	failed := false
	for running > 0 {
		// One message from every running site: a probe or its end.
		lv, ks := make([]int, n), make([]int, n)
		for i := range lv {
			lv[i] = -1
		}
		waiting := 0
		for range running {
			r := <-reqs
			if r.done {
				running--
				out.Sites[r.site] = r.res
				if r.err != nil && !errors.Is(r.err, errSiteStopped) {
					errs = append(errs, fmt.Errorf("site %d: %w", r.site+1, r.err))
				}
				continue
			}
			lv[r.site], ks[r.site] = r.level, r.k
			waiting++
		}
		if waiting == 0 {
			continue
		}
		var highs []int
		var err error
		if failed {
			err = errSiteStopped
		} else {
			highs, err = p.ProbeSites(lv, ks)
			out.Probes = append(out.Probes, JointProbe{Level: -1, K: maxInt(ks), Phase: "own"})
			out.Samples += maxInt(ks)
			out.Moves++
			if err != nil {
				failed = true
				errs = append(errs, err)
				err = errSiteStopped
			}
		}
		for s, l := range lv {
			if l < 0 {
				continue
			}
			r := reply{err: err}
			if err == nil {
				r.highs = highs[s]
			}
			replies[s] <- r
		}
	}
	return out, errors.Join(errs...)
}

func maxInt(xs []int) int {
	m := 0
	for _, x := range xs {
		m = max(m, x)
	}
	return m
}
