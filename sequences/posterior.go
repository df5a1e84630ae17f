package sequences

import (
	"math"
	"sort"
)

// tripGrid is the posterior of a probit transition, P(high | C) =
// Φ((C − μ)/σ), over a grid of (μ, ln σ): a flat prior on μ or the trip
// prior (SearchOptions.TripPriorPF, TripPriorOffModel), a
// log-normal prior on σ, and the likelihood of every tally booked. Its
// moments are sums over the grid: the trip point's posterior mean and
// standard deviation are what the search reports and stops on, so the
// reported standard error carries the uncertainty of σ and of a small
// sample instead of the curvature at one point (the Laplace approximation).
type tripGrid struct {
	mu     []float64 // μ nodes, pF, uniform
	logSig []float64 // ln σ nodes, uniform
	sig    []float64
	logp   []float64 // log posterior (unnormalised), [j*len(mu)+i]
	// cache holds, per level probed, ln Φ(z) and ln Φ(−z) at every node,
	// so repeated samples at one level cost one add per node.
	cache map[float64]*gridCache
}

// Grid sizes: ln σ spans the prior's ±3 SD (at most ±2.5) in gridSigma
// nodes, or fewer for a narrow prior (steps of at least 0.15); μ spans
// 0.5 pF + 5 of the largest σ (at most gridHalfPF) either
// side of the centre, in steps of at most gridMuStep and at most 0.8 of the
// SE target: the trapezoid sum of a smooth posterior whose SD is h or more
// errs by about exp(−2π²) ≈ 3e-9 relative, so its moments are exact for
// any SD the search stops at.
const (
	gridHalfPF = 3.0
	gridMuStep = 0.04
	gridSigma  = 16
)

// newTripGrid builds the prior grid centred at centre.
func newTripGrid(centre float64, prior ProbitPrior, muLogPrior func(float64) float64, seTarget float64) *tripGrid {
	ls0, span := math.Log(prior.SigmaPF), math.Min(3*prior.LogSD, 2.5)
	if !(span > 0) {
		span = 2.5
	}
	half := math.Min(gridHalfPF, 0.5+5*math.Exp(ls0+span))
	step := math.Min(gridMuStep, 0.8*seTarget)
	nMu := 2*int(math.Ceil(half/step)) + 1
	g := &tripGrid{mu: make([]float64, nMu), cache: map[float64]*gridCache{}}
	for i := range g.mu {
		g.mu[i] = centre + step*float64(i-nMu/2)
	}
	nSig := min(gridSigma, max(8, int(math.Ceil(2*span/0.15))+1))
	g.logSig = make([]float64, nSig)
	g.sig = make([]float64, nSig)
	for j := range g.logSig {
		g.logSig[j] = ls0 - span + 2*span*float64(j)/float64(nSig-1)
		g.sig[j] = math.Exp(g.logSig[j])
	}
	g.logp = make([]float64, nMu*nSig)
	muLP := make([]float64, nMu)
	if muLogPrior != nil {
		for i, m := range g.mu {
			muLP[i] = muLogPrior(m)
		}
	}
	for j, ls := range g.logSig {
		var lp float64
		if prior.LogSD > 0 {
			r := (ls - ls0) / prior.LogSD
			lp = -r * r / 2
		}
		for i := range g.mu {
			g.logp[j*nMu+i] = lp + muLP[i]
		}
	}
	return g
}

// farZ is how many σ from every node a level must lie for its samples on
// the expected side to be left out: their likelihood differs from 1 by less
// than Φ(−farZ) = 6e-16.
const farZ = 8

// add books n samples at pf of which h read high.
func (g *tripGrid) add(pf float64, n, h int) {
	if n == 0 {
		return
	}
	nMu := len(g.mu)
	muLo, muHi := g.mu[0], g.mu[nMu-1]
	// Rows of σ for which pf lies farZ·σ beyond every μ node read as
	// expected there (high above, low below) and are left out: their
	// likelihood differs from 1 by less than Φ(−farZ).
	expected := func(s float64) bool {
		return (h == n && pf > muHi+farZ*s) || (h == 0 && pf < muLo-farZ*s)
	}
	if expected(g.sig[len(g.sig)-1]) {
		return
	}
	c := g.cache[pf]
	if c == nil {
		c = &gridCache{v: [2][]float64{make([]float64, len(g.logp)), make([]float64, len(g.logp))}, done: make([]bool, len(g.sig))}
		g.cache[pf] = c
	}
	for j, s := range g.sig {
		if expected(s) {
			continue
		}
		row := g.logp[j*nMu : (j+1)*nMu]
		hi, lo := c.v[0][j*nMu:(j+1)*nMu], c.v[1][j*nMu:(j+1)*nMu]
		if !c.done[j] {
			for i, m := range g.mu {
				hi[i], lo[i] = logPhiPair((pf - m) / s)
			}
			c.done[j] = true
		}
		nh, nl := float64(h), float64(n-h)
		for i := range row {
			row[i] += nh*hi[i] + nl*lo[i]
		}
	}
}

// gridCache is ln Φ(z) and ln Φ(−z) at every node for one level, filled
// row by row of σ as samples need them.
type gridCache struct {
	v    [2][]float64
	done []bool
}

// gridMoments are the posterior's summaries.
type gridMoments struct {
	MuPF, SDMuPF     float64 // posterior mean and SD of μ
	LogSigma, SDLogS float64 // of ln σ
	CovMuLogS        float64
	SigmaPF          float64 // exp of the posterior mean of ln σ
	EdgeMass         float64 // posterior mass in the outermost μ nodes (both ends)
	SigmaEdgeMass    float64 // posterior mass at the top σ node
}

// moments sums the normalised posterior.
func (g *tripGrid) moments() gridMoments {
	top := math.Inf(-1)
	for _, v := range g.logp {
		if v > top {
			top = v
		}
	}
	nMu := len(g.mu)
	var w, sm, sm2, ss, ss2, sms, edge, sedge float64
	for j, ls := range g.logSig {
		row := g.logp[j*nMu : (j+1)*nMu]
		for i, v := range row {
			if v-top < -45 {
				continue // below 3e-20 of the peak
			}
			p := math.Exp(v - top)
			m := g.mu[i]
			w += p
			sm += p * m
			sm2 += p * m * m
			ss += p * ls
			ss2 += p * ls * ls
			sms += p * m * ls
			if i < 2 || i >= nMu-2 {
				edge += p
			}
			if j == len(g.logSig)-1 {
				sedge += p
			}
		}
	}
	mm, ms := sm/w, ss/w
	return gridMoments{
		MuPF: mm, SDMuPF: math.Sqrt(math.Max(sm2/w-mm*mm, 0)),
		LogSigma: ms, SDLogS: math.Sqrt(math.Max(ss2/w-ms*ms, 0)),
		CovMuLogS: sms/w - mm*ms, SigmaPF: math.Exp(ms),
		EdgeMass: edge / w, SigmaEdgeMass: sedge / w,
	}
}

// predictedVar is the trip point's posterior variance expected after k
// more samples at pf: the posterior covariance of (μ, ln σ) taken as a
// Gaussian's, updated by k times one sample's expected Fisher information at
// the posterior mean (the standard sequential-design approximation, e.g.
// Kontsevich & Tyler 1999 choose by the expected posterior entropy; this is
// its Gaussian form for the variance of μ alone).
func (m gridMoments) predictedVar(pf float64, k int) float64 {
	a, b, c := m.SDMuPF*m.SDMuPF, m.CovMuLogS, m.SDLogS*m.SDLogS
	det := a*c - b*b
	if !(det > 0) {
		// A degenerate σ direction: treat μ alone.
		f := fisher(pf, m.MuPF, m.SigmaPF)
		return 1 / (1/a + float64(k)*f[0][0])
	}
	// Precision = Σ⁻¹ + k·F.
	f := fisher(pf, m.MuPF, m.SigmaPF)
	pa := c/det + float64(k)*f[0][0]
	pb := -b/det + float64(k)*f[0][1]
	pc := a/det + float64(k)*f[1][1]
	pdet := pa*pc - pb*pb
	if !(pdet > 0) {
		return a
	}
	return pc / pdet
}

// gridRebuilds bounds how often the grid is re-centred on the posterior
// when its mass reaches the grid's edge.
const gridRebuilds = 4

// refinePosterior runs the Posterior refinement from the bracket's middle.
func (s *searcher) refinePosterior(mid float64) error {
	prior := ProbitPrior{SigmaPF: s.opt.SpreadPriorPF / spreadPerSigma, LogSD: s.opt.SpreadPriorLogSD}
	m := s.buildGrid(mid, prior)
	rebuilds := 0
	recentre := func() {
		for m.EdgeMass > 1e-4 && rebuilds < gridRebuilds {
			rebuilds++
			m = s.buildGrid(m.MuPF, prior)
		}
	}
	recentre()
	for m.SDMuPF > s.opt.SETargetPF && s.res.RefineSamples < s.opt.MaxRefineSamples {
		if _, err := s.probe(s.choose(m), 1, PhaseRefine); err != nil {
			s.finishPosterior(m, prior)
			return err
		}
		m = s.grid.moments()
		recentre()
	}
	suspect := s.suspect(m, prior)
	if !suspect && (s.opt.GuardPeekK > 0 || s.opt.GuardPeekUpK > 0) {
		misread, err := s.guard(m.MuPF, s.opt.GuardPeekK, s.opt.GuardPeekUpK)
		if err != nil {
			s.finishPosterior(m, prior)
			return err
		}
		s.res.GuardMisread, suspect = misread, misread
	}
	if suspect && s.opt.GuardK > 0 {
		s.res.Suspect = true
		misread, err := s.guard(m.MuPF, s.opt.GuardK, s.opt.GuardK)
		if err != nil {
			s.finishPosterior(m, prior)
			return err
		}
		s.res.GuardMisread = s.res.GuardMisread || misread
	}
	if s.res.GuardProbes > 0 {
		m = s.grid.moments()
		recentre()
	}
	s.finishPosterior(m, prior)
	return nil
}

// buildGrid makes a fresh grid centred at centre holding every sample so
// far, and returns its moments.
func (s *searcher) buildGrid(centre float64, prior ProbitPrior) gridMoments {
	var muLogPrior func(float64) float64
	if s.opt.TripPriorSDPF > 0 {
		muLogPrior = s.tripLogPrior
	}
	s.grid = newTripGrid(centre, prior, muLogPrior, s.opt.SETargetPF)
	for _, l := range s.touched {
		s.grid.add(s.levels[l], s.n[l], s.h[l])
	}
	return s.grid.moments()
}

// choose picks the level for the next sample: the largest expected
// reduction of the trip point's posterior variance per unit of fixture cost
// (one period per sample, plus MoveCostSamples for a change of level), among
// the levels around the posterior mean and the current level.
func (s *searcher) choose(m gridMoments) int {
	v := m.SDMuPF * m.SDMuPF
	near := sort.SearchFloat64s(s.levels, m.MuPF)
	best, bestGain := -1, math.Inf(-1)
	try := func(l int) {
		cost := 1.0
		if l != s.cur {
			cost += s.opt.MoveCostSamples
		}
		if g := (v - m.predictedVar(s.levels[l], 1)) / cost; g > bestGain {
			best, bestGain = l, g
		}
	}
	for l := max(near-3, 0); l <= min(near+2, len(s.levels)-1); l++ {
		try(l)
	}
	if s.cur >= 0 {
		try(s.cur)
	}
	return best
}

// suspect reports whether the maximum-a-posteriori fit of every sample so
// far finds the unit suspect: a poor deviance, a wide σ, or one reading the
// fit gave almost no chance.
func (s *searcher) suspect(m gridMoments, prior ProbitPrior) bool {
	fit, ok := s.fit(prior, m.MuPF, m.LogSigma)
	if !ok || fit.PConsistent < s.opt.SuspectP || fit.SigmaPF > s.opt.SuspectSigmaPF || m.SigmaEdgeMass > 0.01 {
		return true
	}
	for _, l := range s.touched {
		p := normCDF((s.levels[l] - fit.MuPF) / fit.SigmaPF)
		if (s.h[l] > 0 && p < s.opt.SuspectReadingP) || (s.h[l] < s.n[l] && 1-p < s.opt.SuspectReadingP) {
			return true
		}
	}
	return false
}

// finishPosterior fills the result: the trip point and its standard error
// from the grid posterior, σ, the spread and the consistency test from the
// maximum-a-posteriori fit.
func (s *searcher) finishPosterior(m gridMoments, prior ProbitPrior) {
	fit, ok := s.fit(prior, m.MuPF, m.LogSigma)
	s.finish(fit, ok)
	if !ok || math.IsNaN(m.MuPF) {
		return
	}
	s.res.TripPF, s.res.SEPF = m.MuPF, m.SDMuPF
	s.res.Converged = m.SDMuPF <= s.opt.SETargetPF
	if r := s.opt.SigmaRefPrior; r.SigmaPF > 0 && s.grid != nil {
		s.res.SigmaRefPF = s.grid.sigmaUnder(prior, r)
	}
}

// tailZ is where logPhiPair turns to the asymptotic tail series.
const tailZ = 10

// logPhiPair returns ln Φ(z) and ln Φ(−z) from one evaluation of the
// smaller tail.
func logPhiPair(z float64) (float64, float64) {
	if a := math.Abs(z); a > tailZ {
		// ln Φ(−a) by its asymptotic series (see logPhi; the first
		// omitted term, 105/a⁸, is below 1e-6 here), and ln Φ(a) =
		// ln(1 − Φ(−a)) ≈ −Φ(−a).
		a2 := a * a
		lt := -a2/2 - math.Log(a) - 0.5*math.Log(2*math.Pi) + math.Log1p(-1/a2+3/(a2*a2)-15/(a2*a2*a2))
		if z > 0 {
			return -math.Exp(lt), lt
		}
		return lt, -math.Exp(lt)
	}
	if z < 0 {
		p := normCDF(z)
		return math.Log(p), math.Log1p(-p)
	}
	q := normCDF(-z)
	return math.Log1p(-q), math.Log(q)
}

// sigmaUnder is the posterior geometric mean of σ had the prior on σ been
// ref instead of the grid's own (prior): the grid's posterior reweighted by
// the ratio of the two priors, within the grid's range of σ.
func (g *tripGrid) sigmaUnder(prior, ref ProbitPrior) float64 {
	top := math.Inf(-1)
	for _, v := range g.logp {
		if v > top {
			top = v
		}
	}
	lp := func(p ProbitPrior, ls float64) float64 {
		if !(p.LogSD > 0) {
			return 0
		}
		r := (ls - math.Log(p.SigmaPF)) / p.LogSD
		return -r * r / 2
	}
	nMu := len(g.mu)
	var w, sl float64
	for j, ls := range g.logSig {
		shift := lp(ref, ls) - lp(prior, ls)
		for _, v := range g.logp[j*nMu : (j+1)*nMu] {
			if v-top < -45 {
				continue
			}
			p := math.Exp(v - top + shift)
			w += p
			sl += p * ls
		}
	}
	return math.Exp(sl / w)
}
