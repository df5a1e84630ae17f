package timing

import (
	"fmt"
	"math"
	"math/rand/v2"
)

// Dist names the distribution a toleranced [Value] is drawn from in the
// Monte Carlo. Worst-case corners always use Min and Max whatever the Dist.
type Dist string

// The distributions a Value can be drawn from. The zero Dist means Normal.
const (
	// Normal is the default. Without an explicit SD the tolerance is taken as
	// 3σ on each side of Typ (a split normal when Typ is off centre:
	// σ_low = (Typ−Min)/3, σ_high = (Max−Typ)/3). With SD set, σ = SD on both
	// sides, centred on Typ; SD then describes the observed part spread while
	// Min and Max stay the guaranteed corners. Either way draws are truncated
	// to [Min, Max] (redrawn, so no probability piles up at the corners).
	Normal Dist = "normal"
	// Uniform draws evenly between Min and Max.
	Uniform Dist = "uniform"
	// Triangular draws from the triangle Min, Typ (mode), Max.
	Triangular Dist = "triangular"
)

// Value is one toleranced circuit input: the guaranteed range [Min, Max], the
// typical (nominal) value Typ, and how the Monte Carlo draws it.
type Value struct {
	Min, Typ, Max float64
	// Dist is the Monte Carlo distribution; "" means Normal.
	Dist Dist
	// SD, when > 0, is σ of a Normal draw (see Normal); 0 means tolerance = 3σ.
	SD float64
}

// Tol returns nom ± pct percent, normally distributed with the tolerance at 3σ.
func Tol(nom, pct float64) Value {
	d := math.Abs(nom) * pct / 100
	return Value{Min: nom - d, Typ: nom, Max: nom + d, Dist: Normal}
}

// Range returns the toleranced value min/typ/max, normally distributed with
// each side's tolerance at 3σ.
func Range(min, typ, max float64) Value {
	return Value{Min: min, Typ: typ, Max: max, Dist: Normal}
}

// Fixed returns a value without tolerance.
func Fixed(v float64) Value { return Value{Min: v, Typ: v, Max: v, Dist: Normal} }

// Check reports whether v is well formed: finite, Min ≤ Typ ≤ Max, a known
// Dist and SD ≥ 0.
func (v Value) Check() error {
	for _, x := range []float64{v.Min, v.Typ, v.Max, v.SD} {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return fmt.Errorf("value not finite")
		}
	}
	if v.Min > v.Typ || v.Typ > v.Max {
		return fmt.Errorf("need min ≤ typ ≤ max, got %g/%g/%g", v.Min, v.Typ, v.Max)
	}
	switch v.Dist {
	case "", Normal, Uniform, Triangular:
	default:
		return fmt.Errorf("unknown distribution %q", v.Dist)
	}
	if v.SD < 0 {
		return fmt.Errorf("negative sd %g", v.SD)
	}
	return nil
}

// toleranced reports whether v spans a range.
func (v Value) toleranced() bool { return v.Max > v.Min }

// Draw returns one Monte Carlo draw of v from r, always inside [Min, Max].
func (v Value) Draw(r *rand.Rand) float64 {
	if !v.toleranced() {
		return v.Typ
	}
	switch v.Dist {
	case Uniform:
		return v.Min + r.Float64()*(v.Max-v.Min)
	case Triangular:
		u := r.Float64()
		span := v.Max - v.Min
		f := (v.Typ - v.Min) / span
		if u < f {
			return v.Min + math.Sqrt(u*span*(v.Typ-v.Min))
		}
		return v.Max - math.Sqrt((1-u)*span*(v.Max-v.Typ))
	}
	sdLo, sdHi := v.SD, v.SD
	if v.SD == 0 {
		sdLo, sdHi = (v.Typ-v.Min)/3, (v.Max-v.Typ)/3
	}
	for range 64 {
		z := r.NormFloat64()
		var x float64
		switch {
		case v.SD > 0:
			x = v.Typ + z*v.SD
		case r.Float64()*(sdLo+sdHi) < sdLo: // split normal: pick the side by its area
			x = v.Typ - math.Abs(z)*sdLo
		default:
			x = v.Typ + math.Abs(z)*sdHi
		}
		if x >= v.Min && x <= v.Max {
			return x
		}
	}
	return math.Min(math.Max(v.Typ, v.Min), v.Max) // unreachable in practice
}
