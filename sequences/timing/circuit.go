package timing

import (
	"errors"
	"fmt"
	"math"
)

// ErrNoTrip means no external capacitance makes the unit trip: the sense
// node's start voltage never exceeds the D-input threshold.
var ErrNoTrip = errors.New("timing: no trip")

// ErrCircuit means a circuit or point is not physically valid (a zero
// resistance, thresholds out of order, a sample instant before the edge...).
var ErrCircuit = errors.New("timing: invalid circuit")

// Circuit holds every toleranced input of the timing model of one variant.
type Circuit struct {
	SupplyV Value // V_DD, volts
	// Oscillator: Schmitt inverter with feedback resistor R_o and timing
	// capacitor C_o; thresholds V_P, V_N as fractions of V_DD.
	OscROhm   Value
	OscCF     Value
	VtPosFrac Value
	VtNegFrac Value
	// Sense path: R_s from the buffered clock to the pad node, pad/trace
	// capacitance and the flip-flop's D-input capacitance.
	SenseROhm Value
	PadPF     Value
	InputPF   Value
	// Clock path: delay from the clock edge at R_s to the flip-flop's clock
	// input, and the flip-flop's setup time.
	DelayNS Value
	SetupNS Value
	// ThresholdFrac is the D-input threshold θ as a fraction of V_DD.
	ThresholdFrac Value
}

// Point is one set of values of every Circuit input (a nominal, a corner or
// a Monte Carlo draw), in the same units as the Circuit's fields.
type Point struct {
	SupplyV                              float64
	OscROhm, OscCF, VtPosFrac, VtNegFrac float64
	SenseROhm, PadPF, InputPF            float64
	DelayNS, SetupNS                     float64
	ThresholdFrac                        float64
}

// numInputs is the number of toleranced inputs of a Circuit.
const numInputs = 11

// inputNames lists the Circuit inputs in the order corners and draws use.
var inputNames = [numInputs]string{
	"supply_v", "osc_r_ohm", "osc_c_f", "vt_pos_frac", "vt_neg_frac",
	"sense_r_ohm", "pad_pf", "input_pf", "delay_ns", "setup_ns", "threshold_frac",
}

func (c *Circuit) values() [numInputs]*Value {
	return [numInputs]*Value{&c.SupplyV, &c.OscROhm, &c.OscCF, &c.VtPosFrac, &c.VtNegFrac,
		&c.SenseROhm, &c.PadPF, &c.InputPF, &c.DelayNS, &c.SetupNS, &c.ThresholdFrac}
}

func (p *Point) fields() [numInputs]*float64 {
	return [numInputs]*float64{&p.SupplyV, &p.OscROhm, &p.OscCF, &p.VtPosFrac, &p.VtNegFrac,
		&p.SenseROhm, &p.PadPF, &p.InputPF, &p.DelayNS, &p.SetupNS, &p.ThresholdFrac}
}

// Nominal returns the point with every input at its typical value.
func (c Circuit) Nominal() Point {
	var p Point
	vs, fs := c.values(), p.fields()
	for i := range vs {
		*fs[i] = vs[i].Typ
	}
	return p
}

// Validate checks every value and the physical constraints over the whole
// toleranced range: positive supply, resistances, capacitances and delay;
// non-negative pad, input capacitance and setup; fractions inside (0, 1);
// V_N below V_P at every corner; setup shorter than the delay for the
// nominal unit (a corner where it is not is a unit that cannot trip, which
// Analyze reports).
func (c Circuit) Validate() error {
	vs := c.values()
	for i, v := range vs {
		if err := v.Check(); err != nil {
			return fmt.Errorf("%w: %s: %v", ErrCircuit, inputNames[i], err)
		}
	}
	positive := []int{0, 1, 2, 5, 8}
	for _, i := range positive {
		if vs[i].Min <= 0 {
			return fmt.Errorf("%w: %s: must be > 0, got min %g", ErrCircuit, inputNames[i], vs[i].Min)
		}
	}
	for _, i := range []int{6, 7, 9} {
		if vs[i].Min < 0 {
			return fmt.Errorf("%w: %s: must be ≥ 0, got min %g", ErrCircuit, inputNames[i], vs[i].Min)
		}
	}
	for _, i := range []int{3, 4, 10} {
		if vs[i].Min <= 0 || vs[i].Max >= 1 {
			return fmt.Errorf("%w: %s: must lie inside (0, 1), got %g..%g", ErrCircuit, inputNames[i], vs[i].Min, vs[i].Max)
		}
	}
	if c.VtNegFrac.Max >= c.VtPosFrac.Min {
		return fmt.Errorf("%w: vt_neg_frac max %g must be below vt_pos_frac min %g", ErrCircuit, c.VtNegFrac.Max, c.VtPosFrac.Min)
	}
	if c.SetupNS.Typ >= c.DelayNS.Typ {
		return fmt.Errorf("%w: setup_ns typ %g must be below delay_ns typ %g: the nominal unit could never trip", ErrCircuit, c.SetupNS.Typ, c.DelayNS.Typ)
	}
	return nil
}

// Oscillator returns the clock's half periods in seconds and its frequency in
// Hz for point p: the output is high while C_o charges towards V_DD from V_N
// to V_P, t_H = R_o·C_o·ln((V_DD−V_N)/(V_DD−V_P)), and low while it discharges
// from V_P to V_N, t_L = R_o·C_o·ln(V_P/V_N); f = 1/(t_H + t_L). Gate
// propagation delays and the gate's output resistance are neglected (valid
// while the half periods dwarf them, i.e. for this class of slow oscillators).
// The buffered clock CK that drives the sense node is taken in phase with the
// inverter output: high for t_H, low for t_L.
func Oscillator(p Point) (tHigh, tLow, hz float64) {
	rc := p.OscROhm * p.OscCF
	tHigh = rc * math.Log((1-p.VtNegFrac)/(1-p.VtPosFrac))
	tLow = rc * math.Log(p.VtPosFrac/p.VtNegFrac)
	return tHigh, tLow, 1 / (tHigh + tLow)
}

// tauS returns the sense node's time constant in seconds with cExtPF of
// external capacitance at the pad.
func tauS(p Point, cExtPF float64) float64 {
	return p.SenseROhm * (p.InputPF + p.PadPF + cExtPF) * 1e-12
}

// vHiTau is the periodic steady-state start voltage for time constant tau:
// the node charges towards V_DD for t_H from v_lo, then decays for t_L to
// v_lo, so v_hi = V_DD·(1−a)/(1−a·b) with a = e^(−t_H/τ), b = e^(−t_L/τ).
func vHiTau(p Point, tHigh, tLow, tau float64) float64 {
	return p.SupplyV * -math.Expm1(-tHigh/tau) / -math.Expm1(-(tHigh+tLow)/tau)
}

// VHi returns the voltage of the sense node at the clock's falling edge in the
// periodic steady state, with cExtPF of external capacitance at the pad. For
// τ much shorter than the half periods it is V_DD; in general it is lower.
func VHi(p Point, cExtPF float64) float64 {
	tH, tL, _ := Oscillator(p)
	return vHiTau(p, tH, tL, tauS(p, cExtPF))
}

// SampleInstant returns t_s = clock-path delay − setup, in seconds: the
// moment after the falling edge at which the flip-flop effectively samples D.
func SampleInstant(p Point) float64 { return (p.DelayNS - p.SetupNS) * 1e-9 }

// TripPF returns the external capacitance at the pad, in pF, at which the
// unit trips (the node, decaying from v_hi, is exactly at V_T = θ·V_DD at
// t_s): C_ext,trip = t_s/(R_s·ln(v_hi/V_T)) − C_in − C_pad. Because v_hi
// depends on τ the equation is implicit; TripPF solves it for the smallest τ
// (the first capacitance at which the unit trips) by monotone fixed-point
// iteration from v_hi = V_DD, finishing by bisection if that converges
// slowly. The result may be negative: such a unit trips with nothing at the
// pad. It returns an error wrapping ErrNoTrip when no capacitance trips the
// unit, and ErrCircuit for a non-physical point.
func TripPF(p Point) (float64, error) {
	ts := SampleInstant(p)
	vt := p.ThresholdFrac * p.SupplyV
	if ts <= 0 {
		// The flip-flop samples before the sense node starts to fall: it
		// reads v_hi > V_T whatever the pad carries.
		return 0, fmt.Errorf("%w: sample instant %.3g ns ≤ 0 (setup ≥ delay): the flip-flop samples before the sense node can fall", ErrNoTrip, ts*1e9)
	}
	if !(ts > 0) || !(p.SenseROhm > 0) || !(vt > 0) || !(p.SupplyV > 0) {
		return 0, fmt.Errorf("%w: need t_s, R_s, V_T and V_DD > 0", ErrCircuit)
	}
	tH, tL, _ := Oscillator(p)
	if !(tH > 0) || !(tL > 0) {
		return 0, fmt.Errorf("%w: oscillator thresholds out of order", ErrCircuit)
	}
	if ts >= tL {
		// The closed form assumes the node is still decaying when sampled.
		return 0, fmt.Errorf("%w: sample instant %.4g s falls after the clock's next rising edge (low half %.4g s)", ErrCircuit, ts, tL)
	}
	// F(τ) = t_s/ln(v_hi(τ)/V_T) is increasing in τ (v_hi falls as τ grows),
	// so iterating τ ← F(τ) from below rises monotonically to the smallest
	// fixed point, or runs away when there is none.
	f := func(tau float64) float64 {
		vh := vHiTau(p, tH, tL, tau)
		if vh <= vt {
			return math.Inf(1)
		}
		return ts / math.Log(vh/vt)
	}
	if p.SupplyV <= vt {
		return 0, fmt.Errorf("%w: V_T %.4g V ≥ V_DD %.4g V", ErrNoTrip, vt, p.SupplyV)
	}
	tau := ts / math.Log(p.SupplyV/vt)
	cBase := p.InputPF + p.PadPF
	toPF := func(tau float64) float64 { return tau/p.SenseROhm*1e12 - cBase }
	for range 50 {
		next := f(tau)
		if math.IsInf(next, 1) {
			return 0, fmt.Errorf("%w: v_hi falls below V_T %.4g V before the node can reach it", ErrNoTrip, vt)
		}
		if next-tau <= 1e-13*tau {
			return toPF(next), nil
		}
		tau = next
	}
	// Slow convergence (near a tangency): bracket the root of τ − F(τ), which
	// is negative at tau, and bisect.
	lo, hi := tau, tau
	for i := 0; ; i++ {
		hi *= 2
		if hi-f(hi) >= 0 {
			break
		}
		if i > 60 {
			return 0, fmt.Errorf("%w: no root of the race equation", ErrNoTrip)
		}
	}
	for hi-lo > 1e-13*hi {
		mid := (lo + hi) / 2
		if mid-f(mid) < 0 {
			lo = mid
		} else {
			hi = mid
		}
	}
	return toPF((lo + hi) / 2), nil
}
