package drift

import (
	"fmt"
	"math"
)

// Constants are the Shewhart chart factors for subgroups of size N.
// Go names cannot tell d2 from D2, so the range-chart factors that the
// literature writes D3 and D4 are called RangeLow and RangeHigh here.
type Constants struct {
	N         int
	A2        float64 // X̄ limits from R̄: X̿ ± A2·R̄
	A3        float64 // X̄ limits from s̄: X̿ ± A3·s̄
	C4        float64 // E[s] = c4·σ
	B3, B4    float64 // s-chart limits B3·s̄ … B4·s̄
	D2        float64 // lowercase d2: E[R] = d2·σ
	D3        float64 // lowercase d3: sd(R) = d3·σ
	RangeLow  float64 // uppercase D3: R-chart lower limit D3·R̄
	RangeHigh float64 // uppercase D4: R-chart upper limit D4·R̄
}

// MinSubgroup and MaxSubgroup bound the subgroup sizes the table covers.
const (
	MinSubgroup = 2
	MaxSubgroup = 10
)

// table holds the published three- and four-figure values (ASTM E2587;
// Montgomery, Introduction to Statistical Quality Control, Appendix VI).
var table = [...]Constants{
	{2, 1.880, 2.659, 0.7979, 0, 3.267, 1.128, 0.853, 0, 3.267},
	{3, 1.023, 1.954, 0.8862, 0, 2.568, 1.693, 0.888, 0, 2.574},
	{4, 0.729, 1.628, 0.9213, 0, 2.266, 2.059, 0.880, 0, 2.282},
	{5, 0.577, 1.427, 0.9400, 0, 2.089, 2.326, 0.864, 0, 2.114},
	{6, 0.483, 1.287, 0.9515, 0.030, 1.970, 2.534, 0.848, 0, 2.004},
	{7, 0.419, 1.182, 0.9594, 0.118, 1.882, 2.704, 0.833, 0.076, 1.924},
	{8, 0.373, 1.099, 0.9650, 0.185, 1.815, 2.847, 0.820, 0.136, 1.864},
	{9, 0.337, 1.032, 0.9693, 0.239, 1.761, 2.970, 0.808, 0.184, 1.816},
	{10, 0.308, 0.975, 0.9727, 0.284, 1.716, 3.078, 0.797, 0.223, 1.777},
}

// Table returns the constants for n = MinSubgroup … MaxSubgroup in order.
func Table() []Constants {
	out := make([]Constants, len(table))
	copy(out, table[:])
	return out
}

// ConstantsFor returns the table row for subgroup size n.
func ConstantsFor(n int) (Constants, error) {
	if n < MinSubgroup || n > MaxSubgroup {
		return Constants{}, fmt.Errorf("constants for n = %d: %w", n, ErrSubgroupSize)
	}
	return table[n-MinSubgroup], nil
}

// C4 computes c4(n) = √(2/(n−1))·Γ(n/2)/Γ((n−1)/2) for any n ≥ 2, the
// bias of the sample standard deviation of n normal observations.
func C4(n int) float64 {
	if n < 2 {
		return math.NaN()
	}
	a, _ := math.Lgamma(float64(n) / 2)
	b, _ := math.Lgamma(float64(n-1) / 2)
	return math.Sqrt(2/float64(n-1)) * math.Exp(a-b)
}
