package timing_test

import (
	"errors"
	"math"
	"strings"
	"testing"

	"padline/sequences/timing"
)

// fast9V is a fast 9 V circuit with a low sense resistor, a gate output
// resistance a tenth of it and a race of about two edge times (the
// spicecheck package's QM-909F at its typical values).
func fast9V() timing.Circuit {
	return timing.Circuit{
		SupplyV: timing.Tol(9, 5), OscROhm: timing.Tol(10e3, 1), OscCF: timing.Tol(10e-9, 5),
		VtPosFrac: timing.Range(0.55, 0.62, 0.70), VtNegFrac: timing.Range(0.30, 0.38, 0.45),
		SenseROhm: timing.Tol(2700, 1), PadPF: timing.Tol(10, 15), InputPF: timing.Range(3, 5, 7.5),
		DelayNS: timing.Range(120, 150, 190), SetupNS: timing.Range(10, 20, 30),
		ThresholdFrac: timing.Value{Min: 0.3, Typ: 0.5, Max: 0.7, Dist: timing.Normal, SD: 0.03},
		GateROhm:      timing.Range(166.7, 294.1, 384.6), EdgeNS: timing.Range(30, 60, 100),
	}
}

func TestGateROhmFromCurrent(t *testing.T) {
	// JESD13-B (B-series CMOS) minimum output sink current at 25 °C:
	// 0.51 mA at V_DD = 5 V, V_O = 0.4 V (from memory of the standard's table
	// as reproduced in 4000B data sheets): R ≤ 0.4/0.51 mA = 784.3 Ω.
	r, err := timing.GateROhmFromCurrent(timing.Range(0.51, 1.0, 2.0), 0.4)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(r.Max-784.31) > 0.01 || math.Abs(r.Typ-400) > 1e-9 || math.Abs(r.Min-200) > 1e-9 {
		t.Errorf("R from 0.51/1.0/2.0 mA at 0.4 V = %v, want 200/400/784.31 Ω", r)
	}
	for _, bad := range []struct {
		i  timing.Value
		at float64
	}{{timing.Range(0, 1, 2), 0.4}, {timing.Fixed(1), 0}, {timing.Fixed(1), math.Inf(1)}} {
		if _, err := timing.GateROhmFromCurrent(bad.i, bad.at); err == nil {
			t.Errorf("GateROhmFromCurrent(%v, %g) accepted", bad.i, bad.at)
		}
	}
}

func TestSupplyTable(t *testing.T) {
	// JESD13-B input thresholds: V_IL max/V_IH min 3.0/7.0 V at 10 V and
	// 4.0/11.0 V at 15 V (fractions 0.30/0.70 and 0.2667/0.7333).
	tab := &timing.SupplyTable{
		SupplyV: []float64{10, 15},
		Inputs: map[string][]timing.Value{
			"threshold_frac": {timing.Range(0.30, 0.5, 0.70), timing.Range(4.0/15, 0.5, 11.0/15)},
			"delay_ns":       {timing.Range(40, 50, 100), timing.Range(30, 35, 70)},
		},
	}
	if err := tab.Check(); err != nil {
		t.Fatal(err)
	}
	at10, _ := tab.At("threshold_frac", 10)
	if at10.Min != 0.30 || at10.Max != 0.70 {
		t.Errorf("at a row: %v, want the row exactly", at10)
	}
	mid, _ := tab.At("delay_ns", 12.5) // linear: halfway between the rows
	if math.Abs(mid.Min-35) > 1e-12 || math.Abs(mid.Typ-42.5) > 1e-12 || math.Abs(mid.Max-85) > 1e-12 {
		t.Errorf("delay at 12.5 V = %v, want 35/42.5/85", mid)
	}
	for _, v := range []float64{9.99, 15.01, math.NaN()} {
		if _, err := tab.At("delay_ns", v); err == nil {
			t.Errorf("At(%g V) outside 10..15 V accepted", v)
		}
	}

	c := qm205()
	c.SupplyV = timing.Tol(12, 5)
	c.DelayNS, c.ThresholdFrac = timing.Value{}, timing.Value{}
	c.DelayNS = timing.Value{}
	c.BySupply = tab
	c.SetupNS = timing.Range(10, 20, 25)
	if err := c.Validate(); err != nil {
		t.Fatalf("valid table refused: %v", err)
	}
	if p := c.Nominal(); math.Abs(p.DelayNS-(50-15*2.0/5)) > 1e-9 {
		t.Errorf("nominal delay at 12 V = %g ns, want 44", p.DelayNS)
	}
	// Outside the table, with one row, or given twice: refused, naming why.
	refuse := func(name string, c timing.Circuit, want string) {
		t.Helper()
		err := c.Validate()
		if !errors.Is(err, timing.ErrCircuit) || !strings.Contains(err.Error(), want) {
			t.Errorf("%s: %v, want ErrCircuit with %q", name, err, want)
		}
	}
	out := c
	out.SupplyV = timing.Tol(15, 5)
	refuse("supply above the table", out, "outside the supply table's 10..15 V")
	one := c
	one.BySupply = &timing.SupplyTable{SupplyV: []float64{12}, Inputs: map[string][]timing.Value{"delay_ns": {timing.Fixed(44)}}}
	one.ThresholdFrac = qm205().ThresholdFrac
	refuse("one row, toleranced supply", one, "at 12 V only")
	twice := c
	twice.DelayNS = timing.Fixed(44)
	refuse("given twice", twice, "delay_ns is given both")
	// Corners visit the supply's extremes and the table's rows between them:
	// every Monte Carlo draw lies inside.
	rep, err := timing.Analyze(c, timing.Spec{NoTripAtPF: -50, TripByPF: 500}, timing.Options{Draws: 4000, Seed: 3})
	if err != nil {
		t.Fatal(err)
	}
	for _, w := range rep.Warnings {
		if strings.Contains(w, "not monotone") {
			t.Errorf("corners miss draws: %s", w)
		}
	}
	if strings.Join(rep.Gate.BySupply, ",") != "delay_ns,threshold_frac" {
		t.Errorf("report by_supply %v", rep.Gate.BySupply)
	}
}

// integrateRace integrates the sense node τ·dv/dt = src − v with classic RK4
// through `periods` clock periods of a trapezoidal CK (linear ramps of tr,
// edges tH and tL apart), finds when CK's loaded pin, src − ρ·(src − v),
// falls through vt on the last falling edge, and returns v one race later.
// It is independent of the closed form: it never calls into package timing.
func integrateRace(vdd, rTot, rho, cF, tH, tL, tr, vt, race float64, periods int) float64 {
	tau := rTot * cF
	src := func(t float64) float64 { // t within one period, from the rising ramp
		switch {
		case t < tr:
			return vdd * t / tr
		case t < tH:
			return vdd
		case t < tH+tr:
			return vdd * (1 - (t-tH)/tr)
		}
		return 0
	}
	h := math.Min(tau, tr) / 400
	f := func(t, v float64) float64 { return (src(t) - v) / tau }
	v, t := 0.0, 0.0
	step := func() {
		k1 := f(t, v)
		k2 := f(t+h/2, v+h/2*k1)
		k3 := f(t+h/2, v+h/2*k2)
		k4 := f(t+h, v+h*k3)
		v += h / 6 * (k1 + 2*k2 + 2*k3 + k4)
		t += h
	}
	for range periods - 1 {
		for t = 0; t < tH+tL-h/2; {
			step()
		}
	}
	for t = 0; t < tH; {
		step()
	}
	pin := func() float64 { return src(t) - rho*(src(t)-v) }
	for pin() > vt {
		step()
	}
	end := t + race
	for t < end-h/2 {
		step()
	}
	return v
}

func TestGateEffectsAgainstNumericalIntegration(t *testing.T) {
	// The closed form with R_g, a ramped edge and the loaded pin's crossing
	// against an RK4 integration of the same circuit: at trip × (1 ∓ 0.3 %)
	// the node must be below/above V_T when sampled, and at the trip within
	// 0.2 % of V_T (the integration's sampling grid is τ/400).
	for _, tc := range []struct {
		name string
		p    timing.Point
	}{
		{"fast 9 V", fast9V().Nominal()},
		{"fast 9 V, θ 0.3, slow edge", func() timing.Point {
			p := fast9V().Nominal()
			p.ThresholdFrac, p.EdgeNS = 0.3, 100
			return p
		}()},
	} {
		t.Run(tc.name, func(t *testing.T) {
			p := tc.p
			trip, err := timing.TripPF(p)
			if err != nil {
				t.Fatal(err)
			}
			tH, tL, _ := timing.Oscillator(p)
			rTot := p.SenseROhm + p.GateROhm
			vt := p.ThresholdFrac * p.SupplyV
			at := func(c float64) float64 {
				cF := (p.InputPF + p.PadPF + c) * 1e-12
				return integrateRace(p.SupplyV, rTot, p.GateROhm/rTot, cF, tH, tL, p.EdgeNS*1e-9/0.8, vt, timing.RaceS(p), 3)
			}
			if v := at(trip * 0.997); v >= vt {
				t.Errorf("at trip×0.997 the node is %.4f V ≥ V_T %.4f V", v, vt)
			}
			if v := at(trip * 1.003); v <= vt {
				t.Errorf("at trip×1.003 the node is %.4f V ≤ V_T %.4f V", v, vt)
			}
			if v := at(trip); math.Abs(v/vt-1) > 0.002 {
				t.Errorf("at the trip the node is %.4f V, V_T %.4f V", v, vt)
			}
		})
	}
}

func TestShortRaceWarning(t *testing.T) {
	spec := timing.Spec{NoTripAtPF: 0, TripByPF: 200}
	rep, err := timing.Analyze(fast9V(), spec, timing.Options{Draws: 500, Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	// 130 ns race / 60 ns edge = 2.17 edges.
	if !rep.Gate.ShortRace || math.Abs(rep.Gate.RaceEdges-130.0/60) > 1e-9 || !strings.Contains(strings.Join(rep.Warnings, "|"), "race lasts 130 ns") {
		t.Errorf("fast circuit: gate %+v warnings %q", rep.Gate, rep.Warnings)
	}
	slow := qm205()
	slow.GateROhm, slow.EdgeNS = timing.Range(200, 400, 784), timing.Range(40, 100, 200)
	rep, err = timing.Analyze(slow, spec, timing.Options{Draws: 500, Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	if rep.Gate.ShortRace || strings.Contains(strings.Join(rep.Warnings, "|"), "race lasts") {
		t.Errorf("QM-205 with a 100 ns edge (race 29.6 edges) warned: %q", rep.Warnings)
	}
}

func TestSensitivity(t *testing.T) {
	// Ideal gates, v_hi = V_DD: trip = t_s/(R_s·ln(1/θ)) − C_in − C_pad, so
	// ∂trip/∂C_pad = −1 and ∂trip/∂R_s = −(trip + C_in + C_pad)/R_s exactly
	// (DESIGN's closed form differentiated by hand).
	c := fixedCircuit(qm205().Nominal())
	c.PadPF = timing.Tol(8, 15)
	c.SenseROhm = timing.Tol(100e3, 5)
	rep, err := timing.Analyze(c, timing.Spec{NoTripAtPF: 0, TripByPF: 100}, timing.Options{Draws: 200, Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Sensitivity) != 2 {
		t.Fatalf("sensitivity %+v, want two toleranced inputs", rep.Sensitivity)
	}
	cTot := rep.Trip.Nominal + 13
	want := map[string]float64{"pad_pf": -1, "sense_r_ohm": -cTot / 100e3}
	for _, s := range rep.Sensitivity {
		if math.Abs(s.PerUnit/want[s.Input]-1) > 1e-4 {
			t.Errorf("∂trip/∂%s = %g, want %g", s.Input, s.PerUnit, want[s.Input])
		}
	}
	// R_s ±5 % moves the trip by 0.05·42.7 = 2.14 pF, the pad ±1.2 pF: R_s first.
	if rep.Sensitivity[0].Input != "sense_r_ohm" || math.Abs(rep.Sensitivity[0].Share+rep.Sensitivity[1].Share-1) > 1e-12 {
		t.Errorf("ranking %+v", rep.Sensitivity)
	}
}
