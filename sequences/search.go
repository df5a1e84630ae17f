package sequences

import (
	"errors"
	"fmt"
	"math"
	"sort"
)

// Prober applies one ladder level to the unit and reads the latch: it sets
// the ladder to index level of the sorted level set the search was given,
// settles, takes k latch samples one unit-clock period apart and returns how
// many read high.
type Prober interface {
	Probe(level int, k int) (highs int, err error)
}

// ProberFunc adapts a function to a Prober.
type ProberFunc func(level, k int) (highs int, err error)

var _ Prober = ProberFunc(nil)

// Probe calls f(level, k).
func (f ProberFunc) Probe(level, k int) (int, error) { return f(level, k) }

// Strategy selects how the trip search finds the transition before it
// refines.
type Strategy string

// Refinement selects how the trip search refines the bracket.
type Refinement string

// The refinements. Posterior keeps a grid posterior over (μ, ln σ), takes
// one sample at a time where it most reduces the trip point's expected
// posterior variance per unit of fixture cost, stops on the posterior
// standard deviation and takes guard samples only when the fit says the unit
// is suspect. Laplace is the earlier refinement: a maximum-a-posteriori fit
// whose curvature gives the standard error, batches of BatchK at the level
// that most shrinks it (staying put when that is at most 15 % worse), and
// guard samples on every unit; it is kept to compare against.
const (
	Posterior Refinement = "posterior"
	Laplace   Refinement = "laplace"
)

// The search strategies. Bracket bisects the level set with one sample per
// probe; Staircase climbs one level at a time from the bottom with one
// sample per level until the first high reading (the baseline to compare
// against). Both then refine the same way.
const (
	Bracket   Strategy = "bracket"
	Staircase Strategy = "staircase"
)

// The phases a probe can belong to (ProbeRecord.Phase).
const (
	PhaseBracket = "bracket" // bisection, including end-level confirmations
	PhaseClimb   = "climb"   // staircase climb, including end-level confirmations
	PhaseRefine  = "refine"  // adaptive probes of the probit refinement
	PhaseGuard   = "guard"   // samples well off the fitted trip point, for trip_noisy
)

// ErrSearchLevels is returned by FindTrip for a level set it cannot search:
// fewer than two levels, or levels not ascending.
var ErrSearchLevels = errors.New("sequences: unusable search levels")

// ErrSearchOptions is returned by FindTrip for invalid options.
var ErrSearchOptions = errors.New("sequences: invalid search options")

// SearchOptions tune the trip search. Zero values take the defaults named
// on each field.
type SearchOptions struct {
	// Strategy is Bracket (default) or Staircase.
	Strategy Strategy
	// Refine is Posterior (default) or Laplace.
	Refine Refinement
	// MoveCostSamples is what a change of level costs beyond its samples,
	// in sample periods: the relay settling that does not hide inside a
	// unit clock period (0 when operate + bounce end before the next edge).
	// Posterior only.
	MoveCostSamples float64
	// TripPriorPF and TripPriorSDPF are the variant's predicted trip
	// distribution (the timing model's Monte Carlo mean and SD); SD 0
	// leaves the trip point's prior flat. With a prior, the prior on the
	// trip point is the mixture (1 − TripPriorOffModel)·N(TripPriorPF,
	// TripPriorSDPF²) + TripPriorOffModel·uniform over the levels' range:
	// the Bracket strategy bisects its cumulative distribution instead of
	// the level indices (see bisectPrior), and the Posterior refinement's
	// grid carries it.
	TripPriorPF, TripPriorSDPF float64
	// TripPriorOffModel is the prior share of units the prediction does not
	// describe, whose trip may lie anywhere on the ladder (default 0.03:
	// the demo's unit defect rates sum to 3.6 %, DEVELOPERS.md "Simulator
	// realism floor"; most of them do not move the trip point). It keeps a
	// unit far from its prediction to a bisection's probes and a few more
	// instead of a search that creeps through the prior's tail.
	TripPriorOffModel float64
	// SuspectP marks a unit suspect, so that it gets guard samples, when
	// the fit's deviance has a chi-square tail probability below it
	// (default 0.05); SuspectSigmaPF when the fitted σ exceeds it; and
	// any one sample that the fit gave less
	// than SuspectReadingP of reading as it did (default 0.005). Posterior
	// only; Laplace guards every unit. The default SuspectSigmaPF, 0.16 of
	// NoisySpreadPF, is 0.4 pF: a 1.03 pF transition, above the widest a
	// good unit of the demo variant shows (0.9 pF).
	SuspectP, SuspectSigmaPF, SuspectReadingP float64
	// GuardPeekK and GuardPeekUpK are the numbers of samples the Posterior
	// refinement takes at the lower and the upper guard level of a unit
	// the fit does not find suspect (defaults 1 and 4; −1 takes none on
	// that side): a wrong reading there makes the unit suspect and the
	// full GuardK follows. A latch that reads at random (a coin flip, or a
	// probability that jumps from level to level) looks like a clean
	// transition at the one or two levels the refinement samples; only
	// samples away from the trip point show it. Five samples keep a coin
	// flip's chance of passing them at 1/32. Four go above the trip point:
	// a pad that loses contact (intermittent, open) removes capacitance, so
	// its wrong readings are lows where a good unit reads high
	// (DEVELOPERS.md "Physics" 4: less capacitance, a faster decay, a low
	// latch), and a bracket that starts from the trip prior makes about
	// one probe fewer above the trip point than a bisection of the whole
	// ladder, whose probes there caught such units too
	// (TestFindTripNoisyDetection).
	GuardPeekK, GuardPeekUpK int
	// SigmaRefPrior, when set, asks the Posterior refinement for
	// TripResult.SigmaRefPF: σ as the samples show it under this prior
	// rather than the one searched with (a plan's running prior must be
	// built from figures that do not feed on it).
	SigmaRefPrior ProbitPrior
	// Known are samples taken before the search (for example the idle
	// check's, at the bottom level): they are booked first and enter the fit,
	// and a level they cover is not probed again by the bracket's end checks.
	Known []ProbeRecord
	// SETargetPF ends refinement once the trip point's standard error is
	// at most this (default 0.1 pF).
	SETargetPF float64
	// MaxRefineSamples caps the latch samples spent refining (default 32
	// for Laplace; 64·(0.1 pF/SETargetPF)² for Posterior).
	MaxRefineSamples int
	// BatchK is the number of latch samples per refinement probe
	// (default 4).
	BatchK int
	// ConfirmK is the number of extra samples taken at an end level of
	// the range before concluding that the unit never trips in the range,
	// or that it trips at or below its bottom (default 4).
	ConfirmK int
	// SpreadPriorPF is the expected 10–90 % width of the transition; it
	// centres a weak log-normal prior on σ (default 0.6 pF).
	SpreadPriorPF float64
	// SpreadPriorLogSD is the prior's standard deviation of ln σ
	// (default 0.7).
	SpreadPriorLogSD float64
	// NoisySpreadPF marks a fitted transition wider than this as noisy
	// (default 2.5 pF).
	NoisySpreadPF float64
	// GuardK is the number of samples taken at each guard level, one on
	// each side of the fitted trip point after refinement (default 3; −1
	// takes none). A sharp transition reads low at the lower guard and high
	// at the upper one; a wrong reading there marks the unit Noisy.
	GuardK int
	// GuardPF is the distance of the guard levels from the fitted trip
	// point (default 0.6·NoisySpreadPF: 1.5 pF, 4.3 σ of a 0.9 pF
	// transition).
	GuardPF float64
	// ConsistencyP marks the readings inconsistent with one monotone
	// transition when the fit's deviance has a chi-square tail probability
	// below it (default 0.001).
	ConsistencyP float64
}

// withDefaults fills zero fields and validates the rest.
func (o SearchOptions) withDefaults() (SearchOptions, error) {
	if o.Strategy == "" {
		o.Strategy = Bracket
	}
	if o.Refine == "" {
		o.Refine = Posterior
	}
	def := func(v *float64, d float64) {
		if *v == 0 {
			*v = d
		}
	}
	def(&o.SETargetPF, 0.1)
	def(&o.SpreadPriorPF, 0.6)
	def(&o.SpreadPriorLogSD, 0.7)
	def(&o.NoisySpreadPF, 2.5)
	def(&o.ConsistencyP, 1e-3)
	def(&o.TripPriorOffModel, 0.03)
	if o.MaxRefineSamples == 0 {
		// Laplace: 32. Posterior: 64 at 0.1 pF (2.4 × the floor's
		// refinement at σ 0.35 pF: its honest SE needs more samples than
		// the Laplace SE claimed), scaled as a target needs, (1/SE)².
		o.MaxRefineSamples = 32
		if o.Refine == Posterior && o.SETargetPF > 0 {
			o.MaxRefineSamples = max(64, int(math.Ceil(64*0.01/(o.SETargetPF*o.SETargetPF))))
		}
	}
	if o.BatchK == 0 {
		o.BatchK = 4
	}
	if o.ConfirmK == 0 {
		o.ConfirmK = 4
	}
	if o.GuardK == 0 {
		o.GuardK = 3
	}
	if o.GuardPeekK == 0 {
		o.GuardPeekK = 1
	}
	if o.GuardPeekUpK == 0 {
		o.GuardPeekUpK = 4
	}
	def(&o.GuardPF, 0.6*o.NoisySpreadPF)
	def(&o.SuspectP, 0.05)
	def(&o.SuspectSigmaPF, 0.16*o.NoisySpreadPF)
	def(&o.SuspectReadingP, 0.005)
	switch {
	case o.Strategy != Bracket && o.Strategy != Staircase:
		return o, fmt.Errorf("strategy %q: %w", o.Strategy, ErrSearchOptions)
	case o.Refine != Posterior && o.Refine != Laplace:
		return o, fmt.Errorf("refinement %q: %w", o.Refine, ErrSearchOptions)
	case !(o.MoveCostSamples >= 0), !(o.TripPriorSDPF >= 0), o.TripPriorSDPF > 0 && math.IsNaN(o.TripPriorPF),
		!(o.TripPriorOffModel > 0 && o.TripPriorOffModel <= 1):
		return o, fmt.Errorf("negative move cost, prior width or off-model share: %w", ErrSearchOptions)
	case !(o.SETargetPF > 0), !(o.SpreadPriorPF > 0), !(o.SpreadPriorLogSD > 0),
		!(o.NoisySpreadPF > 0), !(o.GuardPF > 0), !(o.ConsistencyP >= 0 && o.ConsistencyP < 1):
		return o, fmt.Errorf("non-positive target, prior or threshold: %w", ErrSearchOptions)
	case o.MaxRefineSamples < 0, o.BatchK < 0, o.ConfirmK < 0, o.GuardK < -1, o.GuardPeekK < -1, o.GuardPeekUpK < -1:
		return o, fmt.Errorf("negative sample count: %w", ErrSearchOptions)
	}
	return o, nil
}

// ProbeRecord is one probe as the search made it.
type ProbeRecord struct {
	Level int     // index into the level set
	PF    float64 // the level's capacitance
	K     int     // samples taken
	Highs int     // samples that read high
	Phase string  // PhaseBracket, PhaseClimb, PhaseRefine or PhaseGuard
}

// TripResult is the outcome of one trip search.
type TripResult struct {
	// Found is false when the latch never read high in the range (after a
	// confirmation at the top level): the unit does not trip (no_trip).
	Found bool
	// Below is true when the lowest level of the range read high on every
	// sample: the trip point is at or below it (TripPF = that level, an
	// upper bound; no fit is made).
	Below bool
	// TripPF is the fitted 50 % point in the levels' basis (NaN when not
	// Found); SEPF its standard error; SigmaPF the fitted σ of the
	// transition and SpreadPF its 10–90 % width (2·1.2816·σ).
	TripPF, SEPF, SigmaPF, SpreadPF float64
	// Converged is true when SEPF reached the target within the budget.
	Converged bool
	// Consistent is false when the readings do not follow one monotone
	// transition (deviance test).
	Consistent bool
	// GuardMisread is true when a guard level read on the wrong side.
	GuardMisread bool
	// OffsetPF is the fixture offset the plan added to TripPF (0: none;
	// Plan.SetOffset): TripPF − OffsetPF is the trip in the levels' basis.
	OffsetPF float64
	// SigmaRefPF is the posterior geometric mean of σ under
	// SearchOptions.SigmaRefPrior (0 when not asked or not Posterior).
	SigmaRefPF float64
	// Suspect is true when the Posterior refinement's fit found the unit
	// suspect and so took guard samples.
	Suspect bool
	// Noisy is true when the unit looks like trip_noisy: readings not
	// Consistent, SpreadPF above the noisy threshold, or a guard misread.
	Noisy bool
	// Fit is the final probit fit (zero when no fit was made).
	Fit ProbitFit
	// Probes lists every probe in call order.
	Probes []ProbeRecord
	// BracketProbes and BracketSamples count the bisection (or the climb,
	// for Staircase) with its end confirmations; RefineProbes and
	// RefineSamples the refinement; GuardProbes and GuardSamples the guard
	// levels; Samples all latch samples.
	BracketProbes, BracketSamples int
	RefineProbes, RefineSamples   int
	GuardProbes, GuardSamples     int
	Samples                       int
	// Moves counts probes made at a different level from the probe before
	// (the first probe counts): each may switch relays.
	Moves int
}

// FindTrip searches the sorted level set (pF, the external basis: ladder
// plus stray, restricted to the search range; index i of levels is level i
// of p) for the unit's trip point: it brackets the transition with single
// samples (bisection, or a climb for Staircase), then refines it with a
// maximum-a-posteriori probit fit over every sample taken, probing where the
// next samples most shrink the trip point's standard error, in batches of
// opt.BatchK, until the standard error reaches opt.SETargetPF or
// opt.MaxRefineSamples are spent; last (unless opt.GuardK is −1) it takes
// opt.GuardK samples at the nearest levels at least opt.GuardPF below and
// above the fitted trip point. On a probe error it returns the result so far
// with the error.
func FindTrip(p Prober, levels []float64, opt SearchOptions) (TripResult, error) {
	opt, err := opt.withDefaults()
	if err != nil {
		return TripResult{}, err
	}
	if len(levels) < 2 {
		return TripResult{}, fmt.Errorf("%d levels: %w", len(levels), ErrSearchLevels)
	}
	for i := 1; i < len(levels); i++ {
		if !(levels[i] > levels[i-1]) {
			return TripResult{}, fmt.Errorf("level %d (%g pF) not above level %d (%g pF): %w",
				i, levels[i], i-1, levels[i-1], ErrSearchLevels)
		}
	}
	s := &searcher{p: p, levels: levels, opt: opt, n: make([]int, len(levels)), h: make([]int, len(levels)), cur: -1}
	s.res.TripPF, s.res.SEPF, s.res.SigmaPF, s.res.SpreadPF = math.NaN(), math.NaN(), math.NaN(), math.NaN()
	for _, k := range opt.Known {
		if k.Level < 0 || k.Level >= len(levels) || k.K < 0 || k.Highs < 0 || k.Highs > k.K {
			return TripResult{}, fmt.Errorf("known samples %+v: %w", k, ErrSearchOptions)
		}
		s.book(k.Level, k.K, k.Highs)
	}
	err = s.run()
	return s.res, err
}

// searcher is the state of one FindTrip call.
type searcher struct {
	p       Prober
	levels  []float64
	opt     SearchOptions
	n, h    []int // samples and highs per level
	touched []int // levels with samples, in first-probe order
	cur     int   // level of the last probe, −1 before the first
	res     TripResult
	grid    *tripGrid // the Posterior refinement's posterior, once it runs
}

// book adds k samples at level, highs of them high, to the tallies.
func (s *searcher) book(level, k, highs int) {
	if s.n[level] == 0 && k > 0 {
		s.touched = append(s.touched, level)
	}
	s.n[level] += k
	s.h[level] += highs
}

// probe takes k samples at level and books them.
func (s *searcher) probe(level, k int, phase string) (int, error) {
	highs, err := s.p.Probe(level, k)
	if err != nil {
		return 0, fmt.Errorf("probe level %d (%.2f pF): %w", level, s.levels[level], err)
	}
	if highs < 0 || highs > k {
		return 0, fmt.Errorf("probe level %d: %d of %d samples high", level, highs, k)
	}
	s.res.Probes = append(s.res.Probes, ProbeRecord{Level: level, PF: s.levels[level], K: k, Highs: highs, Phase: phase})
	if level != s.cur {
		s.res.Moves++
	}
	s.cur = level
	s.book(level, k, highs)
	if s.grid != nil {
		s.grid.add(s.levels[level], k, highs)
	}
	s.res.Samples += k
	switch phase {
	case PhaseRefine:
		s.res.RefineProbes++
		s.res.RefineSamples += k
	case PhaseGuard:
		s.res.GuardProbes++
		s.res.GuardSamples += k
	default:
		s.res.BracketProbes++
		s.res.BracketSamples += k
	}
	return highs, nil
}

func (s *searcher) run() error {
	top := len(s.levels) - 1
	var lo, hi int // lo last read low, hi first read high
	var err error
	phase := PhaseBracket
	if s.opt.Strategy == Staircase {
		phase = PhaseClimb
		lo, hi, err = s.climb()
	} else if s.opt.TripPriorSDPF > 0 {
		lo, hi, err = s.bisectPrior()
	} else {
		lo, hi, err = s.bisect()
	}
	if err != nil {
		return err
	}
	// End levels: confirm before concluding below-range or no trip.
	if hi == 0 {
		if _, err := s.probe(0, s.opt.ConfirmK, phase); err != nil {
			return err
		}
		if s.h[0] == s.n[0] {
			s.res.Found, s.res.Below = true, true
			s.res.TripPF = s.levels[0]
			s.res.Consistent = true
			return nil
		}
	}
	if lo == top {
		if _, err := s.probe(top, s.opt.ConfirmK, phase); err != nil {
			return err
		}
		if s.h[top] == 0 {
			s.res.Consistent = true
			return nil
		}
	}
	s.res.Found = true
	mid := (s.levels[max(lo, 0)] + s.levels[min(hi, top)]) / 2
	if s.opt.Refine == Laplace {
		return s.refine(mid)
	}
	return s.refinePosterior(mid)
}

// bisect halves the index range with one sample per probe, taking level 0
// as low and the top level as high until probed; it returns the adjacent
// pair (lo read low, hi read high), with hi = 0 when level 0 read high and
// lo = top when the top level read low.
func (s *searcher) bisect() (lo, hi int, err error) {
	top := len(s.levels) - 1
	lo, hi = 0, top
	for hi-lo > 1 {
		mid := lo + (hi-lo)/2
		hs, err := s.probe(mid, 1, PhaseBracket)
		if err != nil {
			return 0, 0, err
		}
		if hs > 0 {
			hi = mid
		} else {
			lo = mid
		}
	}
	if lo == 0 && s.n[0] == 0 {
		hs, err := s.probe(0, 1, PhaseBracket)
		if err != nil {
			return 0, 0, err
		}
		if hs > 0 {
			return 0, 0, nil
		}
	}
	if hi == top && s.n[top] == 0 {
		hs, err := s.probe(top, 1, PhaseBracket)
		if err != nil {
			return 0, 0, err
		}
		if hs == 0 {
			return top, top, nil
		}
	}
	return lo, hi, nil
}

// tripPriorCDF is the trip point's prior probability of lying below x
// (TripPriorSDPF > 0): the variant's predicted normal distribution, mixed
// with TripPriorOffModel of a uniform one over the levels' range.
func (s *searcher) tripPriorCDF(x float64) float64 {
	lo, hi := s.levels[0], s.levels[len(s.levels)-1]
	u := math.Min(math.Max((x-lo)/(hi-lo), 0), 1)
	e := s.opt.TripPriorOffModel
	return (1-e)*normCDF((x-s.opt.TripPriorPF)/s.opt.TripPriorSDPF) + e*u
}

// tripLogPrior is the log density of that prior at x.
func (s *searcher) tripLogPrior(x float64) float64 {
	lo, hi := s.levels[0], s.levels[len(s.levels)-1]
	e, sd := s.opt.TripPriorOffModel, s.opt.TripPriorSDPF
	d := (1 - e) * phi((x-s.opt.TripPriorPF)/sd) / sd
	if x >= lo && x <= hi {
		d += e / (hi - lo)
	}
	return math.Log(math.Max(d, math.SmallestNonzeroFloat64))
}

// bisectPrior is bisect on the trip point's prior instead of the level
// indices: each single-sample probe is at the level that splits the
// prior's probability left between the last level read low and the first
// read high most evenly (its conditional median). This is the weighted
// bisection of Mehlhorn's nearly optimal binary search trees (K. Mehlhorn,
// Acta Informatica 5, 1975, 287–295: at most H + 2 probes expected, H the
// prior's entropy over the level gaps, against log₂ of the gap count for
// plain bisection). The first probe is at the predicted trip point; while
// the readings say the trip lies outside the prediction the probes step
// outwards, by steps that grow as the normal part's tail empties and the
// off-model part takes over, until they become plain bisection of what is
// left. It returns what bisect returns; level 0 and the top level are
// probed only when the prior's split falls there, and samples already
// booked at them (SearchOptions.Known) count.
func (s *searcher) bisectPrior() (lo, hi int, err error) {
	top := len(s.levels) - 1
	lo, hi = -1, top+1 // −1 and top+1: not yet bounded
	if s.n[0] > 0 && s.h[0] == 0 {
		lo = 0
	}
	if s.n[top] > 0 && s.h[top] == s.n[top] {
		hi = top
	}
	for hi-lo > 1 {
		a, b := 0.0, 1.0
		if lo >= 0 {
			a = s.tripPriorCDF(s.levels[lo])
		}
		if hi <= top {
			b = s.tripPriorCDF(s.levels[hi])
		}
		q := (a + b) / 2
		first, last := lo+1, hi-1
		// The first level in [first, last] whose prior CDF reaches q, or
		// the one before it when that is nearer.
		m := first + sort.Search(last-first+1, func(i int) bool { return s.tripPriorCDF(s.levels[first+i]) >= q })
		if m > last || (m > first && q-s.tripPriorCDF(s.levels[m-1]) < s.tripPriorCDF(s.levels[m])-q) {
			m--
		}
		hs, err := s.probe(m, 1, PhaseBracket)
		if err != nil {
			return 0, 0, err
		}
		if hs > 0 {
			hi = m
		} else {
			lo = m
		}
	}
	switch {
	case hi == 0:
		return 0, 0, nil
	case lo == top:
		return top, top, nil
	}
	return lo, hi, nil
}

// climb probes every level from the bottom with one sample until the first
// high reading.
func (s *searcher) climb() (lo, hi int, err error) {
	for i := range s.levels {
		hs, err := s.probe(i, 1, PhaseClimb)
		if err != nil {
			return 0, 0, err
		}
		if hs > 0 {
			return max(i-1, 0), i, nil
		}
	}
	top := len(s.levels) - 1
	return top, top, nil
}

// tallies returns the samples so far, one tally per level probed.
func (s *searcher) tallies() []Tally {
	t := make([]Tally, len(s.touched))
	for i, l := range s.touched {
		t[i] = Tally{PF: s.levels[l], N: s.n[l], Highs: s.h[l]}
	}
	return t
}

// refine runs the adaptive probit refinement from a starting 50 % point.
func (s *searcher) refine(mu0 float64) error {
	prior := ProbitPrior{SigmaPF: s.opt.SpreadPriorPF / spreadPerSigma, LogSD: s.opt.SpreadPriorLogSD}
	fit, ok := s.fit(prior, mu0, math.Log(prior.SigmaPF))
	for ok && fit.SEMuPF > s.opt.SETargetPF && s.res.RefineSamples < s.opt.MaxRefineSamples {
		k := min(s.opt.BatchK, s.opt.MaxRefineSamples-s.res.RefineSamples)
		if _, err := s.probe(s.next(fit, prior, k), k, PhaseRefine); err != nil {
			s.finish(fit, ok)
			return err
		}
		fit, ok = s.fit(prior, fit.MuPF, math.Log(fit.SigmaPF))
	}
	if ok && s.opt.GuardK > 0 {
		misread, err := s.guard(fit.MuPF, s.opt.GuardK, s.opt.GuardK)
		if err != nil {
			s.finish(fit, ok)
			return err
		}
		s.res.GuardMisread = misread
		fit, ok = s.fit(prior, fit.MuPF, math.Log(fit.SigmaPF))
	}
	s.finish(fit, ok)
	return nil
}

// guard takes kLo samples at the highest level at least GuardPF below mu
// and kHi at the lowest at least GuardPF above it (none on a side whose k
// is not positive), and reports whether either read on the wrong side of
// mu.
func (s *searcher) guard(mu float64, kLo, kHi int) (misread bool, err error) {
	// Highest level ≤ mu − GuardPF.
	if lo := sort.SearchFloat64s(s.levels, math.Nextafter(mu-s.opt.GuardPF, math.Inf(1))) - 1; lo >= 0 && kLo > 0 {
		hs, err := s.probe(lo, kLo, PhaseGuard)
		if err != nil {
			return false, err
		}
		misread = hs > 0
	}
	if hi := sort.SearchFloat64s(s.levels, mu+s.opt.GuardPF); hi < len(s.levels) && kHi > 0 {
		hs, err := s.probe(hi, kHi, PhaseGuard)
		if err != nil {
			return false, err
		}
		misread = misread || hs < kHi
	}
	return misread, nil
}

// fit fits all samples from a warm start, falling back to the prior's σ and
// the samples' mean level.
func (s *searcher) fit(prior ProbitPrior, mu, logSigma float64) (ProbitFit, bool) {
	t := s.tallies()
	fit, err := fitProbit(t, prior, mu, logSigma)
	if err != nil {
		fit, err = fitProbit(t, prior, midTransition(t), math.Log(prior.SigmaPF))
	}
	return fit, err == nil
}

// finish fills the result from the last fit.
func (s *searcher) finish(fit ProbitFit, ok bool) {
	if !ok {
		// The readings defeat the fit: report them as noisy.
		s.res.Noisy = true
		s.res.SEPF = math.Inf(1)
		return
	}
	s.res.Fit = fit
	s.res.TripPF, s.res.SEPF = fit.MuPF, fit.SEMuPF
	s.res.SigmaPF, s.res.SpreadPF = fit.SigmaPF, fit.SpreadPF()
	s.res.Converged = fit.SEMuPF <= s.opt.SETargetPF
	s.res.Consistent = fit.PConsistent >= s.opt.ConsistencyP
	s.res.Noisy = !s.res.Consistent || s.res.SpreadPF > s.opt.NoisySpreadPF || s.res.GuardMisread
}

// stayFactor lets the search stay at the current level (no relay
// operations) when that is at most this much worse than the best level.
const stayFactor = 1.15

// next chooses the level for the next k samples: the one that minimises the
// predicted variance of μ, [(H + k·F(level))⁻¹]μμ, with H the observed
// information and F the expected information of one sample, among the
// levels near the fitted 50 % point and the current level.
func (s *searcher) next(fit ProbitFit, prior ProbitPrior, k int) int {
	_, _, h := nlp(s.tallies(), prior, fit.MuPF, math.Log(fit.SigmaPF))
	predVar := func(level int) float64 {
		f := fisher(s.levels[level], fit.MuPF, fit.SigmaPF)
		a := h[0][0] + float64(k)*f[0][0]
		b := h[0][1] + float64(k)*f[0][1]
		c := h[1][1] + float64(k)*f[1][1]
		det := a*c - b*b
		if !(det > 0) || !(a > 0) {
			return math.Inf(1)
		}
		return c / det
	}
	near := sort.SearchFloat64s(s.levels, fit.MuPF) // first level ≥ μ
	best, bestVar := -1, math.Inf(1)
	for l := max(near-3, 0); l <= min(near+2, len(s.levels)-1); l++ {
		if v := predVar(l); v < bestVar || best < 0 {
			best, bestVar = l, v
		}
	}
	if s.cur >= 0 && s.cur != best && predVar(s.cur) <= stayFactor*bestVar {
		return s.cur
	}
	return best
}
