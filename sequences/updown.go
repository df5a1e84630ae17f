package sequences

import (
	"errors"
	"fmt"
	"math"
)

// ErrUpDown is returned by DixonMood for a sequence it cannot analyse.
var ErrUpDown = errors.New("sequences: unusable up-and-down sequence")

// UpDownEstimate is the Dixon–Mood estimate of a transition from an
// up-and-down sequence (W. J. Dixon & A. M. Mood, "A Method for Obtaining
// and Analyzing Sensitivity Data", JASA 43(241):109–126, 1948).
type UpDownEstimate struct {
	MeanPF  float64 // the 50 % point
	SigmaPF float64 // the transition's σ
	// N, A, B are the sums over the counted outcome: Σnᵢ, Σi·nᵢ, Σi²·nᵢ.
	N, A, B int
	// CountedHighs is true when the high readings were the less frequent
	// outcome and so were counted.
	CountedHighs bool
	// Valid is false when (N·B − A²)/N² ≤ 0.3, where the σ formula does not
	// hold.
	Valid bool
}

// DixonMood analyses an up-and-down sequence: the level of each trial (pF,
// on a grid of stepPF) and whether the latch read high. It counts the less
// frequent outcome (the low readings on a tie), codes levels i = 0, 1, …
// from the lowest level where that outcome occurs, and returns
// m = y0 + d·(A/N ± ½) (+ when counting lows) and
// s = 1.620·d·((N·B − A²)/N² + 0.029).
func DixonMood(levelsPF []float64, highs []bool, stepPF float64) (UpDownEstimate, error) {
	if len(levelsPF) != len(highs) || len(levelsPF) == 0 || !(stepPF > 0) {
		return UpDownEstimate{}, fmt.Errorf("%d levels, %d readings, step %g: %w", len(levelsPF), len(highs), stepPF, ErrUpDown)
	}
	var nh int
	for _, h := range highs {
		if h {
			nh++
		}
	}
	est := UpDownEstimate{CountedHighs: 2*nh < len(highs)}
	y0 := math.Inf(1)
	for i, x := range levelsPF {
		if highs[i] == est.CountedHighs {
			y0 = math.Min(y0, x)
		}
	}
	if math.IsInf(y0, 1) {
		return UpDownEstimate{}, fmt.Errorf("no reading of the counted outcome: %w", ErrUpDown)
	}
	for i, x := range levelsPF {
		if highs[i] != est.CountedHighs {
			continue
		}
		c := (x - y0) / stepPF
		code := int(math.Round(c))
		if math.Abs(c-float64(code)) > 1e-6 {
			return UpDownEstimate{}, fmt.Errorf("level %g pF off the %g pF grid from %g pF: %w", x, stepPF, y0, ErrUpDown)
		}
		est.N++
		est.A += code
		est.B += code * code
	}
	n, a, b := float64(est.N), float64(est.A), float64(est.B)
	half := 0.5
	if est.CountedHighs {
		half = -0.5
	}
	est.MeanPF = y0 + stepPF*(a/n+half)
	v := (n*b - a*a) / (n * n)
	est.SigmaPF = 1.620 * stepPF * (v + 0.029)
	est.Valid = v > 0.3
	return est, nil
}
