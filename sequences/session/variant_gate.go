package session

import (
	"padline/sequences/timing"
)

// The gate inputs of a variant file: the optional `gate:` section (output
// resistance or output current at a stated voltage, and the clock edge time)
// and the optional `by_supply:` table that gives delay, setup, threshold and
// gate figures per supply voltage. Kept apart from variant.go so the keys
// can move with the rest of config loading.

// bySupplyKeys maps a `by_supply` row key to the timing input it sets.
// r_out_ohm and i_out_ma (with i_out_at_v) both set the gate resistance.
var bySupplyKeys = []struct{ key, input string }{
	{"delay_ns", "delay_ns"},
	{"setup_ns", "setup_ns"},
	{"threshold_frac", "threshold_frac"},
	{"r_out_ohm", "gate_r_ohm"},
	{"edge_ns", "edge_ns"},
}

// readGateR reads an output resistance at prefix: r_out_ohm, or i_out_ma
// with i_out_at_v (the voltage drop from the rail at which the current is
// stated). ok is false when neither is given.
func (d *doc) readGateR(prefix string) (v timing.Value, ok bool) {
	hasR, hasI := d.has(prefix+"r_out_ohm"), d.has(prefix+"i_out_ma")
	switch {
	case hasR && hasI:
		d.toleranced(prefix+"r_out_ohm", mayBeZero)
		d.toleranced(prefix+"i_out_ma", mustBePositive)
		d.lookup(prefix + "i_out_at_v")
		d.fail(prefix+"r_out_ohm", "give either r_out_ohm or i_out_ma with i_out_at_v, not both")
		return v, true
	case hasR:
		return d.toleranced(prefix+"r_out_ohm", mayBeZero), true
	case hasI:
		i := d.toleranced(prefix+"i_out_ma", mustBePositive)
		at := d.positive(prefix+"i_out_at_v", true, 0)
		if d.err != nil {
			return v, true
		}
		r, err := timing.GateROhmFromCurrent(i, at)
		if err != nil {
			d.fail(prefix+"i_out_ma", "%v", err)
		}
		return r, true
	}
	if d.has(prefix + "i_out_at_v") {
		d.lookup(prefix + "i_out_at_v")
		d.fail(prefix+"i_out_at_v", "needs i_out_ma beside it")
	}
	return v, false
}

// readGate reads the optional `gate:` section into c. Absent keys leave an
// ideal gate (no output resistance, an ideal step); `padline limits` says so.
func readGate(d *doc, c *timing.Circuit, tabled map[string]bool) {
	if !d.section("gate", false) {
		return
	}
	if r, ok := d.readGateR("gate."); ok {
		if tabled["gate_r_ohm"] {
			d.fail("gate.r_out_ohm", "also given in by_supply: give it in one place")
		}
		c.GateROhm = r
	}
	if d.has("gate.edge_ns") {
		if tabled["edge_ns"] {
			d.fail("gate.edge_ns", "also given in by_supply: give it in one place")
		}
		c.EdgeNS = d.toleranced("gate.edge_ns", mayBeZero)
	}
}

// readBySupply reads the optional `by_supply:` list into c.BySupply and
// returns the timing inputs it gives. Each row has supply_v and the same set
// of keys from bySupplyKeys; errors name the row, e.g. by_supply[1].delay_ns.
func readBySupply(d *doc, c *timing.Circuit) map[string]bool {
	tabled := map[string]bool{}
	if !d.has("by_supply") {
		d.lookup("by_supply")
		return tabled
	}
	rows := d.list("by_supply")
	if len(rows) == 0 {
		d.fail("by_supply", "want at least one row")
		return tabled
	}
	t := &timing.SupplyTable{Inputs: map[string][]timing.Value{}}
	var first []string
	for i, row := range rows {
		name := fmtIndex("by_supply", i)
		if _, isMap := row.(map[string]any); !isMap {
			d.fail(name, "want a row of keys (supply_v, delay_ns, ...), got %s", describeValue(row))
			return tabled
		}
		// Read the row as its own document so errors and unknown keys name it.
		sub := &doc{file: d.file, root: map[string]any{name: row}, known: map[string]bool{name: true}, open: map[string]bool{},
			kind: d.kind, allow: d.allow, warnings: d.warnings}
		p := name + "."
		t.SupplyV = append(t.SupplyV, sub.positive(p+"supply_v", true, 0))
		var got []string
		for _, k := range bySupplyKeys {
			var v timing.Value
			var ok bool
			switch k.input {
			case "gate_r_ohm":
				v, ok = sub.readGateR(p)
			case "threshold_frac":
				if ok = sub.has(p + k.key); ok {
					v = sub.toleranced(p+k.key, mustBeFraction)
				}
			case "delay_ns":
				if ok = sub.has(p + k.key); ok {
					v = sub.toleranced(p+k.key, mustBePositive)
				}
			default:
				if ok = sub.has(p + k.key); ok {
					v = sub.toleranced(p+k.key, mayBeZero)
				}
			}
			if ok {
				got = append(got, k.input)
				t.Inputs[k.input] = append(t.Inputs[k.input], v)
			}
		}
		if err := sub.finish(); err != nil && d.err == nil {
			d.err = err.(*ConfigError)
		}
		if i == 0 {
			first = got
			if len(got) == 0 && d.err == nil {
				d.fail(name, "gives no figure: want delay_ns, setup_ns, threshold_frac, r_out_ohm (or i_out_ma with i_out_at_v) or edge_ns")
			}
		} else if !equalStrings(got, first) && d.err == nil {
			d.fail(name, "must give the same keys as by_supply[0]")
		}
	}
	if d.err != nil {
		return tabled
	}
	for _, in := range first {
		tabled[in] = true
	}
	if err := t.Check(); err != nil {
		d.fail("by_supply", "%v", err)
		return tabled
	}
	c.BySupply = t
	return tabled
}

func equalStrings(a, b []string) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// tolerancedUnless reads a required toleranced key unless the supply table
// gives the input; then the key must be absent.
func (d *doc) tolerancedUnless(key, input string, kind rangeKind, tabled map[string]bool) timing.Value {
	if tabled[input] {
		if d.has(key) {
			d.lookup(key)
			d.fail(key, "also given in by_supply: give it in one place")
		}
		return timing.Value{}
	}
	return d.toleranced(key, kind)
}
