package timing

import (
	"fmt"
	"math"
	"slices"
	"sort"
)

// SupplyTable gives inputs that depend on the supply (propagation delay,
// input threshold, output resistance and edge time of 4000-series gates all
// do) as rows by supply voltage, in place of one value whatever the supply.
//
// Interpolation: linear in the supply between adjacent rows, applied to Min,
// Typ, Max and SD alike; exact at a row. A supply outside the first..last row
// is refused, never extrapolated. A table of one row states the figures at
// the one supply they were taken at, and is refused for any other supply.
type SupplyTable struct {
	// SupplyV lists the rows' supplies in volts, strictly increasing.
	SupplyV []float64
	// Inputs maps an input name (one of [InputNames] other than supply_v)
	// to its value at each row, one Value per row.
	Inputs map[string][]Value
}

// inputIndex returns the index of the named input, or −1.
func inputIndex(name string) int { return slices.Index(inputNames[:], name) }

// Check reports whether the table is well formed: at least one row, finite
// strictly increasing positive supplies, known input names other than
// supply_v, one well-formed Value per row with the same distribution in every
// row.
func (t *SupplyTable) Check() error {
	if len(t.SupplyV) == 0 {
		return fmt.Errorf("supply table has no rows")
	}
	for i, v := range t.SupplyV {
		if math.IsNaN(v) || math.IsInf(v, 0) || v <= 0 {
			return fmt.Errorf("supply table row %d: supply %g V must be a finite value > 0", i, v)
		}
		if i > 0 && v <= t.SupplyV[i-1] {
			return fmt.Errorf("supply table row %d: supply %g V must be above the previous row's %g V", i, v, t.SupplyV[i-1])
		}
	}
	if len(t.Inputs) == 0 {
		return fmt.Errorf("supply table gives no input")
	}
	for _, name := range t.names() {
		i := inputIndex(name)
		if i < 0 || i == inSupply {
			return fmt.Errorf("supply table: %q is not an input that can depend on the supply", name)
		}
		vs := t.Inputs[name]
		if len(vs) != len(t.SupplyV) {
			return fmt.Errorf("supply table: %s has %d values for %d rows", name, len(vs), len(t.SupplyV))
		}
		for r, v := range vs {
			if err := v.Check(); err != nil {
				return fmt.Errorf("supply table row %d (%g V): %s: %v", r, t.SupplyV[r], name, err)
			}
			if dist(v) != dist(vs[0]) || (v.SD > 0) != (vs[0].SD > 0) {
				return fmt.Errorf("supply table row %d (%g V): %s: every row must use the same distribution", r, t.SupplyV[r], name)
			}
		}
	}
	return nil
}

// dist returns v's distribution with the zero Dist spelled out.
func dist(v Value) Dist {
	if v.Dist == "" {
		return Normal
	}
	return v.Dist
}

// names returns the table's input names, sorted (for stable messages).
func (t *SupplyTable) names() []string {
	var ns []string
	for n := range t.Inputs {
		ns = append(ns, n)
	}
	sort.Strings(ns)
	return ns
}

// covers reports whether every supply of s lies inside the table.
func (t *SupplyTable) covers(s Value) error {
	first, last := t.SupplyV[0], t.SupplyV[len(t.SupplyV)-1]
	if s.Min < first || s.Max > last {
		if first == last {
			return fmt.Errorf("supply_v %g..%g V: the supply table holds figures at %g V only; add rows that bracket the supply range", s.Min, s.Max, first)
		}
		return fmt.Errorf("supply_v %g..%g V lies outside the supply table's %g..%g V; add a row (padline does not extrapolate)", s.Min, s.Max, first, last)
	}
	return nil
}

// At returns the named input's value at supply v, interpolated linearly
// between the rows around it. A supply outside the table is an error.
func (t *SupplyTable) At(name string, v float64) (Value, error) {
	vs, ok := t.Inputs[name]
	if !ok || len(vs) != len(t.SupplyV) || len(vs) == 0 {
		return Value{}, fmt.Errorf("supply table has no %s", name)
	}
	n := len(t.SupplyV)
	if v < t.SupplyV[0] || v > t.SupplyV[n-1] || math.IsNaN(v) {
		return Value{}, fmt.Errorf("%s: supply %g V lies outside the supply table's %g..%g V", name, v, t.SupplyV[0], t.SupplyV[n-1])
	}
	j := sort.SearchFloat64s(t.SupplyV, v) // first row ≥ v
	if t.SupplyV[j] == v {
		return vs[j], nil
	}
	a, b := vs[j-1], vs[j]
	f := (v - t.SupplyV[j-1]) / (t.SupplyV[j] - t.SupplyV[j-1])
	lerp := func(x, y float64) float64 { return x + f*(y-x) }
	return Value{Min: lerp(a.Min, b.Min), Typ: lerp(a.Typ, b.Typ), Max: lerp(a.Max, b.Max), Dist: a.Dist, SD: lerp(a.SD, b.SD)}, nil
}

// GateROhmFromCurrent derives a gate's output resistance from its output
// current iOutMA (mA) at a stated voltage drop atV (volts from the rail the
// output is driven to): R = atV/I. A toleranced current gives the resistance
// range atV/Max .. atV/Typ .. atV/Min (more current, less resistance); the
// distribution is kept, and an SD is carried over to first order
// (σ_R = atV·σ_I/I_typ²). JESD13-B states minimum output currents at stated
// output voltages, so the current's Min gives the resistance's upper bound.
func GateROhmFromCurrent(iOutMA Value, atV float64) (Value, error) {
	if err := iOutMA.Check(); err != nil {
		return Value{}, err
	}
	if !(iOutMA.Min > 0) {
		return Value{}, fmt.Errorf("output current must be > 0 mA, got min %g", iOutMA.Min)
	}
	if !(atV > 0) || math.IsInf(atV, 0) {
		return Value{}, fmt.Errorf("output voltage drop must be a finite value > 0 V, got %g", atV)
	}
	r := func(ma float64) float64 { return atV / (ma * 1e-3) }
	out := Value{Min: r(iOutMA.Max), Typ: r(iOutMA.Typ), Max: r(iOutMA.Min), Dist: iOutMA.Dist}
	if iOutMA.SD > 0 {
		out.SD = atV * iOutMA.SD * 1e-3 / (iOutMA.Typ * 1e-3 * iOutMA.Typ * 1e-3)
	}
	return out, nil
}

// AtSupply returns c with the supply table's inputs interpolated at supply v
// and the table removed: one value per input, as a circuit without a table
// states them. The supply input itself is kept as given.
func (c Circuit) AtSupply(v float64) (Circuit, error) {
	if c.BySupply == nil {
		return c, nil
	}
	vs, err := c.valuesAt(v)
	if err != nil {
		return c, err
	}
	out := c
	out.BySupply = nil
	out.DelayNS, out.SetupNS, out.ThresholdFrac = vs[inDelay], vs[inSetup], vs[inThreshold]
	out.GateROhm, out.EdgeNS = vs[inGateR], vs[inEdge]
	out.OscROhm, out.OscCF, out.VtPosFrac, out.VtNegFrac = vs[inOscR], vs[inOscC], vs[inVtPos], vs[inVtNeg]
	out.SenseROhm, out.PadPF, out.InputPF = vs[inSenseR], vs[inPad], vs[inInput]
	return out, nil
}
