package session

import (
	"context"
	"fmt"
	"regexp"

	"padline/sequences/timing"
	"padline/store"
)

// Variant is one product variant's file, parsed and validated: what the
// limits come from and what the plan runs.
type Variant struct {
	Name        string
	Description string
	// SerialPattern is the regular expression every serial of the variant
	// must match; Serial is it compiled.
	SerialPattern string
	Serial        *regexp.Regexp
	Circuit       timing.Circuit
	Spec          timing.Spec
	Plan          PlanSection
	// PanelSerial makes a panel site's serial from the panel label and the
	// site number (`panel_serial`, default DefaultPanelSerial).
	PanelSerial string
	// Source is where the file came from, its exact bytes and their sha256
	// (the config hash every run records).
	Source Source
	// Warnings are the values outside their plausible range that the file
	// accepts with allow_unusual, one line each naming file and key.
	Warnings []string
}

// PlanSection holds the optional `plan:` section of a variant file; every key has a
// default.
type PlanSection struct {
	// PowerSettleMS is the wait after unit power-up, ms (default 50).
	PowerSettleMS float64
	// IdlePeriods is how many clock periods the latch must stay 0 with no
	// rung closed (default 8).
	IdlePeriods int
	// ClockPeriods is how many periods the frequency measurement spans
	// (default 16).
	ClockPeriods int
	// ReleasePeriods is how many periods the latch must read 0 again after
	// the rungs open (default 8).
	ReleasePeriods int
	Search         PlanSearch
	Retest         PlanRetest
}

// PlanSearch tunes the trip search (`plan.search`).
type PlanSearch struct {
	// Strategy is "bracket" (default) or "staircase".
	Strategy string
	// SETargetPF is the standard error of the trip estimate to stop at, pF
	// (default 0.1).
	SETargetPF float64
	// MaxRefineSamples caps the latch samples spent refining (default 32).
	MaxRefineSamples int
	// SpreadLimitPF is the widest acceptable 10–90 % transition, pF; wider
	// gives trip_noisy (default 1.5).
	SpreadLimitPF float64
}

// PlanRetest says what happens after a fail (`plan.retest`).
type PlanRetest struct {
	// Max is how many times a serial may be tested again after its first
	// unit verdict, pass or fail (default 1; 0 = none).
	Max int
	// FlagPassAfterFail marks a unit that passes only on retest (default true).
	FlagPassAfterFail bool
}

// DefaultPlanSection returns the plan used for keys a variant file leaves out.
func DefaultPlanSection() PlanSection {
	return PlanSection{
		PowerSettleMS: 50, IdlePeriods: 8, ClockPeriods: 16, ReleasePeriods: 8,
		Search: PlanSearch{Strategy: "bracket", SETargetPF: 0.1, MaxRefineSamples: 32, SpreadLimitPF: 1.5},
		Retest: PlanRetest{Max: 1, FlagPassAfterFail: true},
	}
}

// LoadVariant resolves ref (a file path, or a built-in variant name) and
// parses it.
func LoadVariant(ref string) (*Variant, error) {
	src, err := openConfig(ref, "variants", "variant")
	if err != nil {
		return nil, err
	}
	return parseVariant(src)
}

// parseVariant parses and validates one variant file. Every problem is a
// one-line *ConfigError naming the file and the key.
func parseVariant(src Source) (*Variant, error) {
	d, err := parseDoc(src.Name, src.Raw)
	if err != nil {
		return nil, err
	}
	d.kind = "variant"
	d.readAllow()
	v := &Variant{Source: src}
	v.Name = d.name("name")
	v.Description = d.str("description", false)
	v.SerialPattern = d.str("serial_pattern", true)
	v.PanelSerial = readPanelSerial(d)
	if v.SerialPattern != "" {
		re, err := regexp.Compile(v.SerialPattern)
		if err != nil {
			d.fail("serial_pattern", "invalid regular expression: %v", err)
		}
		v.Serial = re
	}
	c := &v.Circuit
	tabled := readBySupply(d, c)
	c.SupplyV = d.toleranced("supply_v", mustBePositive)
	if d.section("oscillator", true) {
		c.OscROhm = d.toleranced("oscillator.r_ohm", mustBePositive)
		c.OscCF = d.toleranced("oscillator.c_f", mustBePositive)
		c.VtPosFrac = d.toleranced("oscillator.vt_pos_frac", mustBeFraction)
		c.VtNegFrac = d.toleranced("oscillator.vt_neg_frac", mustBeFraction)
		if d.err == nil && c.VtNegFrac.Max >= c.VtPosFrac.Min {
			d.fail("oscillator.vt_neg_frac", "max %g must be below oscillator.vt_pos_frac min %g", c.VtNegFrac.Max, c.VtPosFrac.Min)
		}
	}
	if d.section("sense", true) {
		c.SenseROhm = d.toleranced("sense.r_ohm", mustBePositive)
		c.PadPF = d.toleranced("sense.pad_pf", mustBePositive)
		c.InputPF = d.toleranced("sense.input_pf", mustBePositive)
	}
	// clock_path may be left out when by_supply gives both of its keys.
	if d.section("clock_path", !tabled["delay_ns"] || !tabled["setup_ns"]) {
		c.DelayNS = d.tolerancedUnless("clock_path.delay_ns", "delay_ns", mustBePositive, tabled)
		c.SetupNS = d.tolerancedUnless("clock_path.setup_ns", "setup_ns", mayBeZero, tabled)
		if d.err == nil && c.BySupply == nil && c.SetupNS.Typ >= c.DelayNS.Typ {
			d.fail("clock_path.setup_ns", "typ %g must be below clock_path.delay_ns typ %g: the nominal unit could never trip", c.SetupNS.Typ, c.DelayNS.Typ)
		}
	}
	c.ThresholdFrac = d.tolerancedUnless("threshold_frac", "threshold_frac", mustBeFraction, tabled)
	readGate(d, c, tabled)
	if d.section("spec", true) {
		v.Spec.NoTripAtPF = d.nonNegative("spec.no_trip_at_pf", true, 0)
		v.Spec.TripByPF = d.positive("spec.trip_by_pf", true, 0)
		if d.err == nil && v.Spec.NoTripAtPF >= v.Spec.TripByPF {
			d.fail("spec.no_trip_at_pf", "%g must be below spec.trip_by_pf %g", v.Spec.NoTripAtPF, v.Spec.TripByPF)
		}
	}
	v.Plan = readPlan(d)
	if err := d.finish(); err != nil {
		return nil, err
	}
	v.Warnings = *d.warnings
	// Anything the key-by-key checks missed (e.g. a corner where the sample
	// instant falls after the clock edge) is caught by the model itself.
	if err := v.Circuit.Validate(); err != nil {
		return nil, &ConfigError{File: src.Name, Msg: err.Error()}
	}
	return v, nil
}

// maxPlanPeriods bounds the clock periods one step samples: 10,000 periods
// take 25 s at the slowest good QM-205 clock (≈ 400 Hz, 'padline limits'),
// far beyond any plan that fits a production takt.
const maxPlanPeriods = 10000

// readPlan reads the optional plan section.
func readPlan(d *doc) PlanSection {
	p := DefaultPlanSection()
	if !d.section("plan", false) {
		return p
	}
	p.PowerSettleMS = d.atMost("plan.power_settle_ms", d.nonNegative("plan.power_settle_ms", false, p.PowerSettleMS), 60000)
	p.IdlePeriods = d.count("plan.idle_periods", 1, p.IdlePeriods)
	p.ClockPeriods = d.count("plan.clock_periods", 1, p.ClockPeriods)
	p.ReleasePeriods = d.count("plan.release_periods", 1, p.ReleasePeriods)
	for key, n := range map[string]int{"plan.idle_periods": p.IdlePeriods, "plan.clock_periods": p.ClockPeriods, "plan.release_periods": p.ReleasePeriods} {
		if n > maxPlanPeriods {
			d.fail(key, "%d clock periods: at most %d (a step of seconds per unit; more is a typo)", n, maxPlanPeriods)
		}
	}
	if d.section("plan.search", false) {
		s := &p.Search
		if d.has("plan.search.strategy") {
			s.Strategy = d.str("plan.search.strategy", true)
			if s.Strategy != "bracket" && s.Strategy != "staircase" {
				d.fail("plan.search.strategy", "must be bracket or staircase, got %q", s.Strategy)
			}
		} else {
			d.lookup("plan.search.strategy")
		}
		s.SETargetPF = d.positive("plan.search.se_target_pf", false, s.SETargetPF)
		s.MaxRefineSamples = d.count("plan.search.max_refine_samples", 1, s.MaxRefineSamples)
		s.SpreadLimitPF = d.positive("plan.search.spread_limit_pf", false, s.SpreadLimitPF)
	}
	if d.section("plan.retest", false) {
		p.Retest.Max = d.count("plan.retest.max", 0, p.Retest.Max)
		p.Retest.FlagPassAfterFail = d.boolean("plan.retest.flag_pass_after_fail", p.Retest.FlagPassAfterFail)
	}
	return p
}

// Limits runs the timing model on the variant.
func (v *Variant) Limits(opt timing.Options) (timing.Report, error) {
	rep, err := timing.Analyze(v.Circuit, v.Spec, opt)
	if err != nil {
		return rep, fmt.Errorf("variant %s: %w", v.Name, err)
	}
	return rep, nil
}

// StationLimits is the timing model's report as a station tests by it:
// timing.DefaultDraws draws, seed 1, guard band u. Every rig, the limits
// versions the shift log keeps, the station validation and the drift
// report take their limits from here, so that they agree.
func (v *Variant) StationLimits(u float64) (timing.Report, error) {
	return v.Limits(timing.Options{Draws: timing.DefaultDraws, Seed: 1, UncertaintyPF: u})
}

// ConfigSource is where VariantFor looks for a variant's latest
// configuration: a shift log (*store.DB) or the plant store.
type ConfigSource interface {
	ConfigHistory(ctx context.Context, variant string) ([]store.ConfigChange, error)
	Snapshot(ctx context.Context, variant, hash string) ([]byte, error)
}

var _ ConfigSource = (*store.DB)(nil)

// VariantFor finds the variant's configuration: a file when ref names
// one, else the latest configuration the shift log holds for that name (the
// limits the line judged against), else the built-in.
func VariantFor(ctx context.Context, db ConfigSource, ref string) (*Variant, string, error) {
	if isConfigPath(ref) {
		v, err := LoadVariant(ref)
		if err != nil {
			return nil, "", err
		}
		return v, "file " + ref, nil
	}
	if db != nil {
		hist, err := db.ConfigHistory(ctx, ref)
		if err != nil {
			return nil, "", err
		}
		if n := len(hist); n > 0 {
			last := hist[n-1]
			raw, err := db.Snapshot(ctx, ref, last.Hash)
			if err == nil {
				v, perr := parseVariant(newSource("shift log config "+shortHash(last.Hash), raw))
				if perr == nil {
					return v, fmt.Sprintf("the latest configuration logged, %s (first seen %s)",
						shortHash(last.Hash), last.FirstSeen.Local().Format("2006-01-02 15:04")), nil
				}
			}
		}
	}
	v, err := LoadVariant(ref)
	if err != nil {
		return nil, "", err
	}
	return v, v.Source.Name, nil
}

// shortHash is the first 12 hex digits of a config hash, as printed.
func shortHash(h string) string {
	if len(h) > 12 {
		return h[:12]
	}
	return h
}

// CheckSerial reports whether s is an acceptable serial of the variant; see
// CleanSerial, which also returns the trimmed serial to record.
func (v *Variant) CheckSerial(s string) error { return validSerial(v.Serial, s) }

// BuiltinVariants lists the names of the built-in variants.
func BuiltinVariants() []string { return builtinNames("variants") }

// BuiltinStations lists the names of the built-in stations.
func BuiltinStations() []string { return builtinNames("stations") }
