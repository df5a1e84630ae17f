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
	// Clock path: delay from the clock edge's threshold crossing to the
	// flip-flop's clock input, and the flip-flop's setup time.
	DelayNS Value
	SetupNS Value
	// ThresholdFrac is the D-input threshold θ as a fraction of V_DD. The
	// clock path's input switches at the same fraction (one die, one process).
	ThresholdFrac Value
	// GateROhm is the output resistance of the gates that drive the timing
	// resistors: the Schmitt inverter (in series with R_o) and the clock
	// buffer (in series with R_s). Zero is an ideal gate. [GateROhmFromCurrent]
	// derives it from an output current at a stated voltage.
	GateROhm Value
	// EdgeNS is the clock edge's 10–90 % transition time at the buffer, ns;
	// zero is an ideal step. The model takes the edge as a linear ramp.
	EdgeNS Value
	// BySupply, when set, gives some inputs per supply voltage instead of
	// one value whatever the supply (see [SupplyTable]).
	BySupply *SupplyTable
}

// Point is one set of values of every Circuit input (a nominal, a corner or
// a Monte Carlo draw), in the same units as the Circuit's fields.
type Point struct {
	SupplyV                              float64
	OscROhm, OscCF, VtPosFrac, VtNegFrac float64
	SenseROhm, PadPF, InputPF            float64
	DelayNS, SetupNS                     float64
	ThresholdFrac                        float64
	GateROhm, EdgeNS                     float64
}

// numInputs is the number of toleranced inputs of a Circuit.
const numInputs = 13

// Input indices, in the order corners and draws use.
const (
	inSupply = iota
	inOscR
	inOscC
	inVtPos
	inVtNeg
	inSenseR
	inPad
	inInput
	inDelay
	inSetup
	inThreshold
	inGateR
	inEdge
)

// inputNames lists the Circuit inputs in the order corners and draws use.
// They are the names a [SupplyTable] and a [Sensitivity] use.
var inputNames = [numInputs]string{
	"supply_v", "osc_r_ohm", "osc_c_f", "vt_pos_frac", "vt_neg_frac",
	"sense_r_ohm", "pad_pf", "input_pf", "delay_ns", "setup_ns", "threshold_frac",
	"gate_r_ohm", "edge_ns",
}

// inputUnits gives each input's unit for reports.
var inputUnits = [numInputs]string{
	"V", "Ω", "F", "×V_DD", "×V_DD", "Ω", "pF", "pF", "ns", "ns", "×V_DD", "Ω", "ns",
}

// InputNames returns the names of the Circuit inputs, in the order corners
// and Monte Carlo draws use them.
func InputNames() []string { return inputNames[:] }

func (c *Circuit) values() [numInputs]Value {
	return [numInputs]Value{c.SupplyV, c.OscROhm, c.OscCF, c.VtPosFrac, c.VtNegFrac,
		c.SenseROhm, c.PadPF, c.InputPF, c.DelayNS, c.SetupNS, c.ThresholdFrac,
		c.GateROhm, c.EdgeNS}
}

func (p *Point) fields() [numInputs]*float64 {
	return [numInputs]*float64{&p.SupplyV, &p.OscROhm, &p.OscCF, &p.VtPosFrac, &p.VtNegFrac,
		&p.SenseROhm, &p.PadPF, &p.InputPF, &p.DelayNS, &p.SetupNS, &p.ThresholdFrac,
		&p.GateROhm, &p.EdgeNS}
}

// valuesAt returns the inputs with those of the supply table interpolated
// at supply v (the supply input itself is returned as given).
func (c *Circuit) valuesAt(v float64) ([numInputs]Value, error) {
	vs := c.values()
	if c.BySupply == nil {
		return vs, nil
	}
	for name := range c.BySupply.Inputs {
		i := inputIndex(name)
		x, err := c.BySupply.At(name, v)
		if err != nil {
			return vs, err
		}
		vs[i] = x
	}
	return vs, nil
}

// Nominal returns the point with every input at its typical value (the
// supply table's inputs interpolated at the typical supply).
func (c Circuit) Nominal() Point {
	var p Point
	vs, _ := c.valuesAt(c.SupplyV.Typ)
	fs := p.fields()
	for i := range vs {
		*fs[i] = vs[i].Typ
	}
	return p
}

// Validate checks every value and the physical constraints over the whole
// toleranced range: positive supply, resistances, capacitances and delay;
// non-negative pad, input capacitance, setup, gate resistance and edge time;
// fractions inside (0, 1); V_N below V_P at every corner; setup shorter than
// the delay for the nominal unit (a corner where it is not is a unit that
// cannot trip, which Analyze reports). With a supply table it also checks the table
// (see [SupplyTable.Check]), that it covers the whole supply range, and the
// constraints at every row and at the supply's extremes (the interpolation
// is linear, so that covers every supply in between).
func (c Circuit) Validate() error {
	at := []float64{c.SupplyV.Min}
	if c.BySupply != nil {
		if err := c.BySupply.Check(); err != nil {
			return fmt.Errorf("%w: %v", ErrCircuit, err)
		}
		plain := c.values()
		for name := range c.BySupply.Inputs {
			if plain[inputIndex(name)] != (Value{}) {
				return fmt.Errorf("%w: %s is given both by supply and as one value", ErrCircuit, name)
			}
		}
		if err := c.BySupply.covers(c.SupplyV); err != nil {
			return fmt.Errorf("%w: %v", ErrCircuit, err)
		}
		for _, s := range c.BySupply.SupplyV {
			if s > c.SupplyV.Min && s < c.SupplyV.Max {
				at = append(at, s)
			}
		}
		at = append(at, c.SupplyV.Max)
	}
	for _, s := range at {
		vs, err := c.valuesAt(s)
		if err != nil {
			return fmt.Errorf("%w: %v", ErrCircuit, err)
		}
		if err := validateValues(vs); err != nil {
			if c.BySupply != nil {
				return fmt.Errorf("%w (at supply %g V)", err, s)
			}
			return err
		}
	}
	return nil
}

// validateValues checks one set of input values (see Circuit.Validate).
func validateValues(vs [numInputs]Value) error {
	for i, v := range vs {
		if err := v.Check(); err != nil {
			return fmt.Errorf("%w: %s: %v", ErrCircuit, inputNames[i], err)
		}
	}
	for _, i := range []int{inSupply, inOscR, inOscC, inSenseR, inDelay} {
		if vs[i].Min <= 0 {
			return fmt.Errorf("%w: %s: must be > 0, got min %g", ErrCircuit, inputNames[i], vs[i].Min)
		}
	}
	for _, i := range []int{inPad, inInput, inSetup, inGateR, inEdge} {
		if vs[i].Min < 0 {
			return fmt.Errorf("%w: %s: must be ≥ 0, got min %g", ErrCircuit, inputNames[i], vs[i].Min)
		}
	}
	for _, i := range []int{inVtPos, inVtNeg, inThreshold} {
		if vs[i].Min <= 0 || vs[i].Max >= 1 {
			return fmt.Errorf("%w: %s: must lie inside (0, 1), got %g..%g", ErrCircuit, inputNames[i], vs[i].Min, vs[i].Max)
		}
	}
	if vs[inVtNeg].Max >= vs[inVtPos].Min {
		return fmt.Errorf("%w: vt_neg_frac max %g must be below vt_pos_frac min %g", ErrCircuit, vs[inVtNeg].Max, vs[inVtPos].Min)
	}
	if vs[inSetup].Typ >= vs[inDelay].Typ {
		return fmt.Errorf("%w: setup_ns typ %g must be below delay_ns typ %g: the nominal unit could never trip", ErrCircuit, vs[inSetup].Typ, vs[inDelay].Typ)
	}
	return nil
}

// Oscillator returns the clock's half periods in seconds and its frequency in
// Hz for point p: the output is high while C_o charges towards V_DD from V_N
// to V_P, t_H = (R_o+R_g)·C_o·ln((V_DD−V_N)/(V_DD−V_P)), and low while it
// discharges from V_P to V_N, t_L = (R_o+R_g)·C_o·ln(V_P/V_N);
// f = 1/(t_H + t_L). The gate's output resistance R_g lies in series with
// R_o on both paths. The Schmitt gate's own propagation delay and edge time
// are neglected (valid while the half periods dwarf them, i.e. for this class
// of slow oscillators: 100 ns against a millisecond is 10⁻⁴). The buffered
// clock CK that drives the sense node is taken in phase with the inverter
// output: its edges start t_H and t_L apart.
func Oscillator(p Point) (tHigh, tLow, hz float64) {
	rc := (p.OscROhm + p.GateROhm) * p.OscCF
	tHigh = rc * math.Log((1-p.VtNegFrac)/(1-p.VtPosFrac))
	tLow = rc * math.Log(p.VtPosFrac/p.VtNegFrac)
	return tHigh, tLow, 1 / (tHigh + tLow)
}

// EdgeRampFactor converts a 10–90 % transition time into the duration of
// the whole linear ramp from one rail to the other: 1/0.8 (a linear ramp
// spends 80 % of its duration between 10 % and 90 %).
const EdgeRampFactor = 1 / 0.8

// rampS returns the duration of CK's linear edge ramp in seconds.
func rampS(p Point) float64 { return p.EdgeNS * 1e-9 * EdgeRampFactor }

// tauS returns the sense node's time constant in seconds with cExtPF of
// external capacitance at the pad: (R_s + R_g)·(C_in + C_pad + C_ext).
func tauS(p Point, cExtPF float64) float64 {
	return (p.SenseROhm + p.GateROhm) * (p.InputPF + p.PadPF + cExtPF) * 1e-12
}

// decayGain returns e^(−s)·(e^x − 1)/x for 0 ≤ x ≤ s without overflow: the
// factor by which a linear ramp of duration x·τ, seen s·τ after it began,
// differs from a step at its start (→ e^(−s) as x → 0).
func decayGain(x, s float64) float64 {
	switch {
	case x == 0:
		return math.Exp(-s)
	case x < 700:
		return math.Exp(-s) * math.Expm1(x) / x
	default:
		return (math.Exp(x-s) - math.Exp(-s)) / x
	}
}

// race holds what the sense node's waveform needs for one point: supply,
// time constant, ramp duration and the periodic start voltage v_hi.
type race struct {
	vdd, tau, tr, vhi float64
}

// newRace returns the sense node's periodic steady state for time constant
// tau. CK is a trapezoid: a linear ramp of duration t_r to V_DD, high until
// t_H after the ramp began, a ramp down, low until t_L after that. With
// a = e^(−t_H/τ), b = e^(−t_L/τ) and g = (e^(t_r/τ) − 1)/(t_r/τ), the
// node's voltage when the falling ramp begins is
// v_hi = V_DD·(1 − g·a·(1−b)/(1−a·b)); for t_r = 0 (g = 1) this is the
// step form V_DD·(1−a)/(1−a·b).
func newRace(p Point, tHigh, tLow, tau float64) race {
	tr := rampS(p)
	ga := decayGain(tr/tau, tHigh/tau)
	a, b := math.Exp(-tHigh/tau), math.Exp(-tLow/tau)
	vhi := p.SupplyV * (1 - ga*(-math.Expm1(-tLow/tau))/(1-a*b))
	return race{vdd: p.SupplyV, tau: tau, tr: tr, vhi: vhi}
}

// src returns CK's open-circuit voltage t after its falling ramp began.
func (r race) src(t float64) float64 {
	if t >= r.tr {
		return 0
	}
	return r.vdd * (1 - t/r.tr)
}

// node returns the sense node's voltage t after CK's falling ramp began: the
// RC response to the ramp, τ·dv/dt = src − v from v(0) = v_hi. During the
// ramp v = V_DD − (V_DD/t_r)·(t − τ) + (v_hi − V_DD − V_DD·τ/t_r)·e^(−t/τ);
// after it v = (v_hi − V_DD)·e^(−t/τ) + V_DD·e^(−t/τ)·(e^(t_r/τ) − 1)/(t_r/τ),
// i.e. a step at the ramp's midpoint to first order.
func (r race) node(t float64) float64 {
	if t >= r.tr {
		return (r.vhi-r.vdd)*math.Exp(-t/r.tau) + r.vdd*decayGain(r.tr/r.tau, t/r.tau)
	}
	return r.vdd - r.vdd/r.tr*(t-r.tau) + (r.vhi-r.vdd-r.vdd*r.tau/r.tr)*math.Exp(-t/r.tau)
}

// crossing returns when CK's pin crosses vt on its falling edge. The pin
// sits behind the buffer's output resistance, loaded by R_s and the sense
// node: pin = src − ρ·(src − v_node) with ρ = R_g/(R_g + R_s), so a loaded
// pin crosses later than the open-circuit ramp's (1 − θ)·t_r.
func (r race) crossing(rho, vt float64) float64 {
	pin := func(t float64) float64 { s := r.src(t); return s - rho*(s-r.node(t)) }
	if pin(0) <= vt {
		return 0
	}
	if r.tr > 0 && pin(r.tr) <= vt {
		// Safeguarded Newton on the smooth, falling pin voltage, from the
		// unloaded crossing; bisection whenever a step leaves the bracket.
		lo, hi := 0.0, r.tr // pin(lo) > vt ≥ pin(hi)
		t := math.Min(r.tr*(1-vt/r.vdd), r.tr)
		for range 100 {
			f := pin(t) - vt
			if f > 0 {
				lo = t
			} else {
				hi = t
			}
			slope := -(1-rho)*r.vdd/r.tr + rho*(r.src(t)-r.node(t))/r.tau
			next := t - f/slope
			if !(next > lo && next < hi) {
				next = (lo + hi) / 2
			}
			if math.Abs(next-t) <= 1e-12*r.tr || hi-lo <= 1e-12*r.tr {
				return next
			}
			t = next
		}
		return t
	}
	// After the ramp the pin is ρ·v_node, a pure decay: solve in closed form.
	t0 := r.tr
	return t0 + r.tau*math.Log(rho*r.node(t0)/vt)
}

// VHi returns the voltage of the sense node when CK's falling edge begins,
// in the periodic steady state, with cExtPF of external capacitance at the
// pad. For τ much shorter than the half periods it is V_DD; in general it is
// lower.
func VHi(p Point, cExtPF float64) float64 {
	tH, tL, _ := Oscillator(p)
	return newRace(p, tH, tL, tauS(p, cExtPF)).vhi
}

// RaceS returns the race's length t_d − t_su in seconds: from the moment
// CK's edge crosses the clock path's input threshold to the moment the
// flip-flop effectively samples D.
func RaceS(p Point) float64 { return (p.DelayNS - p.SetupNS) * 1e-9 }

// SampleInstant returns the moment, in seconds after CK's falling edge
// begins, at which the flip-flop effectively samples D when the buffer's pin
// is unloaded: the ramp's crossing of θ·V_DD, (1 − θ)·t_r, plus the race
// t_d − t_su. With an output resistance the loaded pin crosses a little later
// (TripPF accounts for that); with an ideal step it is t_d − t_su.
func SampleInstant(p Point) float64 {
	return (1-p.ThresholdFrac)*rampS(p) + RaceS(p)
}

// TripPF returns the external capacitance at the pad, in pF, at which the
// unit trips: the sense node, decaying from v_hi through R_s + R_g as CK
// ramps down, is exactly at V_T = θ·V_DD at the sample instant (CK's pin
// crossing θ·V_DD plus t_d − t_su). With ideal gates this is
// C_ext,trip = t_s/(R_s·ln(v_hi/V_T)) − C_in − C_pad. Because v_hi (and,
// with an output resistance, the pin's crossing) depends on τ the equation
// is implicit: TripPF finds the smallest τ at which the node is at V_T when
// sampled (the first capacitance at which the unit trips) by a geometric scan
// up from a τ far too short to trip, then bisection to 1e-13 relative. The
// result may be negative: such a unit trips with nothing at the pad. It
// returns an error wrapping ErrNoTrip when no capacitance trips the unit, and
// ErrCircuit for a non-physical point.
func TripPF(p Point) (float64, error) {
	race := RaceS(p)
	vt := p.ThresholdFrac * p.SupplyV
	if race <= 0 {
		// The flip-flop samples before the sense node starts to fall: it
		// reads v_hi > V_T whatever the pad carries.
		return 0, fmt.Errorf("%w: race %.3g ns ≤ 0 (setup ≥ delay): the flip-flop samples before the sense node can fall", ErrNoTrip, race*1e9)
	}
	if !(race > 0) || !(p.SenseROhm > 0) || !(vt > 0) || !(p.SupplyV > 0) || p.GateROhm < 0 || p.EdgeNS < 0 {
		return 0, fmt.Errorf("%w: need t_d − t_su, R_s, V_T and V_DD > 0, R_g and edge ≥ 0", ErrCircuit)
	}
	tH, tL, _ := Oscillator(p)
	if !(tH > 0) || !(tL > 0) {
		return 0, fmt.Errorf("%w: oscillator thresholds out of order", ErrCircuit)
	}
	if tr := rampS(p); tr >= math.Min(tH, tL) {
		return 0, fmt.Errorf("%w: clock edge ramp %.4g s is not shorter than the clock's half periods", ErrCircuit, tr)
	}
	if SampleInstant(p) >= tL {
		// The closed form assumes the node is still decaying when sampled.
		return 0, fmt.Errorf("%w: sample instant %.4g s falls after the clock's next rising edge (low half %.4g s)", ErrCircuit, SampleInstant(p), tL)
	}
	if p.SupplyV <= vt {
		return 0, fmt.Errorf("%w: V_T %.4g V ≥ V_DD %.4g V", ErrNoTrip, vt, p.SupplyV)
	}
	rho := p.GateROhm / (p.GateROhm + p.SenseROhm)
	// h(τ) > 0: the node is still above V_T when sampled (the latch sets).
	h := func(tau float64) float64 {
		r := newRace(p, tH, tL, tau)
		ts := r.crossing(rho, vt) + race
		if ts >= tL {
			return math.Inf(-1) // sampled after the next rising edge: treat as no trip
		}
		return r.node(ts) - vt
	}
	rTot := p.SenseROhm + p.GateROhm
	toPF := func(tau float64) float64 { return tau/rTot*1e12 - p.InputPF - p.PadPF }
	tau, err := smallestRoot(h, race/64, SampleInstant(p)/math.Log(p.SupplyV/vt), 1e3*(tH+tL))
	if err != nil {
		return 0, fmt.Errorf("%w: the sense node's start voltage never stays above V_T %.4g V until the sample", err, vt)
	}
	return toPF(tau), nil
}

// smallestRoot returns the smallest τ in (floor, ceil] at which h changes
// from negative to ≥ 0, for h < 0 at floor. It brackets the root from guess
// by geometric steps (down while h ≥ 0, then up while h < 0, the step
// doubling each time), then closes the bracket by the Illinois variant of
// false position to 1e-13 relative. It returns ErrNoTrip when h stays
// negative up to ceil and ErrCircuit when h(floor) ≥ 0.
func smallestRoot(h func(float64) float64, floor, guess, ceil float64) (float64, error) {
	if h(floor) >= 0 {
		return 0, fmt.Errorf("%w: the node is above V_T even with no capacitance at all", ErrCircuit)
	}
	x := math.Max(guess, floor)
	fx := h(x)
	var lo, hi, flo, fhi float64
	if fx >= 0 {
		hi, fhi = x, fx
		for step := 1.01; ; step *= step {
			x = math.Max(hi/step, floor)
			fx = h(x)
			if fx < 0 {
				lo, flo = x, fx
				break
			}
			hi, fhi = x, fx
		}
	} else {
		lo, flo = x, fx
		for step := 1.01; ; step *= step {
			x = lo * step
			if x > ceil {
				return 0, ErrNoTrip
			}
			fx = h(x)
			if fx >= 0 {
				hi, fhi = x, fx
				break
			}
			lo, flo = x, fx
		}
	}
	// A finite-valued bracket for false position: −Inf (sampled after the
	// next rising edge) falls back to bisection.
	side := 0
	for range 200 {
		if hi-lo <= 1e-13*hi {
			break
		}
		m := (lo + hi) / 2
		if !math.IsInf(flo, 0) && !math.IsInf(fhi, 0) && fhi != flo {
			m = (lo*fhi - hi*flo) / (fhi - flo)
			if !(m > lo && m < hi) {
				m = (lo + hi) / 2
			}
		}
		fm := h(m)
		if fm < 0 {
			lo, flo = m, fm
			if side == -1 {
				fhi /= 2
			}
			side = -1
		} else {
			hi, fhi = m, fm
			if side == 1 {
				flo /= 2
			}
			side = 1
		}
		if fm == 0 {
			return m, nil
		}
	}
	return (lo + hi) / 2, nil
}
