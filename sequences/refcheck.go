package sequences

import (
	"context"
	"fmt"
	"math"
	"math/bits"
	"sort"
	"strings"
	"time"

	"padline/fixture"
)

// ---------------------------------------------------------------------------
// Reference check and ladder self-test

// Reference is a registered reference unit: its serial, the trip point this
// station measures for it, and the allowed deviation.
type Reference struct {
	Serial       string  `json:"serial"`
	TripPF       float64 `json:"trip_pf"`
	AllowedDevPF float64 `json:"allowed_dev_pf"`
	// LabTripPF is the unit's trip point as external capacitance at the
	// pad, measured against a calibrated capacitance standard (0: not
	// known), and LabUPF its standard uncertainty. With them the check's
	// trip says how far this fixture's ladder is off (OffsetFromChecks).
	LabTripPF float64 `json:"lab_trip_pf,omitempty"`
	LabUPF    float64 `json:"lab_u_pf,omitempty"`
}

// CheckConfig configures CheckReference.
type CheckConfig struct {
	// RungsPF and StrayPF are the ladder as entered in the station file.
	RungsPF []float64
	StrayPF float64
	// PowerSettle is the wait after power-up; Period the latch sample
	// period without a clock pin.
	PowerSettle, Period time.Duration
	// CalPF is one rung's calibration standard uncertainty (default 0.05
	// pF, the LCR meter's at these values, DEVELOPERS.md "Simulator realism floor"). A level's offset
	// from the reference trip is known to ±CalPF·√(rungs it does not share
	// with the trip's level).
	CalPF float64
	// K is the first samples per level of a rung pair (default 8; 32 for
	// a pair that straddles the trip by less than 4σ); MaxK the most
	// samples one level gets by re-probing (default 512).
	K, MaxK int
	// DecideNats is the log likelihood ratio by which a stuck rung must
	// explain the pair readings better than the healthy ladder before it is
	// named (default ln 10⁶); AcceptNats the ratio by which the healthy
	// ladder must beat every stuck rung to end re-probing (default ln 10³).
	DecideNats, AcceptNats float64
	// MaxSearches is how many trip searches are pooled when the first
	// deviation lies within 3 standard errors of the allowance (default 4).
	MaxSearches int
	// Search tunes the trip search (defaults: SE target 0.03 pF, 96
	// refinement samples).
	Search SearchOptions
}

func (c CheckConfig) withDefaults() CheckConfig {
	if c.CalPF <= 0 {
		c.CalPF = 0.05
	}
	if c.K <= 0 {
		c.K = 8
	}
	if c.MaxK <= 0 {
		c.MaxK = 512
	}
	if c.DecideNats <= 0 {
		c.DecideNats = math.Log(1e6)
	}
	if c.AcceptNats <= 0 {
		c.AcceptNats = math.Log(1e3)
	}
	if c.MaxSearches <= 0 {
		c.MaxSearches = 4
	}
	if c.Search.SETargetPF == 0 {
		c.Search.SETargetPF = 0.03
	}
	if c.Search.Refine == "" {
		// The reference check's allowances and rung inference were set
		// on the Laplace search's probes; it keeps them.
		c.Search.Refine = Laplace
	}
	if c.Search.MaxRefineSamples == 0 {
		c.Search.MaxRefineSamples = 96
	}
	return c
}

// Rung statuses of the self-test.
const (
	RungOK          = "ok"
	RungStuckOpen   = "stuck_open"
	RungStuckClosed = "stuck_closed"
	// RungDrifted: the reference deviations, taken together, point at this
	// rung alone (CombineChecks).
	RungDrifted = "drifted"
	// RungDriftSuspect: one of several rungs (or the stray) the reference
	// deviations fit equally well.
	RungDriftSuspect = "drift_suspect"
	// RungUnmeasured: the pair readings of this reference unit could not
	// tell the rung stuck from healthy within the sample budget.
	RungUnmeasured = "not_measured"
)

// RungFinding is the self-test's verdict on one rung.
type RungFinding struct {
	Rung      int     `json:"rung"`
	EnteredPF float64 `json:"entered_pf"`
	// Test says how the rung was tested and what it read; "" when it was
	// not tested.
	Test   string `json:"test,omitempty"`
	Status string `json:"status"`
}

// RefCheck is the result of checking one reference unit.
type RefCheck struct {
	Reference
	// MeasuredPF is the mean of the pooled trip searches, SEPF its
	// standard error (twice the searches' own, which understate it when the
	// trip falls between widely spaced levels), DevPF MeasuredPF − TripPF.
	MeasuredPF *float64 `json:"measured_pf"`
	SEPF       *float64 `json:"se_pf"`
	DevPF      *float64 `json:"dev_pf"`
	// SpreadPF is the measured 10–90 % transition (first search).
	SpreadPF *float64      `json:"spread_pf"`
	OK       bool          `json:"ok"`
	Rungs    []RungFinding `json:"rungs"`
	// Faults name every problem found, one line each; empty when OK.
	Faults []string `json:"faults"`
	// Suspects, for a deviation beyond the allowance: the rungs this
	// reference's trip mostly rests on (CombineChecks narrows it with the
	// other reference units).
	Suspects string `json:"suspects,omitempty"`
	// RungWeights[r] is how much of a drift of rung r this reference's
	// measured trip takes up (0–1): the share of the trip searches' Fisher
	// information on levels with rung r closed. A drift of the stray moves
	// every reference by its full size. Empty when no trip was measured.
	RungWeights []float64 `json:"rung_weights,omitempty"`
	// StuckFound is true when the pair readings named a stuck rung: the
	// deviation then says nothing about drift.
	StuckFound bool `json:"stuck_found,omitempty"`
	// StuckLLR is the log likelihood ratio (nats) of the best single stuck
	// rung against the healthy ladder on the pair readings: named from
	// CheckConfig.DecideNats up, the healthy ladder accepted from
	// −AcceptNats down.
	StuckLLR    float64       `json:"stuck_llr"`
	FixtureTime time.Duration `json:"fixture_time_ns"`
	Searches    int           `json:"searches"`
	// PairSamples counts the latch samples of the rung pairs and pogo
	// levels, re-probes included.
	PairSamples int `json:"pair_samples"`
}

// checker drives one reference check.
type checker struct {
	ctx  context.Context
	st   Station
	cfg  CheckConfig
	all  []Level // every pattern of the ladder, by entered pF, ascending
	memo map[llKey]float64
	res  *RefCheck // the result being filled
}

// CheckReference powers the reference unit already in the fixture, measures
// its trip point and compares it with ref, and self-tests the ladder on it.
//
//   - Pogo pins: a latch that never reads high, even with every rung
//     closed, is an open pad or latch pin (the two read the same: nothing
//     of the fixture reaches the unit, or nothing of the unit the fixture).
//   - Trip: a trip search on the whole ladder near the registered trip.
//   - Rung pairs: for every rung r, the level q without r and q + r that
//     best straddle the trip. With a healthy ladder the two sit C_r apart
//     across the trip; with r stuck they are the same circuit and read
//     alike; a stuck rung s ≠ r moves both by C_s. Every reading is scored
//     against the healthy ladder and against each single stuck rung by its
//     likelihood under a probit transition, integrated over what the
//     station cannot know: the levels' calibration errors relative to the
//     trip's level (CalPF·√(rungs not shared), normal) and the reference's
//     allowed deviation, and maximised over the transition's σ. A stuck
//     rung is named only when it explains the readings DecideNats better
//     than the healthy ladder; until one side wins, the pairs that tell
//     them apart are re-probed with twice the samples (at most MaxK).
//   - Deviation: the trip is compared with the allowance; when it lies
//     within 3 standard errors of it, further searches are pooled (at most
//     MaxSearches). CombineChecks names the drifted rung (or the group the
//     reference units cannot tell apart) from every reference's deviation.
//
// The station is left with power off and every rung open. An error means
// the station could not finish (pin error, lid): no verdict.
func CheckReference(ctx context.Context, st Station, clk Clock, ref Reference, cfg CheckConfig) (res RefCheck, err error) {
	cfg = cfg.withDefaults()
	res.Reference = ref
	n := len(cfg.RungsPF)
	if n == 0 || n > 16 {
		return res, fmt.Errorf("reference check: ladder has %d rungs, want 1 to 16", n)
	}
	start := clk.Now()
	defer func() {
		if herr := st.Halt(); herr != nil && err == nil {
			err = fmt.Errorf("reference check: halt: %w", herr)
		}
		res.FixtureTime = clk.Now().Sub(start)
	}()
	c := &checker{ctx: ctx, st: st, cfg: cfg, res: &res}
	for p := range 1 << n {
		c.all = append(c.all, Level{PF: c.pf(uint16(p)), Pattern: uint16(p)})
	}
	sort.SliceStable(c.all, func(i, j int) bool { return c.all[i].PF < c.all[j].PF })
	if err := c.powerUp(clk); err != nil {
		return res, err
	}
	res.Rungs = make([]RungFinding, n)
	for r := range n {
		res.Rungs[r] = RungFinding{Rung: r, EnteredPF: cfg.RungsPF[r], Status: RungUnmeasured}
	}
	ends, open, err := c.pogo(ref.TripPF)
	if err != nil || open {
		return res, err
	}
	first, err := c.tripNear(ref.TripPF)
	if err != nil {
		return res, err
	}
	res.Searches++
	center, uT, sigma := c.centre(ref, first)
	rd, sc, err := c.readPairs(ends, center, uT, sigma)
	if err != nil {
		return res, err
	}
	if c.judgePairs(rd, sc, center) {
		return res, nil
	}
	if err := c.deviation(first); err != nil {
		return res, err
	}
	res.OK = len(res.Faults) == 0
	return res, nil
}

// fault adds one fault line to the check's result.
func (c *checker) fault(format string, args ...any) {
	c.res.Faults = append(c.res.Faults, fmt.Sprintf(format, args...))
}

// powerUp powers the reference unit (the lid must be closed) and waits
// for it to settle.
func (c *checker) powerUp(clk Clock) error {
	closed, err := c.st.LidClosed()
	if err != nil {
		return fmt.Errorf("reference check: lid: %w", err)
	}
	if !closed {
		return fmt.Errorf("reference check: %w", fixture.ErrLidOpen)
	}
	if err := c.st.Power(true); err != nil {
		return fmt.Errorf("reference check: power: %w", err)
	}
	clk.Sleep(c.cfg.PowerSettle)
	return nil
}

// pogo reads the latch with no rung and with every rung closed; open is
// true (and a fault recorded) when it never reads high even with every rung
// closed: an open pad or latch pogo pin. ends are the two readings.
func (c *checker) pogo(T float64) (ends []reading, open bool, err error) {
	allClosed := uint16(1<<len(c.cfg.RungsPF) - 1)
	lowAll, err := c.highs(0, c.cfg.K)
	if err != nil {
		return nil, false, err
	}
	highAll, err := c.highs(allClosed, c.cfg.K)
	if err != nil {
		return nil, false, err
	}
	c.res.PairSamples += 2 * c.cfg.K
	if top := c.pf(allClosed); highAll == 0 && top > T+2 {
		c.fault("pad or latch pogo pin open: the latch never read high, not even with every rung closed (%.1f pF)", top)
		return nil, true, nil
	}
	return []reading{
		{lo: 0, nlo: c.cfg.K, hlo: lowAll, rung: -1},
		{lo: allClosed, nlo: c.cfg.K, hlo: highAll, rung: -1},
	}, false, nil
}

// centre picks the trip the rung pairs are judged against, its
// uncertainty uT and the transition σ, from the first search.
func (c *checker) centre(ref Reference, first search) (center, uT, sigma float64) {
	sigma = 0.25 // no transition measured: a typical one
	center, uT = ref.TripPF, math.Max(ref.AllowedDevPF/2, 0.05)
	if first.Found && !first.Below && !math.IsNaN(first.TripPF) {
		if sp := first.SpreadPF; sp > 0 && !math.IsInf(sp, 0) {
			c.res.SpreadPF = ptrF(sp)
			sigma = first.SigmaPF
		}
		// The pairs are judged against this session's trip when it lies
		// within 1 pF (or the allowance) of the registered one: a drifted
		// rung under every level near the trip moves the trip, not the
		// pairs' places around it, and a stuck small rung moves it by less
		// than its value toward where the pair still tells. A trip further
		// off is a stuck rung the search followed: the registered trip
		// (within its allowance) is the better centre then.
		if math.Abs(first.TripPF-ref.TripPF) <= math.Max(ref.AllowedDevPF, 1) {
			center, uT = first.TripPF, math.Max(2*first.SEPF, 0.03)
		}
	}
	return center, uT, math.Min(math.Max(sigma, 0.1), 1.5)
}

// readPairs reads every rung's straddling pair, then re-probes the pairs
// that are not yet decisive until the healthy ladder or one stuck rung
// wins (or the sample budget is spent), and returns the readings (ends
// first) with their scores.
func (c *checker) readPairs(ends []reading, center, uT, sigma float64) ([]reading, scores, error) {
	cfg := c.cfg
	pt := c.nearest(center)
	rd := ends
	for r := range cfg.RungsPF {
		q := c.straddle(r, center)
		k := cfg.K
		m := math.Min(center-c.pf(q), c.pf(q)+cfg.RungsPF[r]-center)
		if m < 4*sigma+3*c.u(q, pt, uT) {
			k = max(k, 32)
		}
		x := reading{lo: q, hi: q | 1<<r, pair: true, rung: r}
		if err := c.sample(&x, k); err != nil {
			return nil, scores{}, err
		}
		c.res.PairSamples += 2 * k
		rd = append(rd, x)
	}
	for {
		sc := c.score(rd, center, uT, pt)
		best, llr := sc.bestFault()
		if llr >= cfg.DecideNats || llr <= -cfg.AcceptNats {
			return rd, sc, nil
		}
		// Re-probe the pairs whose readings the best fault and the healthy
		// ladder predict differently and that are not yet decisive.
		more := false
		for i := range rd {
			x := &rd[i]
			if x.nlo >= cfg.MaxK || sc.per[best][i]-sc.per[0][i] <= -cfg.AcceptNats || !c.differs(*x, best, center, sigma) {
				continue
			}
			k := min(x.nlo, cfg.MaxK-x.nlo)
			if err := c.sample(x, k); err != nil {
				return nil, scores{}, err
			}
			c.res.PairSamples += k
			if x.pair {
				c.res.PairSamples += k
			}
			more = true
		}
		if !more {
			return rd, sc, nil
		}
	}
}

// judgePairs turns the pair scores into rung statuses and faults; done is
// true when the check ends here (a stuck rung, or readings no single fault
// explains).
func (c *checker) judgePairs(rd []reading, sc scores, center float64) (done bool) {
	cfg, res := c.cfg, c.res
	best, llr := sc.bestFault()
	res.StuckLLR = llr
	for _, x := range rd {
		if !x.pair {
			continue
		}
		f := &res.Rungs[x.rung]
		f.Test = fmt.Sprintf("%s (trip %.2f pF)", c.describeReading(x), center)
		if sc.llrOf(c.hyp(x.rung, false)) <= -cfg.AcceptNats && sc.llrOf(c.hyp(x.rung, true)) <= -cfg.AcceptNats {
			f.Status = RungOK
		}
	}
	if llr >= cfg.DecideNats {
		c.stuck(rd, sc, best)
		return true
	}
	if i := sc.poor[0]; i >= 0 {
		cause := "several ladder faults, or an intermittent or damaged reference unit"
		if x := rd[i]; x.pair {
			cause = fmt.Sprintf("rung %d (%.2f pF) far from its entered value (its pair reads another step), %s", x.rung, cfg.RungsPF[x.rung], cause)
			res.Rungs[x.rung].Status = RungDriftSuspect
		}
		c.fault("reference unit %s: the pair readings fit neither a healthy ladder nor a single stuck rung (worst: %s): %s", res.Serial, c.describeReading(rd[i]), cause)
		return true
	}
	return false
}

// stuck names the stuck rung the scores decided on, and every other that
// fits about as well.
func (c *checker) stuck(rd []reading, sc scores, best int) {
	res := c.res
	res.StuckFound = true
	for r := range res.Rungs {
		if res.Rungs[r].Status == RungOK {
			res.Rungs[r].Status = RungUnmeasured
		}
	}
	var alts []string
	for h := 1; h < len(sc.total); h++ {
		if sc.total[h] < sc.total[best]-math.Log(100) {
			continue
		}
		r, closed := c.hypRung(h)
		status, word := RungStuckOpen, "open"
		if closed {
			status, word = RungStuckClosed, "closed"
		}
		res.Rungs[r].Status = status
		alts = append(alts, fmt.Sprintf("rung %d (%.2f pF) stuck %s", r, c.cfg.RungsPF[r], word))
	}
	switch {
	case sc.poor[best] >= 0:
		c.fault("the pair readings fit no single stuck rung (nearest: %s; worst: %s): several ladder faults, or the reference unit is not the registered one", joinList(alts), c.describeReading(rd[sc.poor[best]]))
	case len(alts) == 1:
		c.fault("%s", alts[0])
	default:
		c.fault("%s (this reference unit cannot tell them apart)", joinList(alts))
	}
}

// deviation compares the reference's trip with its registered value,
// pooling further searches while the deviation is too close to call.
func (c *checker) deviation(first search) error {
	res, cfg := c.res, c.cfg
	T := res.TripPF
	trips := []search{first}
	if !first.Found || first.Below || math.IsNaN(first.TripPF) {
		c.fault("reference unit %s: no trip point found near the registered %.2f pF", res.Serial, T)
		return nil
	}
	var mean, se float64
	for {
		var sum, ss float64
		for _, t := range trips {
			sum += t.TripPF
			s := math.Max(2*t.SEPF, 0.02)
			ss += s * s
		}
		k := float64(len(trips))
		mean, se = sum/k, math.Sqrt(ss)/k
		d := math.Abs(mean - T)
		if len(trips) >= cfg.MaxSearches || d <= res.AllowedDevPF-3*se || d >= res.AllowedDevPF+3*se {
			break
		}
		t, err := c.tripNear(T)
		if err != nil {
			return err
		}
		res.Searches++
		if !t.Found || t.Below || math.IsNaN(t.TripPF) {
			break
		}
		trips = append(trips, t)
	}
	res.MeasuredPF, res.SEPF, res.DevPF = ptrF(mean), ptrF(se), ptrF(mean-T)
	res.RungWeights = c.weights(trips)
	if math.Abs(mean-T) > res.AllowedDevPF {
		c.fault("reference unit %s: trip %.2f pF, registered %.2f pF: deviation %+.2f pF beyond ±%.2f pF",
			res.Serial, mean, T, mean-T, res.AllowedDevPF)
		var heavy []int
		for r, w := range res.RungWeights {
			if w >= 0.5 {
				heavy = append(heavy, r)
			}
		}
		res.Suspects = "drift of " + describeRungs(cfg.RungsPF, heavy, true) + " (closed at the levels this trip rests on), or of the reference unit itself"
	}
	return nil
}

// pf is the entered capacitance of pattern p.
func (c *checker) pf(p uint16) float64 {
	pf := c.cfg.StrayPF
	for r, v := range c.cfg.RungsPF {
		if p&(1<<r) != 0 {
			pf += v
		}
	}
	return pf
}

// nearest is the pattern whose level is nearest T.
func (c *checker) nearest(T float64) uint16 {
	i := sort.Search(len(c.all), func(i int) bool { return c.all[i].PF >= T })
	switch {
	case i == len(c.all):
		return c.all[i-1].Pattern
	case i > 0 && T-c.all[i-1].PF < c.all[i].PF-T:
		return c.all[i-1].Pattern
	}
	return c.all[i].Pattern
}

// u is the standard uncertainty of level p's offset from the trip: the
// calibration errors of the rungs p does not share with the trip's level pt,
// and uT, the trip's own.
func (c *checker) u(p, pt uint16, uT float64) float64 {
	d := float64(bits.OnesCount16(p ^ pt))
	return math.Sqrt(c.cfg.CalPF*c.cfg.CalPF*d + uT*uT)
}

// straddle finds the pattern q without rung r whose pair (q, q + r) best
// straddles T: it maximises min(T − q, q + r − T), fewest rungs on ties.
func (c *checker) straddle(r int, T float64) uint16 {
	bit := uint16(1) << r
	best, bestM := uint16(0), math.Inf(-1)
	for _, lv := range c.all {
		if lv.Pattern&bit != 0 {
			continue
		}
		m := math.Min(T-lv.PF, lv.PF+c.cfg.RungsPF[r]-T)
		if m > bestM+1e-9 || (math.Abs(m-bestM) <= 1e-9 && bits.OnesCount16(lv.Pattern) < bits.OnesCount16(best)) {
			best, bestM = lv.Pattern, m
		}
	}
	return best
}

// levels.
type search struct {
	TripResult
	pats []uint16
	pfs  []float64
}

// weights returns, per rung, how much of a drift of that rung the measured
// trip takes up: the share of the Fisher information one sample would give
// on the search's levels with the rung closed, at the mean fitted trip and
// σ (at least 0.15 pF) of the pooled searches. The information of the
// levels the trip rests on dominates, so this follows the refinement's
// choice of levels without its randomness.
func (c *checker) weights(trips []search) []float64 {
	w := make([]float64, len(c.cfg.RungsPF))
	var mu, sig float64
	for _, t := range trips {
		mu += t.TripPF / float64(len(trips))
		sig += math.Max(t.SigmaPF, 0.15) / float64(len(trips))
	}
	if math.IsNaN(sig) {
		sig = 0.25
	}
	var tot float64
	t := trips[0]
	for i, pf := range t.pfs {
		z := (pf - mu) / sig
		dens := phi(z)
		f := dens * dens / math.Max(normCDF(z)*normCDF(-z), 1e-300)
		tot += f
		for r := range w {
			if t.pats[i]&(1<<r) != 0 {
				w[r] += f
			}
		}
	}
	if tot > 0 {
		for r := range w {
			w[r] /= tot
		}
	}
	return w
}

func describeRungs(rungsPF []float64, rungs []int, stray bool) string {
	var s []string
	for _, r := range rungs {
		s = append(s, fmt.Sprintf("rung %d (%.2f pF)", r, rungsPF[r]))
	}
	if stray {
		s = append(s, "the stray")
	}
	return joinList(s)
}

func joinList(s []string) string {
	switch len(s) {
	case 0:
		return ""
	case 1:
		return s[0]
	}
	return strings.Join(s[:len(s)-1], ", ") + " or " + s[len(s)-1]
}

func ptrF(f float64) *float64 { return &f }

// highs sets pattern p and returns the high count of k samples.
func (c *checker) highs(p uint16, k int) (int, error) {
	if err := c.ctx.Err(); err != nil {
		return 0, fmt.Errorf("reference check: %w", err)
	}
	if err := c.st.SetPattern(p); err != nil {
		return 0, fmt.Errorf("reference check: set pattern %#x: %w", p, err)
	}
	h, err := c.st.Sample(k, c.cfg.Period)
	if err != nil {
		return 0, fmt.Errorf("reference check: sample: %w", err)
	}
	return h, nil
}

// CheckWindowPF is how far either side of a reference unit's registered trip
// point the check searches; the trip must lie at least this far inside the
// ladder's range.
const CheckWindowPF = 2.5

// tripNear searches the reference trip on the strictly ascending levels
// within CheckWindowPF of T (on equal values, the first in c.all).
func (c *checker) tripNear(T float64) (search, error) {
	var lv []Level
	for _, l := range c.all {
		if math.Abs(l.PF-T) > CheckWindowPF {
			continue
		}
		if k := len(lv); k > 0 && l.PF <= lv[k-1].PF {
			continue
		}
		lv = append(lv, l)
	}
	pf := make([]float64, len(lv))
	pats := make([]uint16, len(lv))
	for i, l := range lv {
		pf[i], pats[i] = l.PF, l.Pattern
	}
	pr := ProberFunc(func(level, k int) (int, error) {
		if err := c.ctx.Err(); err != nil {
			return 0, err
		}
		if err := c.st.SetPattern(lv[level].Pattern); err != nil {
			return 0, fmt.Errorf("set pattern: %w", err)
		}
		return c.st.Sample(k, c.cfg.Period)
	})
	res, err := FindTrip(pr, pf, c.cfg.Search)
	if err != nil {
		return search{TripResult: res, pats: pats, pfs: pf}, fmt.Errorf("reference check: trip search: %w", err)
	}
	return search{TripResult: res, pats: pats, pfs: pf}, nil
}

// driftHyp is one explanation of the reference deviations: a drift of one
// rung, of the stray, or of one reference unit itself, with the weight
// each reference's trip gives it.
