package sequences

import (
	"fmt"
	"math"
	"math/bits"
	"sort"
)

// PanelProber applies one rung pattern to every site of a ganged ladder and
// reads every site's latch together: it sets the ladder to index level of
// the shared level list the joint search was given, settles, and reads the
// latches of the sites in read until every site in need has k fresh
// readings (each a new latch decision); it returns, per site, the fresh
// readings taken and how many read high. A site in read but not in need
// gets the fresh readings that come meanwhile (possibly none).
type PanelProber interface {
	ProbePanel(level, k int, read, need uint32) (n, highs []int, err error)
}

// PanelProberFunc adapts a function to a PanelProber.
type PanelProberFunc func(level, k int, read, need uint32) (n, highs []int, err error)

var _ PanelProber = PanelProberFunc(nil)

// ProbePanel calls f(level, k, read, need).
func (f PanelProberFunc) ProbePanel(level, k int, read, need uint32) ([]int, []int, error) {
	return f(level, k, read, need)
}

// JointProbe is one probe of the joint search: the shared level, the
// readings each site that asked for it got, which sites were read and
// which asked, and the phase that asked for it.
type JointProbe struct {
	Level int
	K     int
	Sites uint32
	Need  uint32
	Phase string
}

// JointResult is the outcome of one joint search over a ganged ladder.
type JointResult struct {
	// Sites holds each site's own result, in its own level basis (its
	// calibrated rung values and stray); sites not searched have zero
	// results with Probes nil.
	Sites []TripResult
	// Probes lists the panel's probes in call order; Samples counts the
	// readings taken (one reading per sample serves every site read); Moves
	// counts probes at a different level from the one before.
	Probes  []JointProbe
	Samples int
	Moves   int
}

// ErrJointLevels is returned by FindTrips for level tables it cannot
// search: fewer than two levels, a site's levels not ascending, or a site
// table of the wrong length.
var ErrJointLevels = fmt.Errorf("joint search: %w", ErrSearchLevels)

// FindTrips searches the trip points of several sites on one ganged
// ladder. levels[s][j] is site s's capacitance (its own basis) at shared
// level j; every site's row must be strictly ascending. sites selects the
// sites to search (bit s = site s).
//
// Every probe reads every searched site, so the search is shared:
//   - bisection: each site keeps its own bracket; the next probe is the
//     level that most shrinks the sum over sites of log2 of the bracket
//     widths (expected, for one reading), so one probe halves several
//     brackets at once when they overlap, and the end confirmations are
//     shared the same way;
//   - refinement: each site still refining asks for its own best level (the
//     single-site rule of FindTrip, which every reading of the panel feeds),
//     the asked levels are visited in a round, and a site leaves the
//     refinement once its standard error reaches the target or its own
//     budget (opt.MaxRefineSamples at the levels it asked for) is spent;
//   - guard levels: each site's two, shared where sites ask for the same.
//
// Each site's result is computed by the single-site machinery from the
// readings booked to it, so its estimate, standard error, spread and noisy
// flag mean what FindTrip's do.
func FindTrips(p PanelProber, levels [][]float64, sites uint32, opt SearchOptions) (JointResult, error) {
	opt, err := opt.withDefaults()
	if err != nil {
		return JointResult{}, err
	}
	if len(levels) == 0 || len(levels) > 32 {
		return JointResult{}, fmt.Errorf("%d sites: %w", len(levels), ErrJointLevels)
	}
	nl := len(levels[0])
	if nl < 2 {
		return JointResult{}, fmt.Errorf("%d levels: %w", nl, ErrJointLevels)
	}
	for s, row := range levels {
		if len(row) != nl {
			return JointResult{}, fmt.Errorf("site %d: %d levels, want %d: %w", s+1, len(row), nl, ErrJointLevels)
		}
		for i := 1; i < nl; i++ {
			if !(row[i] > row[i-1]) {
				return JointResult{}, fmt.Errorf("site %d: level %d (%g pF) not above level %d (%g pF): %w",
					s+1, i, row[i], i-1, row[i-1], ErrJointLevels)
			}
		}
	}
	sites &= 1<<len(levels) - 1
	j := &joint{p: p, opt: opt, res: JointResult{Sites: make([]TripResult, len(levels))}, cur: -1}
	j.sites = make([]*jointSite, len(levels))
	for s := range levels {
		if sites&(1<<s) == 0 {
			continue
		}
		js := &jointSite{searcher: searcher{levels: levels[s], opt: opt, n: make([]int, nl), h: make([]int, nl), cur: -1}}
		js.p = ProberFunc(func(int, int) (int, error) { return js.pending, nil })
		js.res.TripPF, js.res.SEPF, js.res.SigmaPF, js.res.SpreadPF = math.NaN(), math.NaN(), math.NaN(), math.NaN()
		j.sites[s] = js
	}
	err = j.run(sites, nl)
	for s, js := range j.sites {
		if js != nil {
			j.res.Sites[s] = js.res
		}
	}
	return j.res, err
}

// jointSite is one site's single-site search state, fed by the panel's
// readings instead of its own prober.
type jointSite struct {
	searcher
	pending int  // high readings of the probe being booked
	got     int  // readings of the probe being booked
	lo, hi  int  // bracket: lo last read low, hi first read high
	loSeen  bool // lo has been probed (level 0 counts as low until probed)
	hiSeen  bool
	own     int // refinement samples taken at levels this site asked for
	fit     ProbitFit
	fitOK   bool
	prior   ProbitPrior
	state   int
}

// Site states of the joint search.
const (
	jsBracket = iota // still bisecting
	jsRefine         // refining
	jsDone           // finished (result final)
)

// joint is the state of one FindTrips call.
type joint struct {
	p     PanelProber
	opt   SearchOptions
	sites []*jointSite
	res   JointResult
	cur   int
}

// probe takes k readings at level for the sites in need, reading the sites
// in mask meanwhile, and books each site's fresh readings to it.
func (j *joint) probe(level, k int, mask, need uint32, phase string) error {
	mask |= need
	if need == 0 {
		return nil
	}
	n, highs, err := j.p.ProbePanel(level, k, mask, need)
	if err != nil {
		return fmt.Errorf("probe level %d: %w", level, err)
	}
	j.res.Probes = append(j.res.Probes, JointProbe{Level: level, K: k, Sites: mask, Need: need, Phase: phase})
	j.res.Samples += k
	if level != j.cur {
		j.res.Moves++
	}
	j.cur = level
	for m := mask; m != 0; m &= m - 1 {
		s := bits.TrailingZeros32(m)
		js := j.sites[s]
		js.pending, js.got = 0, 0
		if s >= len(highs) || s >= len(n) || n[s] < 0 || highs[s] < 0 || highs[s] > n[s] ||
			need&(1<<s) != 0 && n[s] < k {
			return fmt.Errorf("probe level %d: site %d: %d of %d readings high", level, s+1, highs[s], n[s])
		}
		if n[s] == 0 {
			continue
		}
		js.pending, js.got = highs[s], n[s]
		if _, err := js.probe(level, n[s], phase); err != nil {
			return err
		}
	}
	return nil
}

// mask returns the sites in state st.
func (j *joint) mask(st int) uint32 {
	var m uint32
	for s, js := range j.sites {
		if js != nil && js.state == st {
			m |= 1 << s
		}
	}
	return m
}

// live returns every site not yet done.
func (j *joint) live() uint32 { return j.mask(jsBracket) | j.mask(jsRefine) }

func (j *joint) run(sites uint32, nl int) error {
	top := nl - 1
	for _, js := range j.sites {
		if js != nil {
			js.lo, js.hi = 0, top
		}
	}
	if err := j.bisect(top); err != nil {
		return err
	}
	// Shared end confirmations: one probe at the bottom for every site
	// whose bracket closed there, one at the top likewise.
	var below, never uint32
	for s, js := range j.sites {
		if js == nil {
			continue
		}
		if js.hi == 0 {
			below |= 1 << s
		}
		if js.lo == top {
			never |= 1 << s
		}
	}
	if err := j.probe(0, j.opt.ConfirmK, j.mask(jsBracket), below, PhaseBracket); err != nil {
		return err
	}
	if err := j.probe(top, j.opt.ConfirmK, j.mask(jsBracket), never, PhaseBracket); err != nil {
		return err
	}
	for s, js := range j.sites {
		if js == nil {
			continue
		}
		switch {
		case below&(1<<s) != 0 && js.h[0] == js.n[0]:
			js.res.Found, js.res.Below = true, true
			js.res.TripPF = js.levels[0]
			js.res.Consistent = true
			js.state = jsDone
		case never&(1<<s) != 0 && js.h[top] == 0:
			js.res.Consistent = true
			js.state = jsDone
		default:
			js.res.Found = true
			js.state = jsRefine
			js.prior = ProbitPrior{SigmaPF: j.opt.SpreadPriorPF / spreadPerSigma, LogSD: j.opt.SpreadPriorLogSD}
			mu0 := (js.levels[max(js.lo, 0)] + js.levels[min(js.hi, top)]) / 2
			js.fit, js.fitOK = js.searcher.fit(js.prior, mu0, math.Log(js.prior.SigmaPF))
		}
	}
	if err := j.refine(); err != nil {
		return err
	}
	return j.guard()
}

// bisect narrows every site's bracket with single readings, choosing each
// probe to shrink the brackets most in total.
func (j *joint) bisect(top int) error {
	for {
		open := false
		for _, js := range j.sites {
			if js != nil && js.hi-js.lo > 1 {
				open = true
			}
		}
		if open {
			level := j.bestSplit()
			// The sites whose bracket the level splits need its reading;
			// the others take it if one comes.
			var need uint32
			for s, js := range j.sites {
				if js != nil && level > js.lo && level < js.hi {
					need |= 1 << s
				}
			}
			if err := j.probe(level, 1, j.mask(jsBracket), need, PhaseBracket); err != nil {
				return err
			}
			for _, js := range j.sites {
				if js == nil || level <= js.lo || level >= js.hi || js.got == 0 {
					continue
				}
				if js.pending > 0 {
					js.hi = level
				} else {
					js.lo = level
				}
			}
			continue
		}
		// Every bracket is one level wide: confirm unprobed ends, shared.
		var bottom, upper uint32
		for s, js := range j.sites {
			if js == nil {
				continue
			}
			if js.lo == 0 && js.n[0] == 0 {
				bottom |= 1 << s
			}
			if js.hi == top && js.n[top] == 0 {
				upper |= 1 << s
			}
		}
		if bottom == 0 && upper == 0 {
			return nil
		}
		level, mask := 0, bottom
		if bottom == 0 {
			level, mask = top, upper
		}
		if err := j.probe(level, 1, j.mask(jsBracket), mask, PhaseBracket); err != nil {
			return err
		}
		for m := mask; m != 0; m &= m - 1 {
			js := j.sites[bits.TrailingZeros32(m)]
			switch {
			case level == 0 && js.pending > 0:
				js.lo, js.hi = 0, 0
			case level == top && js.pending == 0:
				js.lo, js.hi = top, top
			}
		}
	}
}

// bestSplit returns the level that minimises the expected sum of log2
// bracket widths after one reading, each open bracket split uniformly.
func (j *joint) bestSplit() int {
	lo, hi := math.MaxInt, -1
	for _, js := range j.sites {
		if js != nil && js.hi-js.lo > 1 {
			lo, hi = min(lo, js.lo+1), max(hi, js.hi-1)
		}
	}
	best, bestGain := lo, -1.0
	for m := lo; m <= hi; m++ {
		gain := 0.0
		for _, js := range j.sites {
			if js == nil || m <= js.lo || m >= js.hi {
				continue
			}
			w := float64(js.hi - js.lo)
			a, b := float64(m-js.lo), float64(js.hi-m)
			// Reduction of log2 width, expected over a uniform trip point.
			gain += math.Log2(w) - (a*math.Log2(a)+b*math.Log2(b))/w
		}
		if gain > bestGain {
			best, bestGain = m, gain
		}
	}
	return best
}

// refine runs rounds: every refining site asks for its next level, the
// asked levels are visited in ascending order from the current one's side,
// and sites that reached their target or budget leave.
func (j *joint) refine() error {
	for {
		want := map[int]uint32{} // level → sites that asked for it
		for s, js := range j.sites {
			if js == nil || js.state != jsRefine {
				continue
			}
			if !js.fitOK || js.fit.SEMuPF <= j.opt.SETargetPF || js.own >= j.opt.MaxRefineSamples {
				js.state = jsDone
				continue
			}
			k := min(j.opt.BatchK, j.opt.MaxRefineSamples-js.own)
			l := js.next(js.fit, js.prior, k)
			// Join a level another site already asked for when it serves
			// this site nearly as well: one probe for both.
			if len(want) > 0 {
				pv := js.predVar(k)
				best, bestVar := l, pv(l)
				own := bestVar
				for _, c := range sortedKeys(want) {
					if v := pv(c); v <= mergeFactor*own && (v < bestVar || best == l) {
						best, bestVar = c, v
					}
				}
				l = best
			}
			want[l] |= 1 << s
		}
		if len(want) == 0 {
			break
		}
		order := sortedKeys(want)
		if j.cur > order[len(order)/2] {
			// Sweep from the end nearer the ladder's current level.
			for a, b := 0, len(order)-1; a < b; a, b = a+1, b-1 {
				order[a], order[b] = order[b], order[a]
			}
		}
		for _, l := range order {
			k := j.opt.BatchK
			for m := want[l]; m != 0; m &= m - 1 {
				js := j.sites[bits.TrailingZeros32(m)]
				k = min(k, j.opt.MaxRefineSamples-js.own)
			}
			if err := j.probe(l, k, j.mask(jsRefine), want[l], PhaseRefine); err != nil {
				j.finishAll()
				return err
			}
			for m := want[l]; m != 0; m &= m - 1 {
				j.sites[bits.TrailingZeros32(m)].own += k
			}
		}
		for _, js := range j.sites {
			if js != nil && js.state == jsRefine && js.fitOK {
				js.fit, js.fitOK = js.searcher.fit(js.prior, js.fit.MuPF, math.Log(js.fit.SigmaPF))
			}
		}
	}
	return nil
}

// finishAll fills every found site's result from its last fit.
func (j *joint) finishAll() {
	for _, js := range j.sites {
		if js != nil && js.res.Found && !js.res.Below {
			js.finish(js.fit, js.fitOK)
		}
	}
}

// guard checks each fitted site's transition well off its trip point, as
// FindTrip's guard levels do, using the readings the panel already holds:
// below, the site's readings at levels GuardPF to 2·GuardPF under its trip
// point must all be low; above, those GuardPF to 2·GuardPF over it must all
// be high. A side with fewer than GuardK readings gets them from guard
// probes, each placed to serve as many sites' missing sides as it can (the
// level nearest the trip point that lies in most of their bands).
func (j *joint) guard() error {
	type band struct {
		site   int
		lo, hi int // level index range
		below  bool
		need   int
	}
	var bands []band
	for s, js := range j.sites {
		if js == nil || !js.res.Found || js.res.Below || !js.fitOK || j.opt.GuardK <= 0 {
			continue
		}
		mu, g := js.fit.MuPF, j.opt.GuardPF
		for _, below := range []bool{true, false} {
			from, to := mu-2*g, mu-g
			if !below {
				from, to = mu+g, mu+2*g
			}
			lo := sort.SearchFloat64s(js.levels, from)
			hi := sort.SearchFloat64s(js.levels, math.Nextafter(to, math.Inf(1))) - 1
			if lo > hi {
				// No level in the band: FindTrip's rule, the nearest level
				// beyond GuardPF, when there is one.
				if below {
					lo = sort.SearchFloat64s(js.levels, math.Nextafter(to, math.Inf(1))) - 1
					hi = lo
				} else {
					lo = sort.SearchFloat64s(js.levels, from)
					hi = lo
				}
				if lo < 0 || lo >= len(js.levels) {
					continue
				}
			}
			n, wrong := 0, 0
			for l := lo; l <= hi; l++ {
				n += js.n[l]
				if below {
					wrong += js.h[l]
				} else {
					wrong += js.n[l] - js.h[l]
				}
			}
			if wrong > 0 {
				js.res.GuardMisread = true
			}
			if n < j.opt.GuardK {
				bands = append(bands, band{site: s, lo: lo, hi: hi, below: below, need: j.opt.GuardK - n})
			}
		}
	}
	for len(bands) > 0 {
		// The level in most open bands; ties go to the one nearest the
		// first band's trip point.
		count := map[int]int{}
		for _, b := range bands {
			for l := b.lo; l <= b.hi; l++ {
				count[l]++
			}
		}
		first := bands[0]
		best := first.hi
		if !first.below {
			best = first.lo
		}
		for _, l := range sortedKeys(count) {
			if count[l] > count[best] {
				best = l
			}
		}
		k, mask := 0, uint32(0)
		for _, b := range bands {
			if best >= b.lo && best <= b.hi {
				k = max(k, b.need)
				mask |= 1 << b.site
			}
		}
		if err := j.probe(best, k, mask, mask, PhaseGuard); err != nil {
			j.finishAll()
			return err
		}
		open := bands[:0]
		for _, b := range bands {
			if best < b.lo || best > b.hi {
				open = append(open, b)
				continue
			}
			js := j.sites[b.site]
			if b.below && js.pending > 0 || !b.below && js.pending < js.got {
				js.res.GuardMisread = true
			}
		}
		bands = open
	}
	for _, js := range j.sites {
		if js != nil && js.res.Found && !js.res.Below && js.fitOK {
			js.fit, js.fitOK = js.searcher.fit(js.prior, js.fit.MuPF, math.Log(js.fit.SigmaPF))
		}
	}
	j.finishAll()
	return nil
}

// mergeFactor lets a refining site take a level another site asked for in
// the same round when its predicted variance there is at most this much
// worse than at its own best level: one shared probe instead of two. Our
// choice, from BenchmarkPanel: at 1.5 the per-site trip error about each
// site's calibration bias stays within 3 % (8 sites) and 11 % (16 sites)
// of the single-site search's while an 8-site panel takes 2.5× one unit;
// 1.3 keeps 16 sites within 5 % but takes 2.6×.
const mergeFactor = 1.5

// predVar returns the site's predicted variance of μ after k more samples
// at a level, FindTrip's criterion.
func (js *jointSite) predVar(k int) func(level int) float64 {
	fit := js.fit
	_, _, h := nlp(js.tallies(), js.prior, fit.MuPF, math.Log(fit.SigmaPF))
	return func(level int) float64 {
		f := fisher(js.levels[level], fit.MuPF, fit.SigmaPF)
		a := h[0][0] + float64(k)*f[0][0]
		b := h[0][1] + float64(k)*f[0][1]
		c := h[1][1] + float64(k)*f[1][1]
		det := a*c - b*b
		if !(det > 0) || !(a > 0) {
			return math.Inf(1)
		}
		return c / det
	}
}

// sortedKeys returns a map's level keys in ascending order, so the search
// never depends on map iteration order.
func sortedKeys[V any](m map[int]V) []int {
	out := make([]int, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Ints(out)
	return out
}
