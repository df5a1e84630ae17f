package sequences_test

import (
	"errors"
	"fmt"
	"math"
	"testing"

	"padline/sequences"
)

// Checks against the Dixon–Mood formulas (W. J. Dixon & A. M. Mood, JASA
// 43(241):109–126, 1948, as quoted in DEVELOPERS.md "References"):
// m = y0 + d·(A/N ± ½), s = 1.620·d·((N·B − A²)/N² + 0.029), valid for
// (N·B − A²)/N² > 0.3. The expected values are worked by hand below.
func TestDixonMood(t *testing.T) {
	H, L := true, false
	tests := []struct {
		name   string
		levels []float64
		highs  []bool
		d      float64
		want   sequences.UpDownEstimate
	}{
		{
			// 8 highs, 7 lows: count the lows; y0 = 10.0; n0 = 4, n1 = 3;
			// N = 7, A = 3, B = 3; m = 10 + 0.5·(3/7 + ½) = 10.464286;
			// (N·B − A²)/N² = 12/49 = 0.244898 < 0.3 (not valid);
			// s = 0.81·0.273898 = 0.221857.
			"lows counted, narrow",
			[]float64{11, 10.5, 10, 10.5, 11, 10.5, 10, 10.5, 10, 10.5, 11, 10.5, 11, 10.5, 10},
			[]bool{H, H, L, L, H, H, L, H, L, L, H, L, H, H, L},
			0.5,
			sequences.UpDownEstimate{MeanPF: 10.464286, SigmaPF: 0.221857, N: 7, A: 3, B: 3, Valid: false},
		},
		{
			// 4 highs, 6 lows: count the highs; highs at 2, 3, 3, 4 → y0 = 2,
			// codes 0, 1, 1, 2: N = 4, A = 4, B = 6; m = 2 + 1·(1 − ½) = 2.5;
			// (24 − 16)/16 = 0.5 > 0.3 (valid); s = 1.62·(0.5 + 0.029) = 0.85698.
			"highs counted, wide",
			[]float64{1, 2, 3, 2, 3, 4, 3, 2, 1, 0},
			[]bool{L, L, H, L, L, H, H, H, L, L},
			1,
			sequences.UpDownEstimate{MeanPF: 2.5, SigmaPF: 0.85698, N: 4, A: 4, B: 6, CountedHighs: true, Valid: true},
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := sequences.DixonMood(tt.levels, tt.highs, tt.d)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(got.MeanPF-tt.want.MeanPF) > 1e-6 || math.Abs(got.SigmaPF-tt.want.SigmaPF) > 1e-6 ||
				got.N != tt.want.N || got.A != tt.want.A || got.B != tt.want.B ||
				got.CountedHighs != tt.want.CountedHighs || got.Valid != tt.want.Valid {
				t.Errorf("got %+v, want %+v", got, tt.want)
			}
		})
	}
}

func TestDixonMoodErrors(t *testing.T) {
	tests := []struct {
		name   string
		levels []float64
		highs  []bool
		d      float64
	}{
		{"empty", nil, nil, 0.5},
		{"length mismatch", []float64{1, 2}, []bool{true}, 0.5},
		{"zero step", []float64{1, 2}, []bool{true, false}, 0},
		{"off grid", []float64{1, 1.3, 2, 2.5}, []bool{false, false, true, true}, 0.5},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if _, err := sequences.DixonMood(tt.levels, tt.highs, tt.d); !errors.Is(err, sequences.ErrUpDown) {
				t.Errorf("err %v, want ErrUpDown", err)
			}
		})
	}
}

// Five lows (15.5, 16, 16, 16, 16.5) and five highs: a tie, so the lows are
// counted: y0 = 15.5, N = 5, A = 5, B = 7; m = 15.5 + 0.5·(1 + ½) = 16.25;
// (35 − 25)/25 = 0.4; s = 1.62·0.5·0.429 = 0.347.
func ExampleDixonMood() {
	est, _ := sequences.DixonMood(
		[]float64{16, 16.5, 16, 15.5, 16, 16.5, 16, 16.5, 17, 16.5},
		[]bool{false, true, true, false, false, true, false, false, true, true}, 0.5)
	fmt.Printf("trip %.3f pF, σ %.3f pF, valid %v\n", est.MeanPF, est.SigmaPF, est.Valid)
	// Output: trip 16.250 pF, σ 0.347 pF, valid true
}
