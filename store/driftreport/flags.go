package driftreport

import (
	"fmt"
	"math"
	"time"

	"padline/sequences/session"
	"padline/store"
)

// Tuning are the chart parameters as given on the command line; each
// counts only when the flag of its name was given.
type Tuning struct {
	Target, Sigma, K, H, Lambda, Width float64
	Station, Fixture, Lot              string
}

// Apply completes o from the command line: the tuning values whose flag
// changed reports as given, the filter with its times parsed against now,
// and the options checked.
func (o *Options) Apply(t Tuning, changed func(flag string) bool, now time.Time) error {
	if o.UncertaintyGiven = changed("uncertainty-pf"); !o.UncertaintyGiven {
		o.UncertaintyPF = session.DefaultUncertaintyPF
	}
	if !changed("lsl") {
		o.LSL = math.NaN()
	}
	if !changed("usl") {
		o.USL = math.NaN()
	}
	if changed("target") {
		o.Drift.Target, o.Drift.FixTarget = t.Target, true
	}
	for _, s := range []struct {
		name string
		val  float64
		dst  *float64
	}{{"sigma", t.Sigma, &o.Drift.Sigma}, {"k", t.K, &o.Drift.K}, {"h", t.H, &o.Drift.H}, {"lambda", t.Lambda, &o.Drift.Lambda}, {"width", t.Width, &o.Drift.Width}} {
		if !changed(s.name) {
			continue
		}
		if !(s.val > 0) || math.IsInf(s.val, 0) {
			return fmt.Errorf("drift: --%s must be a positive number, got %g", s.name, s.val)
		}
		*s.dst = s.val
	}
	if o.Drift.Lambda > 1 {
		return fmt.Errorf("drift: --lambda must be in (0, 1], got %g", o.Drift.Lambda)
	}
	o.OwnBaseline = changed("baseline") || changed("target") || changed("sigma")
	if o.Chart == "ewma" {
		o.Drift.L = o.Drift.Width
	}
	o.Filter = store.Filter{Station: t.Station, Fixture: t.Fixture, Lot: t.Lot}
	var err error
	if o.Filter.Since, err = store.ParseWhen(o.Since, now); err != nil {
		return fmt.Errorf("drift: --since: %w", err)
	}
	if o.Filter.Until, err = store.ParseWhen(o.Until, now); err != nil {
		return fmt.Errorf("drift: --until: %w", err)
	}
	return o.Check()
}
