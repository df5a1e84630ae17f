package timing_test

import (
	"errors"
	"math"
	"math/rand/v2"
	"reflect"
	"testing"

	"padline/sequences/timing"
)

// qm205 is the QM-205 demo variant (testdata/variants/QM-205.yaml) as a Circuit.
func qm205() timing.Circuit {
	return timing.Circuit{
		SupplyV: timing.Tol(5, 5), OscROhm: timing.Tol(22000, 1), OscCF: timing.Tol(100e-9, 10),
		VtPosFrac: timing.Range(0.55, 0.62, 0.70), VtNegFrac: timing.Range(0.30, 0.38, 0.45),
		SenseROhm: timing.Tol(100000, 1), PadPF: timing.Tol(8, 15), InputPF: timing.Range(3, 5, 7.5),
		DelayNS: timing.Range(2700, 3000, 3400), SetupNS: timing.Range(20, 40, 80),
		ThresholdFrac: timing.Value{Min: 0.3, Typ: 0.5, Max: 0.7, Dist: timing.Normal, SD: 0.03},
	}
}

// fastClock is a circuit whose clock half periods (≈ 10 µs) are only a few
// sense time constants long, so v_hi is well below V_DD and the trip equation
// is truly implicit.
func fastClock() timing.Circuit {
	c := qm205()
	c.OscROhm = timing.Tol(33000, 1)
	c.OscCF = timing.Tol(1e-9, 5)
	c.VtPosFrac = timing.Range(0.60, 0.62, 0.64)
	c.VtNegFrac = timing.Range(0.36, 0.38, 0.40)
	c.ThresholdFrac = timing.Value{Min: 0.4, Typ: 0.5, Max: 0.55, Dist: timing.Normal, SD: 0.03}
	return c
}

// fixedCircuit returns c with every tolerance removed.
func fixedCircuit(p timing.Point) timing.Circuit {
	return timing.Circuit{
		SupplyV: timing.Fixed(p.SupplyV), OscROhm: timing.Fixed(p.OscROhm), OscCF: timing.Fixed(p.OscCF),
		VtPosFrac: timing.Fixed(p.VtPosFrac), VtNegFrac: timing.Fixed(p.VtNegFrac),
		SenseROhm: timing.Fixed(p.SenseROhm), PadPF: timing.Fixed(p.PadPF), InputPF: timing.Fixed(p.InputPF),
		DelayNS: timing.Fixed(p.DelayNS), SetupNS: timing.Fixed(p.SetupNS), ThresholdFrac: timing.Fixed(p.ThresholdFrac),
	}
}

func TestNominalDemoFigures(t *testing.T) {
	// Demo numbers worked by hand with DEVELOPERS.md "Physics" from the typical values
	// of testdata/variants/QM-205.yaml: C_total = (3.0 µs − 40 ns) /
	// (100 kΩ·ln 2) ≈ 42.7 pF → C_ext,trip ≈ 42.7 − 13 = 29.7 pF; clock
	// 1/(2·22 kΩ·100 nF·ln(0.62/0.38)) ≈ 465 Hz.
	p := qm205().Nominal()
	trip, err := timing.TripPF(p)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(trip-29.7) > 0.1 {
		t.Errorf("QM-205 nominal trip = %.3f pF, want ≈ 29.7", trip)
	}
	if _, _, hz := timing.Oscillator(p); math.Abs(hz-465) > 2 {
		t.Errorf("QM-205 nominal clock = %.1f Hz, want ≈ 465", hz)
	}
}

func TestRCDecayIdentities(t *testing.T) {
	// RC decay v = V0·exp(−t/RC): to V0/2 in 0.69315·RC, to 10 % in
	// 2.30259·RC, 0.674 % left after 5·RC (exact mathematics; any circuits
	// text, e.g. Horowitz & Hill, The Art of Electronics, 3rd ed., ch. 1).
	// With a slow clock (v_hi = V_DD) and t_s set to that many time constants
	// of the node with no external capacitance, the trip must be at 0 pF.
	const rs, cNode = 100e3, 10.0 // τ = 1 µs
	tau := rs * cNode * 1e-12
	cases := []struct {
		name         string
		theta, tOver float64
	}{
		{"half", 0.5, 0.69315},
		{"tenth", 0.1, 2.30259},
		{"five tau", 0.00674, 5},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			p := qm205().Nominal()
			p.SenseROhm, p.PadPF, p.InputPF = rs, cNode, 0
			p.SetupNS = 0
			p.DelayNS = tc.tOver * tau * 1e9
			p.ThresholdFrac = tc.theta
			trip, err := timing.TripPF(p)
			if err != nil {
				t.Fatal(err)
			}
			// Tolerance: the identities are quoted to 5-6 digits (and 0.674 %
			// to 3), i.e. ≤ 1e-3 relative on τ → 0.01 pF on 10 pF.
			if math.Abs(trip) > 0.01 {
				t.Errorf("trip = %.5f pF, want 0", trip)
			}
		})
	}
	// 10–90 % rise of the node in 2.19722·RC (same source): the v_hi of a
	// clock whose high half is exactly that long, starting from a node that
	// has fully decayed (very long low half), is 0.9·V_DD.
	p := qm205().Nominal()
	p.OscROhm, p.OscCF, p.VtPosFrac, p.VtNegFrac = 1, 1, 0.5, 0.25 // placeholder, set below
	// Choose R_o·C_o so t_H = 2.30259·τ: charging from 0 to 90 % takes
	// ln 10 = 2.30259 RC (10 % to 90 % is ln 9 = 2.19722 of that).
	p.SenseROhm, p.PadPF, p.InputPF = rs, cNode, 0
	p.VtPosFrac, p.VtNegFrac = 0.9, 0.01 // t_L = RC·ln 90 (long), t_H = RC·ln(0.99/0.1)
	rc := 2.30259 * tau / math.Log(0.99/0.1)
	p.OscROhm, p.OscCF = rc, 1
	vh := timing.VHi(p, 0)
	// v_lo is v_hi·exp(−t_L/τ) ≈ 0.13·v_hi here; remove its contribution to
	// compare with the from-zero identity: v_hi = V(1−a) + v_lo·a.
	tL := rc * math.Log(0.9/0.01)
	a := math.Exp(-2.30259)
	vlo := vh * math.Exp(-tL/tau)
	fromZero := vh - vlo*a
	if math.Abs(fromZero/p.SupplyV-0.9) > 1e-5 {
		t.Errorf("charge in 2.30259·RC reaches %.6f of V_DD, want 0.9", fromZero/p.SupplyV)
	}
}

func TestOscillator(t *testing.T) {
	// Thresholds at VDD/3 and 2VDD/3 give T = 2·ln2·RC = 1.3863·RC
	// (Schmitt RC relaxation oscillator, DEVELOPERS.md "Physics" 1: derived, exact).
	p := timing.Point{OscROhm: 10e3, OscCF: 1e-6, VtPosFrac: 2.0 / 3, VtNegFrac: 1.0 / 3, SupplyV: 5}
	th, tl, hz := timing.Oscillator(p)
	rc := 10e3 * 1e-6
	if got := (th + tl) / rc; math.Abs(got-1.3863) > 1e-4 {
		t.Errorf("T/RC = %.5f, want 1.3863", got)
	}
	if math.Abs(th-tl) > 1e-15 || math.Abs(hz*(th+tl)-1) > 1e-12 {
		t.Errorf("halves %g/%g, f %g", th, tl, hz)
	}

	// Common practice, no source: a Schmitt-inverter RC oscillator at 5 V
	// with 22 kΩ runs at roughly 100 Hz with 0.47 µF and 500 Hz with 0.1 µF;
	// the model with typical thresholds (QM-205's 0.62/0.38) must land within
	// ±35 %.
	for _, tc := range []struct{ cf, want float64 }{{0.47e-6, 100}, {0.1e-6, 500}} {
		p := timing.Point{SupplyV: 5, OscROhm: 22e3, OscCF: tc.cf, VtPosFrac: 0.62, VtNegFrac: 0.38}
		_, _, hz := timing.Oscillator(p)
		if hz < 0.65*tc.want || hz > 1.35*tc.want {
			t.Errorf("22 kΩ, %g F: %.1f Hz, want %g Hz ±35 %%", tc.cf, hz, tc.want)
		}
	}
}

func TestJESD13BThresholdCorners(t *testing.T) {
	// JEDEC JESD13-B, DC input limits at 25 °C, buffered inputs: VIL max
	// 1.5/3.0 V and VIH min 3.5/7.0 V at VDD = 5/10 V (DEVELOPERS.md "References",
	// confirmed). Used as the guaranteed corners of θ, the trip corners must
	// be the trip at θ = VIL/VDD and θ = VIH/VDD.
	for _, tc := range []struct{ vdd, vil, vih float64 }{{5, 1.5, 3.5}, {10, 3.0, 7.0}} {
		c := fixedCircuit(qm205().Nominal())
		c.SupplyV = timing.Fixed(tc.vdd)
		c.ThresholdFrac = timing.Range(tc.vil/tc.vdd, 0.5, tc.vih/tc.vdd)
		rep, err := timing.Analyze(c, timing.Spec{NoTripAtPF: 0, TripByPF: 100}, timing.Options{Draws: 1000, Seed: 1})
		if err != nil {
			t.Fatal(err)
		}
		p := c.Nominal()
		p.ThresholdFrac = tc.vil / tc.vdd
		lo, _ := timing.TripPF(p)
		p.ThresholdFrac = tc.vih / tc.vdd
		hi, _ := timing.TripPF(p)
		if rep.Trip.CornerLow != lo || rep.Trip.CornerHigh != hi || !(lo < rep.Trip.Nominal && rep.Trip.Nominal < hi) {
			t.Errorf("VDD %g: corners %.3f..%.3f, want %.3f..%.3f around %.3f", tc.vdd, rep.Trip.CornerLow, rep.Trip.CornerHigh, lo, hi, rep.Trip.Nominal)
		}
	}
}

// integrateNode integrates dv/dt = (vclk − v)/(R_s·C) with classic RK4 over
// periods clock periods (CK high for tH, low for tL), starting from 0 V, then
// t_s past the last falling edge, and returns the node voltage there. It is
// independent of the closed form: it never calls into package timing.
func integrateNode(vdd, rs, cF, tH, tL, ts float64, periods int) float64 {
	tau := rs * cF
	seg := func(v, vclk, dur float64) float64 {
		n := int(math.Ceil(dur / (tau / 100)))
		h := dur / float64(n)
		f := func(v float64) float64 { return (vclk - v) / tau }
		for range n {
			k1 := f(v)
			k2 := f(v + h/2*k1)
			k3 := f(v + h/2*k2)
			k4 := f(v + h*k3)
			v += h / 6 * (k1 + 2*k2 + 2*k3 + k4)
		}
		return v
	}
	v := 0.0
	for i := range periods {
		v = seg(v, vdd, tH)
		if i < periods-1 {
			v = seg(v, 0, tL)
		}
	}
	return seg(v, 0, ts)
}

func TestTripAgainstNumericalIntegration(t *testing.T) {
	// Independent check (DEVELOPERS.md "Physics" physics, integrated numerically): find
	// by bisection the external C at which the integrated node is at V_T at
	// t_s after the falling edge; it must agree with TripPF to 0.5 %.
	cases := []struct {
		name    string
		p       timing.Point
		periods int
		vhiMax  float64 // v_hi/V_DD at the trip must be below this
	}{
		{"QM-205 nominal", qm205().Nominal(), 3, 1.0001},
		{"fast clock, v_hi < V_DD", fastClock().Nominal(), 12, 0.999},
		{"fast clock, high threshold", func() timing.Point { p := fastClock().Nominal(); p.ThresholdFrac = 0.6; return p }(), 12, 0.985},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			p := tc.p
			want, err := timing.TripPF(p)
			if err != nil {
				t.Fatal(err)
			}
			rc := p.OscROhm * p.OscCF
			tH := rc * math.Log((1-p.VtNegFrac)/(1-p.VtPosFrac))
			tL := rc * math.Log(p.VtPosFrac/p.VtNegFrac)
			ts := (p.DelayNS - p.SetupNS) * 1e-9
			vt := p.ThresholdFrac * p.SupplyV
			lo, hi := -p.PadPF-p.InputPF+0.5, 200.0
			for range 40 {
				mid := (lo + hi) / 2
				cF := (p.PadPF + p.InputPF + mid) * 1e-12
				if integrateNode(p.SupplyV, p.SenseROhm, cF, tH, tL, ts, tc.periods) > vt {
					hi = mid
				} else {
					lo = mid
				}
			}
			got := (lo + hi) / 2
			if math.Abs(got-want) > 0.005*math.Abs(want) {
				t.Errorf("integrated trip %.4f pF, closed form %.4f pF (diff %.3f %%)", got, want, 100*(got-want)/want)
			}
			if vh := timing.VHi(p, want); vh > tc.vhiMax*p.SupplyV {
				t.Errorf("v_hi = %.3f V: the case does not exercise v_hi < V_DD", vh)
			}
		})
	}
}

func TestCornersBoundInterior(t *testing.T) {
	// The trip is monotone in each input only within limits; the corners
	// Analyze reports must bound the trip and clock at random interior points
	// of the tolerance box (uniform, so the box's edges are visited often).
	for _, tc := range []struct {
		name string
		c    timing.Circuit
	}{{"QM-205", qm205()}, {"fast clock", fastClock()}} {
		t.Run(tc.name, func(t *testing.T) {
			rep, err := timing.Analyze(tc.c, timing.Spec{NoTripAtPF: 10, TripByPF: 60}, timing.Options{Draws: 2000, Seed: 3})
			if err != nil {
				t.Fatal(err)
			}
			// Uniform draws over the box.
			u := tc.c
			for _, v := range []*timing.Value{&u.SupplyV, &u.OscROhm, &u.OscCF, &u.VtPosFrac, &u.VtNegFrac,
				&u.SenseROhm, &u.PadPF, &u.InputPF, &u.DelayNS, &u.SetupNS, &u.ThresholdFrac} {
				v.Dist, v.SD = timing.Uniform, 0
			}
			r := rand.New(rand.NewPCG(7, 7))
			for range 20000 {
				p := timing.Point{
					SupplyV: u.SupplyV.Draw(r), OscROhm: u.OscROhm.Draw(r), OscCF: u.OscCF.Draw(r),
					VtPosFrac: u.VtPosFrac.Draw(r), VtNegFrac: u.VtNegFrac.Draw(r),
					SenseROhm: u.SenseROhm.Draw(r), PadPF: u.PadPF.Draw(r), InputPF: u.InputPF.Draw(r),
					DelayNS: u.DelayNS.Draw(r), SetupNS: u.SetupNS.Draw(r), ThresholdFrac: u.ThresholdFrac.Draw(r),
				}
				trip, err := timing.TripPF(p)
				if err != nil {
					t.Fatal(err)
				}
				_, _, hz := timing.Oscillator(p)
				if trip < rep.Trip.CornerLow || trip > rep.Trip.CornerHigh {
					t.Fatalf("interior trip %.4f outside corners %.4f..%.4f at %+v", trip, rep.Trip.CornerLow, rep.Trip.CornerHigh, p)
				}
				if hz < rep.Clock.CornerLow || hz > rep.Clock.CornerHigh {
					t.Fatalf("interior clock %.2f outside corners %.2f..%.2f", hz, rep.Clock.CornerLow, rep.Clock.CornerHigh)
				}
			}
		})
	}
}

func TestMonteCarlo(t *testing.T) {
	c, spec := qm205(), timing.Spec{NoTripAtPF: 10, TripByPF: 60}
	opt := timing.Options{Seed: 42, UncertaintyPF: 0.3}
	a, err := timing.Analyze(c, spec, opt)
	if err != nil {
		t.Fatal(err)
	}
	if a.Draws != timing.DefaultDraws || timing.DefaultDraws < 20000 {
		t.Errorf("draws = %d", a.Draws)
	}
	tr := a.Trip
	if !(tr.CornerLow <= tr.MCP00135 && tr.MCP00135 < tr.MCP50 && tr.MCP50 < tr.MCP99865 && tr.MCP99865 <= tr.CornerHigh) {
		t.Errorf("percentiles %.3f/%.3f/%.3f not ordered inside corners %.3f..%.3f", tr.MCP00135, tr.MCP50, tr.MCP99865, tr.CornerLow, tr.CornerHigh)
	}
	if !(a.Clock.CornerLow < a.Clock.MCMean && a.Clock.MCMean < a.Clock.CornerHigh) {
		t.Errorf("clock mean %.1f outside corners", a.Clock.MCMean)
	}
	if math.Abs(tr.MCMean-tr.Nominal) > tr.MCSD {
		t.Errorf("MC mean %.3f far from nominal %.3f (sd %.3f)", tr.MCMean, tr.Nominal, tr.MCSD)
	}
	b, err := timing.Analyze(c, spec, opt)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(a, b) {
		t.Errorf("same seed, different reports:\n%+v\n%+v", a, b)
	}
	opt.Seed = 43
	d, err := timing.Analyze(c, spec, opt)
	if err != nil {
		t.Fatal(err)
	}
	if d.Trip.MCMean == a.Trip.MCMean {
		t.Errorf("another seed gave the same mean %v", d.Trip.MCMean)
	}
	// Two independent Monte Carlo means of n draws differ by a normal
	// variate with standard error σ·√(2/n) (central limit theorem); 5 SE
	// fails a correct model about once in 1.7 million runs.
	if se := a.Trip.MCSD * math.Sqrt(2/float64(a.Draws)); math.Abs(d.Trip.MCMean-a.Trip.MCMean) > 5*se {
		t.Errorf("seeds disagree: %.4f vs %.4f, more than 5 SE (%.4f)", d.Trip.MCMean, a.Trip.MCMean, se)
	}
	// Cpk and yield follow from the reported mean and sd (NIST e-Handbook
	// §6.1.6: Cpk = min(USL−μ, μ−LSL)/3σ).
	wantCpk := math.Min(spec.TripByPF-tr.MCMean, tr.MCMean-spec.NoTripAtPF) / (3 * tr.MCSD)
	if math.Abs(a.Predicted.Cpk-wantCpk) > 1e-12 {
		t.Errorf("cpk %v, want %v", a.Predicted.Cpk, wantCpk)
	}
	if a.Predicted.Yield < 0.99 || a.Predicted.Yield > 1 || a.Predicted.YieldNormal < 0.99 || a.Predicted.YieldNormal > 1 {
		t.Errorf("yield %v / %v", a.Predicted.Yield, a.Predicted.YieldNormal)
	}
}

func TestCapabilityKnownCase(t *testing.T) {
	// Cpk = min(USL−μ, μ−LSL)/(3σ) (NIST/SEMATECH e-Handbook §6.1.6); its
	// agreement with the reported moments is checked in TestMonteCarlo.
	// A spec window the design straddles badly must warn and predict a low yield.
	rep, err := timing.Analyze(qm205(), timing.Spec{NoTripAtPF: 28, TripByPF: 32}, timing.Options{Seed: 1, UncertaintyPF: 0.3})
	if err != nil {
		t.Fatal(err)
	}
	if rep.Predicted.Cpk > 0.5 || rep.Predicted.Yield > 0.7 || len(rep.Warnings) == 0 {
		t.Errorf("narrow window: cpk %.2f yield %.3f warnings %q", rep.Predicted.Cpk, rep.Predicted.Yield, rep.Warnings)
	}
}

func TestGuardBand(t *testing.T) {
	// ISO 14253-1:2017: conformance is proven only inside the specification
	// zone shrunk by U at each limit. Test limits = tighter of model limits
	// and spec window, each side shrunk by U.
	c := qm205()
	cases := []struct {
		name     string
		spec     timing.Spec
		u        float64
		collapse bool
	}{
		{"spec inside model", timing.Spec{NoTripAtPF: 10, TripByPF: 60}, 0.3, false},
		{"model inside spec", timing.Spec{NoTripAtPF: 0, TripByPF: 100}, 0.5, false},
		{"no uncertainty", timing.Spec{NoTripAtPF: 10, TripByPF: 60}, 0, false},
		{"collapse", timing.Spec{NoTripAtPF: 10, TripByPF: 60}, 30, true},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			rep, err := timing.Analyze(c, tc.spec, timing.Options{Draws: 2000, Seed: 1, UncertaintyPF: tc.u})
			if err != nil {
				t.Fatal(err)
			}
			// The expectation, worked by hand per case: the spec window
			// 10…60 pF lies inside the demo variant's worst-case corners, so
			// it alone sets the limits; the window 0…100 pF lies outside
			// them, so the corners (the trip's extreme over every min/max
			// combination) do.
			lo, hi := tc.spec.NoTripAtPF+tc.u, tc.spec.TripByPF-tc.u
			if tc.spec.NoTripAtPF < rep.Trip.CornerLow {
				lo, hi = rep.Trip.CornerLow+tc.u, rep.Trip.CornerHigh-tc.u
			} else if rep.Trip.CornerLow > 10 || rep.Trip.CornerHigh < 60 {
				t.Fatalf("corners %.2f…%.2f do not enclose 10…60 pF: the hand expectation no longer holds", rep.Trip.CornerLow, rep.Trip.CornerHigh)
			}
			if !tc.collapse && (math.Abs(rep.TestLimits.Low-lo) > 1e-9 || math.Abs(rep.TestLimits.High-hi) > 1e-9 || rep.GuardBandPF != tc.u) {
				t.Errorf("test limits %+v guard %v, want %v..%v guard %v", rep.TestLimits, rep.GuardBandPF, lo, hi, tc.u)
			}
			warned := false
			for _, w := range rep.Warnings {
				if len(w) > 19 && w[:19] == "test limits collaps" {
					warned = true
				}
			}
			if warned != tc.collapse {
				t.Errorf("collapse warning %v, want %v: %q", warned, tc.collapse, rep.Warnings)
			}
		})
	}
}

func TestNoTrip(t *testing.T) {
	// Clock half periods of about two time constants: the node never gets
	// close enough to V_DD to stay above a 0.65 threshold at t_s.
	p := fastClock().Nominal()
	p.OscCF = 0.35e-9 // half periods ≈ 5.7 µs, still longer than t_s
	p.ThresholdFrac = 0.65
	if _, err := timing.TripPF(p); !errors.Is(err, timing.ErrNoTrip) {
		t.Errorf("err = %v, want ErrNoTrip", err)
	}
}

func TestInvalid(t *testing.T) {
	spec := timing.Spec{NoTripAtPF: 10, TripByPF: 60}
	mutate := []struct {
		name string
		f    func(*timing.Circuit)
	}{
		{"zero sense resistance", func(c *timing.Circuit) { c.SenseROhm = timing.Fixed(0) }},
		{"min above typ", func(c *timing.Circuit) { c.PadPF = timing.Value{Min: 9, Typ: 8, Max: 10} }},
		{"threshold at 1", func(c *timing.Circuit) { c.ThresholdFrac = timing.Range(0.3, 0.5, 1) }},
		{"thresholds overlap", func(c *timing.Circuit) { c.VtNegFrac = timing.Range(0.3, 0.4, 0.6) }},
		{"setup longer than delay", func(c *timing.Circuit) { c.SetupNS = timing.Fixed(3000) }},
		{"unknown distribution", func(c *timing.Circuit) { c.PadPF.Dist = "lognormal" }},
	}
	for _, tc := range mutate {
		t.Run(tc.name, func(t *testing.T) {
			c := qm205()
			tc.f(&c)
			if _, err := timing.Analyze(c, spec, timing.Options{}); !errors.Is(err, timing.ErrCircuit) {
				t.Errorf("err = %v, want ErrCircuit", err)
			}
		})
	}
	if _, err := timing.Analyze(qm205(), timing.Spec{NoTripAtPF: 35, TripByPF: 6}, timing.Options{}); err == nil {
		t.Error("empty spec window accepted")
	}
	if _, err := timing.Analyze(qm205(), spec, timing.Options{UncertaintyPF: -1}); err == nil {
		t.Error("negative uncertainty accepted")
	}
}

func TestDraws(t *testing.T) {
	// Moments of the three distributions (exact mathematics): uniform mean
	// (a+b)/2, sd (b−a)/√12; triangular mean (a+c+b)/3; the default normal
	// with tolerance = 3σ truncated at ±3σ has sd 0.9865·σ.
	r := rand.New(rand.NewPCG(1, 2))
	const n = 200000
	moments := func(v timing.Value) (mean, sd float64) {
		var s, s2 float64
		for range n {
			x := v.Draw(r)
			if x < v.Min || x > v.Max {
				t.Fatalf("draw %v outside %v..%v", x, v.Min, v.Max)
			}
			s += x
			s2 += x * x
		}
		mean = s / n
		return mean, math.Sqrt(s2/n - mean*mean)
	}
	cases := []struct {
		name     string
		v        timing.Value
		mean, sd float64
	}{
		{"uniform", timing.Value{Min: 0, Typ: 0.5, Max: 1, Dist: timing.Uniform}, 0.5, 1 / math.Sqrt(12)},
		{"triangular", timing.Value{Min: 0, Typ: 0.2, Max: 1, Dist: timing.Triangular}, 0.4, math.Sqrt((0 + 0.04 + 1 - 0 - 0 - 0.2) / 18)},
		{"normal tol 3σ", timing.Tol(100, 3), 100, 0.9865},
		{"normal explicit sd", timing.Value{Min: 0.3, Typ: 0.5, Max: 0.7, SD: 0.03}, 0.5, 0.03},
		// Split normal, σ_low = 100/3, σ_high = 200/3: mean typ + √(2/π)(σ_high − σ_low), untruncated.
		{"split normal", timing.Range(1900, 2100, 2400), 2100 + math.Sqrt(2/math.Pi)*(200.0/3-100.0/3), 0},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			m, s := moments(tc.v)
			if math.Abs(m-tc.mean) > 0.01*(tc.v.Max-tc.v.Min) {
				t.Errorf("mean %v, want %v", m, tc.mean)
			}
			if tc.sd > 0 && math.Abs(s-tc.sd) > 0.02*tc.sd {
				t.Errorf("sd %v, want %v", s, tc.sd)
			}
		})
	}
}

func BenchmarkMonteCarlo20k(b *testing.B) {
	c, spec := qm205(), timing.Spec{NoTripAtPF: 10, TripByPF: 60}
	for b.Loop() {
		if _, err := timing.Analyze(c, spec, timing.Options{Draws: 20000, Seed: 1, UncertaintyPF: 0.3}); err != nil {
			b.Fatal(err)
		}
	}
}
