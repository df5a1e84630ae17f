package sequences

import (
	"fmt"
	"math"
	"slices"
)

type driftHyp struct {
	name  string
	rung  int // −1: not a rung
	a     []float64
	delta float64
	chi2  float64
	self  bool // a reference unit's own drift
}

// CombineChecks merges the checks of a station's reference units into one
// ladder verdict and one fault list. A rung's status is the worst any
// reference found. When a reference deviates beyond its allowance and no
// reference found a stuck rung, the deviations of all references are
// explained jointly by least squares: each reference i measured d_i =
// a_i·δ + noise (noise σ = a third of its allowance, or its standard error
// if larger), with a_i its RungWeights for a drift of one rung, 1 for every
// reference for a drift of the stray, and 1 for one reference and 0 for the
// others for a drift of that reference unit itself. Every explanation
// within χ² 4 of the best (and with χ² ≤ 16) is named: one rung alone is
// "drifted"; several are "drift_suspect" (these reference units cannot
// tell them apart). The drift is stated as true − entered for a rung or
// the stray, and as the trip's move for a reference unit.
func CombineChecks(refs []RefCheck) ([]RungFinding, []string) {
	rungs, stuck, deviates := mergeRungs(refs)
	var faults []string
	for _, rc := range refs {
		for _, f := range rc.Faults {
			if !slices.Contains(faults, f) {
				faults = append(faults, f)
			}
		}
	}
	if stuck {
		return combineStuck(refs, rungs, faults)
	}
	if !deviates {
		return rungs, faults
	}
	hyps := driftHyps(refs, rungs)
	return rungs, append(faults, nameDrift(hyps, rungs))
}

// rungRank orders rung statuses from least to most severe.
var rungRank = map[string]int{RungUnmeasured: 0, RungOK: 1, RungDriftSuspect: 2, RungDrifted: 3, RungStuckClosed: 4, RungStuckOpen: 4}

// mergeRungs gives each rung the worst status any reference found, with
// every reference's test line; stuck and deviates say whether any
// reference found a stuck rung or deviates beyond its allowance.
func mergeRungs(refs []RefCheck) (rungs []RungFinding, stuck, deviates bool) {
	for _, rc := range refs {
		stuck = stuck || rc.StuckFound
		if rc.DevPF != nil && math.Abs(*rc.DevPF) > rc.AllowedDevPF {
			deviates = true
		}
		for _, f := range rc.Rungs {
			for len(rungs) <= f.Rung {
				rungs = append(rungs, RungFinding{Rung: len(rungs), Status: RungUnmeasured})
			}
			g := &rungs[f.Rung]
			g.EnteredPF = f.EnteredPF
			if f.Test != "" {
				if g.Test != "" {
					g.Test += "; "
				}
				g.Test += rc.Serial + ": " + f.Test
			}
			if rungRank[f.Status] > rungRank[g.Status] {
				g.Status = f.Status
			}
		}
	}
	return rungs, stuck, deviates
}

// driftHyps fits every single-cause explanation (one rung, the stray, one
// reference unit) to the deviations of the references with a measured
// trip, by weighted least squares, and returns them with their χ².
func driftHyps(refs []RefCheck, rungs []RungFinding) []driftHyp {
	var d, s []float64
	var serials []string
	var w [][]float64
	for _, rc := range refs {
		if rc.DevPF == nil || len(rc.RungWeights) == 0 {
			continue
		}
		d = append(d, *rc.DevPF)
		sd := rc.AllowedDevPF / 3
		if rc.SEPF != nil {
			sd = math.Max(sd, *rc.SEPF)
		}
		s = append(s, sd)
		serials = append(serials, rc.Serial)
		w = append(w, rc.RungWeights)
	}
	var hyps []driftHyp
	for r := range rungs {
		a := make([]float64, len(d))
		for i := range d {
			if r < len(w[i]) {
				a[i] = w[i][r]
			}
		}
		hyps = append(hyps, driftHyp{name: fmt.Sprintf("rung %d (%.2f pF)", r, rungs[r].EnteredPF), rung: r, a: a})
	}
	ones := make([]float64, len(d))
	for i := range ones {
		ones[i] = 1
	}
	hyps = append(hyps, driftHyp{name: "the stray", rung: -1, a: ones})
	for j := range d {
		a := make([]float64, len(d))
		a[j] = 1
		hyps = append(hyps, driftHyp{name: "reference unit " + serials[j] + " itself", rung: -1, a: a, self: true})
	}
	for k := range hyps {
		h := &hyps[k]
		var sad, saa float64
		for i := range d {
			sad += h.a[i] * d[i] / (s[i] * s[i])
			saa += h.a[i] * h.a[i] / (s[i] * s[i])
		}
		if saa < 1e-3 {
			h.chi2 = math.Inf(1) // this reference set does not see it
			continue
		}
		h.delta = sad / saa
		for i := range d {
			r := (d[i] - h.a[i]*h.delta) / s[i]
			h.chi2 += r * r
		}
	}
	return hyps
}

// nameDrift names every explanation within χ² 4 of the best (and χ² ≤ 16)
// in one fault line, and marks the rungs it names.
func nameDrift(hyps []driftHyp, rungs []RungFinding) string {
	best := math.Inf(1)
	for _, h := range hyps {
		best = math.Min(best, h.chi2)
	}
	var names []string
	var fit []int
	var by float64
	for _, h := range hyps {
		if h.chi2 <= best+4 && h.chi2 <= 16 {
			// A rung (or the stray) larger than entered makes every trip
			// read low on the entered values: its drift is −δ.
			by = -h.delta
			if h.self {
				by = h.delta
			}
			names = append(names, fmt.Sprintf("%s by %+.2f pF", h.name, by))
			if h.rung >= 0 {
				fit = append(fit, h.rung)
			}
		}
	}
	switch {
	case len(names) == 0:
		return "the reference deviations fit no single drift (of one rung, the stray or one reference unit): several causes"
	case len(names) == 1 && len(fit) == 1:
		r := fit[0]
		rungs[r].Status = RungDrifted
		return fmt.Sprintf("rung %d (%.2f pF) drifted by %+.2f pF (the reference deviations, taken together, point at it alone)", r, rungs[r].EnteredPF, by)
	case len(names) == 1:
		return fmt.Sprintf("drift of %s (the reference deviations, taken together, point at it alone)", names[0])
	}
	for _, r := range fit {
		if rungRank[RungDriftSuspect] > rungRank[rungs[r].Status] {
			rungs[r].Status = RungDriftSuspect
		}
	}
	return fmt.Sprintf("drift of %s (these reference units cannot tell them apart)", joinList(names))
}

// combineStuck narrows the stuck rungs the references named to those every
// reference that found one allows and none found working, and says so in
// one more fault line.
//
// Length: the narrowing is one set computation (named, allowed, seen
// working) followed by the line that states it; kept whole so the set
// logic reads in one place.
func combineStuck(refs []RefCheck, rungs []RungFinding, faults []string) ([]RungFinding, []string) {
	type stuck struct {
		rung   int
		status string
	}
	var inter []stuck
	first := true
	ok := map[int]bool{}
	for _, rc := range refs {
		for _, f := range rc.Rungs {
			if f.Status == RungOK {
				ok[f.Rung] = true
			}
		}
		if !rc.StuckFound {
			continue
		}
		var named []stuck
		for _, f := range rc.Rungs {
			if f.Status == RungStuckOpen || f.Status == RungStuckClosed {
				named = append(named, stuck{f.Rung, f.Status})
			}
		}
		if first {
			inter, first = named, false
			continue
		}
		inter = slices.DeleteFunc(inter, func(s stuck) bool { return !slices.Contains(named, s) })
	}
	inter = slices.DeleteFunc(inter, func(s stuck) bool { return ok[s.rung] })
	if len(inter) == 0 {
		// The references may agree on the rung but not on open or closed
		// (a small rung's fault moves the trip onto the side where the two
		// read alike).
		var common []int
		first := true
		for _, rc := range refs {
			if !rc.StuckFound {
				continue
			}
			var named []int
			for _, f := range rc.Rungs {
				if f.Status == RungStuckOpen || f.Status == RungStuckClosed {
					named = append(named, f.Rung)
				}
			}
			if first {
				common, first = named, false
				continue
			}
			common = slices.DeleteFunc(common, func(r int) bool { return !slices.Contains(named, r) })
		}
		common = slices.DeleteFunc(common, func(r int) bool { return ok[r] })
		if len(common) == 1 {
			r := common[0]
			faults = append(faults, fmt.Sprintf("ladder: rung %d (%.2f pF) stuck, open or closed (the one rung every reference unit's readings allow; they differ on which way)", r, rungs[r].EnteredPF))
		}
		return rungs, faults
	}
	var names []string
	for i := range rungs {
		if g := &rungs[i]; g.Status == RungStuckOpen || g.Status == RungStuckClosed {
			g.Status = RungUnmeasured
			if ok[i] {
				g.Status = RungOK
			}
		}
	}
	for _, s := range inter {
		rungs[s.rung].Status = s.status
		word := "open"
		if s.status == RungStuckClosed {
			word = "closed"
		}
		names = append(names, fmt.Sprintf("rung %d (%.2f pF) stuck %s", s.rung, rungs[s.rung].EnteredPF, word))
	}
	line := "ladder: " + names[0] + " (the one stuck rung every reference unit's readings allow)"
	if len(names) > 1 {
		line = "ladder: " + joinList(names) + " (these reference units cannot tell them apart)"
	}
	return rungs, append(faults, line)
}
