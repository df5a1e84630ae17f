package sequences

import (
	"fmt"
	"math"
)

// reading is what was read at one level (a pogo level) or at a rung's pair
// of levels lo = q and hi = q + rung.
type reading struct {
	lo, hi   uint16
	pair     bool
	rung     int
	nlo, hlo int
	nhi, hhi int
}

// describeReading says what a reading read.
func (c *checker) describeReading(x reading) string {
	if !x.pair {
		return fmt.Sprintf("%.2f pF: %d of %d high", c.pf(x.lo), x.hlo, x.nlo)
	}
	return fmt.Sprintf("rung %d pair %.2f → %.2f pF: %d of %d and %d of %d high", x.rung, c.pf(x.lo), c.pf(x.hi), x.hlo, x.nlo, x.hhi, x.nhi)
}

// sample takes k more samples at the reading's level(s).
func (c *checker) sample(x *reading, k int) error {
	h, err := c.highs(x.lo, k)
	if err != nil {
		return err
	}
	x.nlo, x.hlo = x.nlo+k, x.hlo+h
	if !x.pair {
		return nil
	}
	if h, err = c.highs(x.hi, k); err != nil {
		return err
	}
	x.nhi, x.hhi = x.nhi+k, x.hhi+h
	return nil
}

// Hypotheses: 0 is the healthy ladder, 1 + r rung r stuck open, 1 + n + r
// rung r stuck closed.
func (c *checker) hyp(r int, closed bool) int {
	if closed {
		return 1 + len(c.cfg.RungsPF) + r
	}
	return 1 + r
}

func (c *checker) hypRung(h int) (int, bool) {
	n := len(c.cfg.RungsPF)
	if h > n {
		return h - 1 - n, true
	}
	return h - 1, false
}

// effPF is the capacitance pattern p puts on the pad under hypothesis h, on
// the entered values.
func (c *checker) effPF(h int, p uint16) float64 {
	if h > 0 {
		r, closed := c.hypRung(h)
		if closed {
			p |= 1 << r
		} else {
			p &^= 1 << r
		}
	}
	return c.pf(p)
}

// differs reports whether hypothesis h and the healthy ladder put one of the
// reading's levels on different sides of the trip, or the pair's two levels
// at different distances apart.
func (c *checker) differs(x reading, h int, T, sigma float64) bool {
	side := func(p uint16) bool {
		a, b := (c.effPF(0, p)-T)/sigma, (c.effPF(h, p)-T)/sigma
		return math.Abs(normCDF(a)-normCDF(b)) > 0.02
	}
	if side(x.lo) || x.pair && side(x.hi) {
		return true
	}
	return x.pair && math.Abs((c.effPF(0, x.hi)-c.effPF(0, x.lo))-(c.effPF(h, x.hi)-c.effPF(h, x.lo))) > 1e-9
}

// llKey identifies one reading likelihood: reading, its counts (the upper
// level has as many samples as the lower), σ, and where the hypothesis puts
// its levels.
type llKey struct {
	i, n, hlo, hhi int
	sigma, a0, d   float64
}

// scores are the log likelihoods of the readings per hypothesis.
type scores struct {
	total []float64   // per hypothesis, profiled over σ
	per   [][]float64 // per hypothesis and reading, at that hypothesis' σ
	poor  []int       // a reading the hypothesis fits very badly, or −1
}

// bestFault returns the best stuck-rung hypothesis and its log likelihood
// ratio against the healthy ladder.
func (s scores) bestFault() (int, float64) {
	best := 1
	for h := 2; h < len(s.total); h++ {
		if s.total[h] > s.total[best] {
			best = h
		}
	}
	return best, s.total[best] - s.total[0]
}

func (s scores) llrOf(h int) float64 { return s.total[h] - s.total[0] }

// lapse is the chance of a sample reading the wrong way whatever the
// capacitance (a glitch): one wrong sample must not outweigh everything.
const lapse = 1e-4

// poorNats is the misfit of one reading (log likelihood below its
// saturated value) taken as "this hypothesis cannot explain it".
const poorNats = 30.0

// score computes the log likelihood of every hypothesis. A reading's
// likelihood integrates its level's unknown offset a ~ N(effPF − T, u²)
// over P(high) = Φ(a/σ) (the pair's upper level at a + effPF(hi) −
// effPF(lo), with the rung's own calibration error folded into its σ); σ is
// profiled over a grid around the measured one.
func (c *checker) score(rd []reading, T, uT float64, pt uint16) scores {
	nh := 1 + 2*len(c.cfg.RungsPF)
	s := scores{total: make([]float64, nh), per: make([][]float64, nh), poor: make([]int, nh)}
	// Many hypotheses put a reading's levels at the same places, and a
	// re-probe changes few readings: memoise across calls.
	if c.memo == nil {
		c.memo = map[llKey]float64{}
	}
	memo := c.memo
	for h := range nh {
		best := math.Inf(-1)
		var bestPer []float64
		for _, f := range sigmaGrid {
			sigma := f
			per := make([]float64, len(rd))
			var tot float64
			for i, x := range rd {
				a0 := c.effPF(h, x.lo) - T
				var d float64
				if x.pair {
					d = c.effPF(h, x.hi) - c.effPF(h, x.lo)
				}
				k := llKey{i, x.nlo, x.hlo, x.hhi, f, a0, d}
				ll, ok := memo[k]
				if !ok {
					ll = c.readingLL(x, a0, d, c.u(x.lo, pt, uT), sigma)
					memo[k] = ll
				}
				per[i] = ll
				tot += ll
			}
			if tot > best {
				best, bestPer = tot, per
			}
		}
		s.total[h], s.per[h], s.poor[h] = best, bestPer, -1
		worst := float64(poorNats)
		for i, x := range rd {
			if m := satLL(x) - bestPer[i]; m > worst {
				s.poor[h], worst = i, m
			}
		}
	}
	return s
}

// sigmaGrid are the transition σ (pF) over which the likelihood is
// profiled, in steps of √2: the first search's σ is too rough to fix it
// (it ranges over a factor of 4 for one unit when the trip falls between
// widely spaced levels), and the pair readings measure it themselves.
var sigmaGrid = []float64{0.113, 0.16, 0.226, 0.32, 0.45, 0.64, 0.9, 1.28}

// satLL is a reading's log likelihood at its own observed fractions.
func satLL(x reading) float64 {
	ll := func(h, n int) float64 {
		if n == 0 {
			return 0
		}
		p := math.Min(math.Max(float64(h)/float64(n), lapse), 1-lapse)
		return float64(h)*math.Log(p) + float64(n-h)*math.Log(1-p)
	}
	return ll(x.hlo, x.nlo) + ll(x.hhi, x.nhi)
}

// readingLL is the log likelihood of reading x when its lower level sits
// a0 ± u from the trip and its upper level d above the lower.
func (c *checker) readingLL(x reading, a0, d, u, sigma float64) float64 {
	sigHi := sigma
	if d != 0 {
		sigHi = math.Hypot(sigma, c.cfg.CalPF)
	}
	logP := func(z float64, hi, n int) float64 {
		p := lapse + (1-2*lapse)*normCDF(z)
		return float64(hi)*math.Log(p) + float64(n-hi)*math.Log(1-p)
	}
	// Levels beyond 9σ of the trip for every offset read with the lapse
	// rate alone: no integral needed (Φ(−9) ≈ 1e-19 ≪ lapse).
	far := func(a float64) (bool, float64) {
		switch {
		case a-5*u > 9*sigHi:
			return true, 9
		case a+5*u < -9*sigHi:
			return true, -9
		}
		return false, 0
	}
	if f1, z1 := far(a0); f1 {
		if !x.pair {
			return logP(z1, x.hlo, x.nlo)
		}
		if f2, z2 := far(a0 + d); f2 {
			return logP(z1, x.hlo, x.nlo) + logP(z2, x.hhi, x.nhi)
		}
	}
	// ∫ N(e) L(a0 + e·u) de over e ∈ [−5, 5] by the trapezoid rule in
	// log space: a coarse grid, refined 16-fold on the two intervals around
	// its largest point, where a reading of many samples makes the
	// integrand much narrower than the coarse step.
	g := func(e float64) float64 {
		a := a0 + e*u
		t := logP(a/sigma, x.hlo, x.nlo) - e*e/2
		if x.pair {
			t += logP((a+d)/sigHi, x.hhi, x.nhi)
		}
		return t
	}
	const n, fine = 25, 16
	h := 10.0 / (n - 1)
	var coarse [n]float64
	jm := 0
	for j := range n {
		coarse[j] = g(-5 + h*float64(j))
		if coarse[j] > coarse[jm] {
			jm = j
		}
	}
	lo, hi := max(jm-1, 0), min(jm+1, n-1)
	terms := make([]float64, 0, 2*(n+2*fine))
	add := func(t, w float64) { terms = append(terms, t+math.Log(w)) }
	for j := range n - 1 { // coarse intervals [j, j+1] outside [lo, hi]
		if j >= lo && j < hi {
			continue
		}
		add(coarse[j], h/2)
		add(coarse[j+1], h/2)
	}
	hf := h / fine
	prev := coarse[lo]
	for k := 1; k <= (hi-lo)*fine; k++ {
		next := g(-5 + h*float64(lo) + hf*float64(k))
		add(prev, hf/2)
		add(next, hf/2)
		prev = next
	}
	mx := math.Inf(-1)
	for _, t := range terms {
		mx = math.Max(mx, t)
	}
	var sum float64
	for _, t := range terms {
		sum += math.Exp(t - mx)
	}
	return mx + math.Log(sum) - 0.5*math.Log(2*math.Pi)
}

// search is one trip search and the pattern and entered pF of each of its
