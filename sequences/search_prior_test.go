package sequences_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"padline/sequences"
)

// The demo variant's predicted trip distribution, as 'padline limits
// --variant QM-205' prints it (timing model Monte Carlo, 20,000 draws,
// seed 1): mean 29.90 pF, SD 4.17 pF. search_bench_test.go reads it from
// the model; here it is fixed so the tests do not depend on the model.
const priorPF, priorSDPF = 29.90, 4.17

// gapEntropy is the entropy in bits of the trip point's position among the
// gaps between adjacent levels (and below the bottom, above the top) under
// N(mean, sd²), computed independently of the search by the normal CDF
// (math.Erfc).
func gapEntropy(levels []float64, mean, sd float64) float64 {
	cdf := func(x float64) float64 { return 0.5 * math.Erfc(-(x-mean)/(sd*math.Sqrt2)) }
	var h, prev float64
	for i := 0; i <= len(levels); i++ {
		c := 1.0
		if i < len(levels) {
			c = cdf(levels[i])
		}
		if p := c - prev; p > 0 {
			h -= p * math.Log2(p)
		}
		prev = c
	}
	return h
}

// TestFindTripPriorBracket: with the variant's predicted trip distribution
// as its prior, the bracket of a unit drawn from that distribution takes
// at most H + 2 single-sample probes on average (Mehlhorn's bound for
// bisection on the prior's weights, K. Mehlhorn, Acta Informatica 5, 1975),
// H the prior's entropy over the level gaps — about 5 probes where the
// bisection of 256 levels takes 8 — and the first probe is at the
// predicted trip point.
func TestFindTripPriorBracket(t *testing.T) {
	levels := synthLevels()
	h := gapEntropy(levels, priorPF, priorSDPF)
	rng := rand.New(rand.NewPCG(11, 11))
	const n = 400
	var probes, plain int
	for range n {
		mu := priorPF + priorSDPF*rng.NormFloat64()
		for _, prior := range []bool{true, false} {
			opt := sequences.SearchOptions{SpreadPriorPF: 0.64, SpreadPriorLogSD: 0.25}
			if prior {
				opt.TripPriorPF, opt.TripPriorSDPF = priorPF, priorSDPF
			}
			p := &synthProber{rng: rng, pf: levels, mu: mu, sigma: 0.25}
			res, err := sequences.FindTrip(p, levels, opt)
			if err != nil {
				t.Fatal(err)
			}
			checkBookkeeping(t, res, levels, p.calls)
			if math.Abs(res.TripPF-mu) > 0.5 {
				t.Errorf("μ %.2f pF: trip %.2f pF (prior %v)", mu, res.TripPF, prior)
			}
			if !prior {
				plain += res.BracketProbes
				continue
			}
			probes += res.BracketProbes
			if first := res.Probes[0]; math.Abs(first.PF-priorPF) > 0.25 {
				t.Fatalf("first probe at %.2f pF, want the predicted %.2f pF", first.PF, priorPF)
			}
		}
	}
	mean := float64(probes) / n
	t.Logf("bracket probes per unit: %.2f with the prior (entropy %.2f bits), %.2f without", mean, h, float64(plain)/n)
	if mean > h+2 || float64(plain)/n < 7.9 {
		t.Errorf("%.2f probes with the prior, bound %.2f; %.2f without, want 8", mean, h+2, float64(plain)/n)
	}
}

// TestFindTripPriorFarUnits: a unit whose trip lies far from the prediction
// (a defect) is found as without the prior — at the same trip point, below
// the range, or not at all — with a bounded number of extra probes.
func TestFindTripPriorFarUnits(t *testing.T) {
	levels := synthLevels()
	top := levels[len(levels)-1]
	for _, tt := range []struct {
		name         string
		mu           float64
		found, below bool
	}{
		{"just above the bottom", 5.3, true, false},
		{"low", 12, true, false},
		{"high", 60, true, false},
		{"far high", 100, true, false},
		{"near the top", top - 0.7, true, false},
		{"below the range", 2, true, true},
		{"never trips", top + 5, false, false},
	} {
		t.Run(tt.name, func(t *testing.T) {
			for seed := range uint64(20) {
				for _, prior := range []bool{true, false} {
					opt := sequences.SearchOptions{}
					if prior {
						opt.TripPriorPF, opt.TripPriorSDPF = priorPF, priorSDPF
					}
					p := &synthProber{rng: rand.New(rand.NewPCG(seed, 7)), pf: levels, mu: tt.mu, sigma: 0.25}
					res, err := sequences.FindTrip(p, levels, opt)
					if err != nil {
						t.Fatal(err)
					}
					checkBookkeeping(t, res, levels, p.calls)
					if res.Found != tt.found || res.Below != tt.below {
						t.Fatalf("seed %d prior %v: found %v below %v, want %v %v", seed, prior, res.Found, res.Below, tt.found, tt.below)
					}
					if tt.found && !tt.below && (math.Abs(res.TripPF-tt.mu) > 0.5 || res.Noisy) {
						t.Errorf("seed %d prior %v: trip %.2f pF noisy %v, true %.2f", seed, prior, res.TripPF, res.Noisy, tt.mu)
					}
					// Plain bisection: 8 probes and the end checks; the
					// prior's tail costs at most 8 more.
					if prior && res.BracketProbes > 18 {
						t.Errorf("seed %d: %d bracket probes", seed, res.BracketProbes)
					}
				}
			}
		})
	}
}

// TestFindTripNoisyDetection: noisy units searched as on the station (σ
// prior from recent units, ln-SD 0.25) — 500 coin-flip units, and 500
// intermittent units whose pad connection opens on 10–40 % of the edges,
// so that above the trip they read high only with probability 1 − f (the
// simulator's intermittent defect) — are flagged at least as often by the
// default search with the trip prior as by the search before it (no trip
// prior, guard peek 2+2), within 2 % of the units, with their trips drawn
// uniform on 20–100 pF and from the variant's predicted distribution.
func TestFindTripNoisyDetection(t *testing.T) {
	if testing.Short() {
		t.Skip("8,000 searches")
	}
	for _, draw := range []string{"uniform 20–100 pF", "predicted"} {
		for _, kind := range []string{"coin flip", "intermittent"} {
			var flagged [2]int
			for i, now := range []bool{false, true} {
				rng := rand.New(rand.NewPCG(5, 5))
				for range 500 {
					lad := newSynthLadder(rng, 0.05)
					mu := 20 + 80*rng.Float64()
					if draw == "predicted" {
						mu = priorPF + priorSDPF*rng.NormFloat64()
					}
					p := &synthProber{rng: rng, pf: lad.True, mu: mu, sigma: 0.25}
					if kind == "coin flip" {
						p.respond = func(int) float64 { return 0.5 }
					} else {
						f, pf := 0.1+0.3*rng.Float64(), lad.True
						p.respond = func(l int) float64 { return (1 - f) * 0.5 * math.Erfc(-(pf[l]-mu)/(0.25*math.Sqrt2)) }
					}
					opt := sequences.SearchOptions{SpreadPriorPF: 2 * 1.2815515655446004 * 0.25, SpreadPriorLogSD: 0.25}
					if now {
						opt.TripPriorPF, opt.TripPriorSDPF = priorPF, priorSDPF
					} else {
						opt.GuardPeekK, opt.GuardPeekUpK = 2, 2
					}
					res, err := sequences.FindTrip(p, lad.Entered, opt)
					if err != nil {
						t.Fatal(err)
					}
					if res.Noisy || !res.Found {
						flagged[i]++
					}
				}
			}
			t.Logf("%s, trips %s: %d of 500 flagged before (no trip prior, peek 2+2), %d now (trip prior, peek 1+4)", kind, draw, flagged[0], flagged[1])
			if flagged[1] < flagged[0]-10 {
				t.Errorf("%s, trips %s: %d flagged now, %d before", kind, draw, flagged[1], flagged[0])
			}
		}
	}
}
