package timing_test

import (
	"fmt"

	"padline/sequences/timing"
)

func ExampleOscillator() {
	// 22 kΩ and 100 nF with thresholds at 62 % and 38 % of V_DD.
	p := timing.Point{SupplyV: 5, OscROhm: 22e3, OscCF: 100e-9, VtPosFrac: 0.62, VtNegFrac: 0.38}
	tH, tL, hz := timing.Oscillator(p)
	fmt.Printf("t_H %.3f ms, t_L %.3f ms, %.1f Hz\n", tH*1e3, tL*1e3, hz)
	// Output: t_H 1.077 ms, t_L 1.077 ms, 464.2 Hz
}

func ExampleTol() {
	v := timing.Tol(100e3, 1)
	fmt.Println(v.Min, v.Typ, v.Max, v.Dist)
	// Output: 99000 100000 101000 normal
}
