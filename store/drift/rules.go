package drift

import "math"

// Rule is the short id of a signal: a run rule on a Shewhart chart or the
// limit crossing of an EWMA or CUSUM chart.
type Rule string

// Western Electric rules (Statistical Quality Control Handbook, 1956), each
// applied to one side of the centre line at a time.
const (
	WE1 Rule = "we1" // 1 point beyond 3σ
	WE2 Rule = "we2" // 2 of 3 beyond 2σ, same side
	WE3 Rule = "we3" // 4 of 5 beyond 1σ, same side
	WE4 Rule = "we4" // 8 in a row on one side
)

// Nelson rules (L. S. Nelson, J. Quality Technology 16(4), 1984).
const (
	Nelson1 Rule = "nelson1" // 1 point beyond 3σ
	Nelson2 Rule = "nelson2" // 9 in a row on one side
	Nelson3 Rule = "nelson3" // 6 in a row steadily rising or falling
	Nelson4 Rule = "nelson4" // 14 in a row alternating up and down
	Nelson5 Rule = "nelson5" // 2 of 3 beyond 2σ, same side
	Nelson6 Rule = "nelson6" // 4 of 5 beyond 1σ, same side
	Nelson7 Rule = "nelson7" // 15 in a row within 1σ
	Nelson8 Rule = "nelson8" // 8 in a row beyond 1σ, either side
)

// Limit-crossing signals of the small-shift charts.
const (
	EWMASignal Rule = "ewma"   // EWMA statistic outside its limits
	CUSUMUp    Rule = "cusum+" // upper CUSUM sum above H
	CUSUMDown  Rule = "cusum-" // lower CUSUM sum above H
	// Limit is a point of a dispersion chart (MR, R, s) outside its limits;
	// run rules are not applied to those skewed statistics.
	Limit Rule = "limit"
)

// Rule sets for Options.Rules.
var (
	// WesternElectric is all four Western Electric rules.
	WesternElectric = []Rule{WE1, WE2, WE3, WE4}
	// NelsonRules is all eight Nelson rules.
	NelsonRules = []Rule{Nelson1, Nelson2, Nelson3, Nelson4, Nelson5, Nelson6, Nelson7, Nelson8}
	// LimitsOnly is the plain Shewhart test: one point beyond the limits.
	LimitsOnly = []Rule{WE1}
)

var descriptions = map[Rule]string{
	WE1:        "1 point beyond 3σ",
	WE2:        "2 of 3 points beyond 2σ on one side",
	WE3:        "4 of 5 points beyond 1σ on one side",
	WE4:        "8 points in a row on one side of the centre line",
	Nelson1:    "1 point beyond 3σ",
	Nelson2:    "9 points in a row on one side of the centre line",
	Nelson3:    "6 points in a row steadily rising or falling",
	Nelson4:    "14 points in a row alternating up and down",
	Nelson5:    "2 of 3 points beyond 2σ on one side",
	Nelson6:    "4 of 5 points beyond 1σ on one side",
	Nelson7:    "15 points in a row within 1σ",
	Nelson8:    "8 points in a row beyond 1σ, either side",
	EWMASignal: "EWMA outside its limits",
	CUSUMUp:    "upper CUSUM above H",
	CUSUMDown:  "lower CUSUM above H",
	Limit:      "point outside the limits",
}

// Description is the rule in words ("2 of 3 points beyond 2σ on one side");
// the σ figures scale with Options.Width when that is not 3.
func (r Rule) Description() string {
	if d, ok := descriptions[r]; ok {
		return d
	}
	return string(r)
}

// Alarm is one signal. Index is the chart point at which the pattern
// completed (0-based); Unit is the series index of the last observation in
// that point (equal to Index for individuals, EWMA and CUSUM). Points are
// the chart points that make up the pattern, ascending.
type Alarm struct {
	Seq    int    // 1-based number shared by the text output and the rendered chart
	Chart  Kind   // chart that raised it
	Rule   Rule   // which test
	Index  int    // chart point completing the pattern
	Unit   int    // series index of the last observation in that point
	Points []int  // chart points in the pattern
	Side   int    // +1 above the centre, −1 below, 0 for rules without a side
	Onset  int    // CUSUM: first point after the estimated change; −1 otherwise
	Note   string // extra detail, e.g. the CUSUM shift estimate
}

// Description is Rule.Description.
func (a Alarm) Description() string { return a.Rule.Description() }

// firing is one rule completing at the current point.
type firing struct {
	rule   Rule
	side   int
	points []int
}

// ruleEngine applies run rules one point at a time to standardised values
// z = (stat − centre)/σstat. After a rule fires, the points up to and
// including the firing point no longer count towards that rule, so a
// persistent pattern fires again only once it has re-formed from new points.
type ruleEngine struct {
	rules []Rule
	a     float64   // limit width in σ; zones are a/3 and 2a/3
	z     []float64 // recent values; z[0] is point off
	off   int
	start []int // per rule: first point that may count towards it
}

func newRuleEngine(rules []Rule, width float64) *ruleEngine {
	return &ruleEngine{rules: rules, a: width, start: make([]int, len(rules))}
}

func (e *ruleEngine) add(z float64) []firing {
	// No rule looks back more than 15 points: keep a short tail so a
	// long-running monitor stays small.
	if len(e.z) >= 256 {
		n := copy(e.z, e.z[len(e.z)-32:])
		e.off += len(e.z) - n
		e.z = e.z[:n]
	}
	e.z = append(e.z, z)
	i := len(e.z) - 1
	var out []firing
	for r, rule := range e.rules {
		if f, ok := e.check(rule, i, e.start[r]-e.off); ok {
			f.rule = rule
			for j := range f.points {
				f.points[j] += e.off
			}
			out = append(out, f)
			e.start[r] = i + 1 + e.off
		}
	}
	return out
}

func sign(z float64) int {
	switch {
	case z > 0:
		return 1
	case z < 0:
		return -1
	}
	return 0
}

func span(lo, hi int) []int {
	p := make([]int, 0, hi-lo+1)
	for j := lo; j <= hi; j++ {
		p = append(p, j)
	}
	return p
}

func (e *ruleEngine) check(rule Rule, i, lo int) (firing, bool) {
	z := e.z
	switch rule {
	case WE1, Nelson1:
		if math.Abs(z[i]) > e.a {
			return firing{side: sign(z[i]), points: []int{i}}, true
		}
	case WE2, Nelson5:
		return e.kOfM(i, lo, 2, 3, 2*e.a/3)
	case WE3, Nelson6:
		return e.kOfM(i, lo, 4, 5, e.a/3)
	case WE4, Nelson2:
		k := 8
		if rule == Nelson2 {
			k = 9
		}
		s := sign(z[i])
		if i-k+1 < lo || s == 0 {
			return firing{}, false
		}
		for j := i - k + 1; j <= i; j++ {
			if sign(z[j]) != s {
				return firing{}, false
			}
		}
		return firing{side: s, points: span(i-k+1, i)}, true
	case Nelson3:
		const k = 6
		if i-k+1 < lo {
			return firing{}, false
		}
		s := sign(z[i] - z[i-1])
		if s == 0 {
			return firing{}, false
		}
		for j := i - k + 2; j <= i; j++ {
			if sign(z[j]-z[j-1]) != s {
				return firing{}, false
			}
		}
		return firing{side: s, points: span(i-k+1, i)}, true
	case Nelson4:
		const k = 14
		if i-k+1 < lo {
			return firing{}, false
		}
		for j := i - k + 2; j <= i; j++ {
			d := sign(z[j] - z[j-1])
			if d == 0 || (j > i-k+2 && d == sign(z[j-1]-z[j-2])) {
				return firing{}, false
			}
		}
		return firing{points: span(i-k+1, i)}, true
	case Nelson7, Nelson8:
		k, inside := 15, true
		if rule == Nelson8 {
			k, inside = 8, false
		}
		if i-k+1 < lo {
			return firing{}, false
		}
		for j := i - k + 1; j <= i; j++ {
			if (math.Abs(z[j]) < e.a/3) != inside || math.Abs(z[j]) == e.a/3 {
				return firing{}, false
			}
		}
		return firing{points: span(i-k+1, i)}, true
	}
	return firing{}, false
}

// kOfM: at least k of the last m points beyond level on the side of point
// i, point i among them (otherwise the pattern completed earlier).
func (e *ruleEngine) kOfM(i, lo, k, m int, level float64) (firing, bool) {
	z := e.z
	s := sign(z[i])
	if s == 0 || float64(s)*z[i] <= level {
		return firing{}, false
	}
	// Count first: the points are listed (allocated) only when it fires.
	from, beyond := max(lo, i-m+1), 0
	for j := from; j <= i; j++ {
		if float64(s)*z[j] > level {
			beyond++
		}
	}
	if beyond < k {
		return firing{}, false
	}
	pts := make([]int, 0, beyond)
	for j := from; j <= i; j++ {
		if float64(s)*z[j] > level {
			pts = append(pts, j)
		}
	}
	return firing{side: s, points: pts}, true
}
