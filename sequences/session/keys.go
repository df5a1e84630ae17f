package session

import (
	"fmt"
	"math"
	"regexp"
	"strconv"
	"strings"

	"padline/fixture/sim"
)

// Key is one key of a variant or station file. The table of them (Keys) is
// what the parser checks every number against and what 'padline help
// variant-file', 'padline help station-file' and docs/files.md print, so the
// reference cannot drift from the parser (a test walks both).
type Key struct {
	// File is "variant" or "station".
	File string
	// Name is the dotted key; a key inside a list's elements is written
	// list[].key. A list of numbers is one key whose range each element meets.
	Name string
	// Type is section, text, number, toleranced, count, true/false, list.
	Type string
	// Unit of a number ("" for counts and fractions).
	Unit string
	// Default is what an absent key means; "required" when it must be given.
	Default string
	// Meaning says what the key is, for the reference.
	Meaning string
	// Lo and Hi bound a plausible value (numbers only); a value outside is
	// an error unless the file lists the key under allow_unusual. ZeroOK
	// accepts exactly 0 below Lo (0 means "none" or "ideal" there).
	Lo, Hi float64
	ZeroOK bool
	// Typ is a typical value, the target of the unit hint.
	Typ float64
	// Why names the source of the range.
	Why string
}

// numeric reports whether the key holds numbers with a plausible range.
func (k Key) numeric() bool { return k.Hi > 0 }

// Sources of the plausible ranges, named once.
const (
	srcJESD13     = "JEDEC JESD13-B, B-series CMOS: recommended supply 3–18 V"
	srcJESD13In   = "JEDEC JESD13-B input limits: V_IL 30 %, V_IH 70 % of V_DD; a Schmitt threshold within a tenth of a rail is no threshold"
	srcJESD13Out  = "JEDEC JESD13-B output current: 0.51 mA at 0.4 V from the rail at V_DD = 5 V (784 Ω); the figure is stated at a few tenths of a volt"
	srcRC         = "RC timing with 4000-series CMOS: the period is R·C·ln(…) (DEVELOPERS.md \"Physics\" 1); a clock of 100 Hz to 1 kHz (DEVELOPERS.md \"Simulator realism floor\") takes kilohms to megohms and picofarads to microfarads; below 1 kΩ the gate's own output resistance (784 Ω at 5 V from JESD13-B's 0.51 mA at 0.4 V) rules, above 100 MΩ board and input leakage"
	srcPadPF      = "a fingertip through a 1 mm cover adds about 1 pF (parallel plate, C = ε0·εr·A/d) and the body model of ANSI/ESDA/JEDEC JS-001 is 100 pF: a pad, an input and a touch lie between 0.5 and 100 pF"
	srcTouchPF    = "touch thresholds lie between a fingertip's ~1 pF (parallel plate) and a body's 100–200 pF to earth (JS-001 body model 100 pF); the station ladder reaches at most 1,000 pF"
	srcDelay      = "4000-series gate delays are tens to hundreds of ns (DEVELOPERS.md \"Physics\" 3); a delay past the half period of a 100 Hz clock (5 ms, DEVELOPERS.md \"Simulator realism floor\") never samples the race"
	srcPeriods    = "each clock period is 1–10 ms (100 Hz–1 kHz, DEVELOPERS.md \"Simulator realism floor\"): 1,000 periods take 1–10 s, a whole takt"
	srcSettle     = "a unit's supply settles in micro- to milliseconds; 10 s per unit is no production takt"
	srcLadderPF   = "a touch-pad ladder's rungs and stray are tenths to tens of pF (DEVELOPERS.md \"Simulator realism floor\": 0.5…64 pF, stray 3–6 pF); 1,000 pF is past any touch"
	srcRelay      = "reed relays operate in about 0.5 ms (DEVELOPERS.md \"Simulator realism floor\"), armature relays in 5–15 ms; 100 ms is no relay"
	srcRelayLife  = "reed relays are rated about 1e9 operations (DEVELOPERS.md \"Simulator realism floor\"), armature relays 1e5–1e7"
	srcGUM        = "GUM (JCGM 100:2008) §4.3.7: the demo ladder's 0.5 pF step alone gives U = 0.3 pF (DEVELOPERS.md \"Physics\", Limits); a U of several pF swallows a 10…60 pF test window"
	srcAutoU      = "a study moves U by hundredths of a pF (the GUM budget's repeatability term, DEVELOPERS.md \"Simulator realism floor\"); a bound past half a pF would let a changed station pass its limits unseen"
	srcCal        = "an LCR meter reads a tens-of-pF rung to hundredths of a pF (default 0.05 pF, DEVELOPERS.md \"Simulator realism floor\"); a rung known only to ±0.5 pF is not calibrated"
	srcDev        = "a check allows for the station's repeatability, hundredths to tenths of a pF (DEVELOPERS.md \"Simulator realism floor\"); past a touch's 100 pF (JS-001 body model) it checks nothing ('padline station validate' also holds it to the variant's window)"
	srcSchedule   = "a check per shift (8 h) to one a week (168 h); beyond 30 days the check proves nothing about today"
	srcSearch     = "the trip transition is 0.4–0.9 pF wide (DEVELOPERS.md \"Simulator realism floor\"): targets of thousandths to a few pF"
	srcSim        = "the simulator's realism floor (DEVELOPERS.md \"Simulator realism floor\") times and divided by about a hundred"
	srcProbabilty = "a probability"
	srcCount      = "a count of that size is a typo"
)

// KeyTable lists every key of both file kinds, in the order of the reference.
func KeyTable() []Key { return keyTable }

var keyTable = buildKeyTable()

func buildKeyTable() []Key {
	v := func(k Key) Key { k.File = "variant"; return k }
	s := func(k Key) Key { k.File = "station"; return k }
	plan := DefaultPlanSection()
	um, fm := sim.DefaultUnitModel(), sim.DefaultFixtureModel()
	g := func(f float64) string { return strconv.FormatFloat(f, 'g', -1, 64) }
	allow := "list of keys of this file whose value is outside the plausible range on purpose: each is then a warning, not an error"
	keys := []Key{
		v(Key{Name: "name", Type: "text", Default: "required", Meaning: "the variant's name (at most 64 bytes), on every banner and history line"}),
		v(Key{Name: "description", Type: "text", Default: "none", Meaning: "one line about the variant"}),
		v(Key{Name: "serial_pattern", Type: "text", Default: "required", Meaning: "regular expression every serial of the variant must match, e.g. '^QM205-[0-9]{6}$'"}),
		v(Key{Name: "panel_serial", Type: "text", Default: DefaultPanelSerial, Meaning: "a panel site's serial from the panel label: {panel} and {site} (or {site:02})"}),
		v(Key{Name: "allow_unusual", Type: "list", Default: "none", Meaning: allow}),
		v(Key{Name: "supply_v", Type: "toleranced", Unit: "V", Default: "required", Meaning: "the unit's supply voltage V_DD", Lo: 3, Hi: 18, Typ: 5, Why: srcJESD13}),
		v(Key{Name: "oscillator", Type: "section", Default: "required", Meaning: "the Schmitt-inverter RC clock oscillator"}),
		v(Key{Name: "oscillator.r_ohm", Type: "toleranced", Unit: "Ω", Default: "required", Meaning: "feedback resistor R_o", Lo: 1e3, Hi: 100e6, Typ: 22e3, Why: srcRC}),
		v(Key{Name: "oscillator.c_f", Type: "toleranced", Unit: "F", Default: "required", Meaning: "timing capacitor C_o (100 nF is 100.0e-9)", Lo: 1e-12, Hi: 1e-5, Typ: 100e-9, Why: srcRC}),
		v(Key{Name: "oscillator.vt_pos_frac", Type: "toleranced", Default: "required", Meaning: "Schmitt upper threshold V_P as a fraction of V_DD", Lo: 0.1, Hi: 0.9, Typ: 0.62, Why: srcJESD13In}),
		v(Key{Name: "oscillator.vt_neg_frac", Type: "toleranced", Default: "required", Meaning: "Schmitt lower threshold V_N as a fraction of V_DD (below vt_pos_frac)", Lo: 0.1, Hi: 0.9, Typ: 0.38, Why: srcJESD13In}),
		v(Key{Name: "sense", Type: "section", Default: "required", Meaning: "the sense path from the clock to the flip-flop's D input"}),
		v(Key{Name: "sense.r_ohm", Type: "toleranced", Unit: "Ω", Default: "required", Meaning: "sense resistor R_s", Lo: 1e3, Hi: 100e6, Typ: 100e3, Why: srcRC}),
		v(Key{Name: "sense.pad_pf", Type: "toleranced", Unit: "pF", Default: "required", Meaning: "the sense pad's own capacitance C_pad", Lo: 0.5, Hi: 100, Typ: 8, Why: srcPadPF}),
		v(Key{Name: "sense.input_pf", Type: "toleranced", Unit: "pF", Default: "required", Meaning: "the D input's capacitance C_in", Lo: 0.5, Hi: 100, Typ: 5, Why: srcPadPF}),
		v(Key{Name: "clock_path", Type: "section", Default: "required unless by_supply gives both keys", Meaning: "the delayed clock to the flip-flop"}),
		v(Key{Name: "clock_path.delay_ns", Type: "toleranced", Unit: "ns", Default: "required unless in by_supply", Meaning: "clock delay t_pd from the oscillator edge to the flip-flop clock", Lo: 1, Hi: 5e6, Typ: 100, Why: srcDelay}),
		v(Key{Name: "clock_path.setup_ns", Type: "toleranced", Unit: "ns", Default: "required unless in by_supply", Meaning: "flip-flop setup time t_su (below delay_ns)", Lo: 0.1, Hi: 5e6, ZeroOK: true, Typ: 40, Why: srcDelay}),
		v(Key{Name: "threshold_frac", Type: "toleranced", Default: "required unless in by_supply", Meaning: "D-input threshold θ as a fraction of V_DD", Lo: 0.1, Hi: 0.9, Typ: 0.5, Why: srcJESD13In}),
		v(Key{Name: "gate", Type: "section", Default: "an ideal gate", Meaning: "output resistance of the oscillator and clock gates, and the clock edge"}),
		v(Key{Name: "gate.r_out_ohm", Type: "toleranced", Unit: "Ω", Default: "0", Meaning: "gate output resistance, in series with R_o and R_s (or give i_out_ma)", Lo: 1, Hi: 100e3, ZeroOK: true, Typ: 784, Why: srcJESD13Out}),
		v(Key{Name: "gate.i_out_ma", Type: "toleranced", Unit: "mA", Default: "none", Meaning: "gate output current at i_out_at_v from the rail, instead of r_out_ohm", Lo: 0.01, Hi: 100, Typ: 1, Why: srcJESD13Out}),
		v(Key{Name: "gate.i_out_at_v", Type: "number", Unit: "V", Default: "required with i_out_ma", Meaning: "the drop from the rail at which i_out_ma is stated", Lo: 0.05, Hi: 18, Typ: 0.4, Why: srcJESD13Out}),
		v(Key{Name: "gate.edge_ns", Type: "toleranced", Unit: "ns", Default: "0 (a step)", Meaning: "the clock edge's 10–90 % time", Lo: 0.1, Hi: 5e6, ZeroOK: true, Typ: 100, Why: srcDelay}),
		v(Key{Name: "by_supply", Type: "list", Default: "none", Meaning: "rows of figures by supply voltage, each with supply_v and the same keys; interpolated at the unit's supply"}),
		v(Key{Name: "by_supply[].supply_v", Type: "number", Unit: "V", Default: "required", Meaning: "the row's supply voltage", Lo: 3, Hi: 18, Typ: 5, Why: srcJESD13}),
		v(Key{Name: "by_supply[].delay_ns", Type: "toleranced", Unit: "ns", Default: "none", Meaning: "clock_path.delay_ns at this supply", Lo: 1, Hi: 5e6, Typ: 100, Why: srcDelay}),
		v(Key{Name: "by_supply[].setup_ns", Type: "toleranced", Unit: "ns", Default: "none", Meaning: "clock_path.setup_ns at this supply", Lo: 0.1, Hi: 5e6, ZeroOK: true, Typ: 40, Why: srcDelay}),
		v(Key{Name: "by_supply[].threshold_frac", Type: "toleranced", Default: "none", Meaning: "threshold_frac at this supply", Lo: 0.1, Hi: 0.9, Typ: 0.5, Why: srcJESD13In}),
		v(Key{Name: "by_supply[].r_out_ohm", Type: "toleranced", Unit: "Ω", Default: "none", Meaning: "gate.r_out_ohm at this supply", Lo: 1, Hi: 100e3, ZeroOK: true, Typ: 784, Why: srcJESD13Out}),
		v(Key{Name: "by_supply[].i_out_ma", Type: "toleranced", Unit: "mA", Default: "none", Meaning: "gate.i_out_ma at this supply", Lo: 0.01, Hi: 100, Typ: 1, Why: srcJESD13Out}),
		v(Key{Name: "by_supply[].i_out_at_v", Type: "number", Unit: "V", Default: "required with i_out_ma", Meaning: "gate.i_out_at_v at this supply", Lo: 0.05, Hi: 18, Typ: 0.4, Why: srcJESD13Out}),
		v(Key{Name: "by_supply[].edge_ns", Type: "toleranced", Unit: "ns", Default: "none", Meaning: "gate.edge_ns at this supply", Lo: 0.1, Hi: 5e6, ZeroOK: true, Typ: 100, Why: srcDelay}),
		v(Key{Name: "spec", Type: "section", Default: "required", Meaning: "the product specification the limits come from"}),
		v(Key{Name: "spec.no_trip_at_pf", Type: "number", Unit: "pF", Default: "required", Meaning: "a unit must not trip at this added capacitance", Lo: 0.1, Hi: 1000, ZeroOK: true, Typ: 10, Why: srcTouchPF}),
		v(Key{Name: "spec.trip_by_pf", Type: "number", Unit: "pF", Default: "required", Meaning: "a unit must have tripped by this added capacitance (above no_trip_at_pf)", Lo: 0.5, Hi: 1000, Typ: 60, Why: srcTouchPF}),
		v(Key{Name: "plan", Type: "section", Default: "every key's default", Meaning: "how the station tests a unit of this variant"}),
		v(Key{Name: "plan.power_settle_ms", Type: "number", Unit: "ms", Default: g(plan.PowerSettleMS), Meaning: "wait after unit power-up", Lo: 0.1, Hi: 10000, ZeroOK: true, Typ: 50, Why: srcSettle}),
		v(Key{Name: "plan.idle_periods", Type: "count", Default: strconv.Itoa(plan.IdlePeriods), Meaning: "clock periods the latch must stay 0 with no rung closed", Lo: 1, Hi: 1000, Typ: 8, Why: srcPeriods}),
		v(Key{Name: "plan.clock_periods", Type: "count", Default: strconv.Itoa(plan.ClockPeriods), Meaning: "clock periods the frequency measurement spans", Lo: 1, Hi: 1000, Typ: 16, Why: srcPeriods}),
		v(Key{Name: "plan.release_periods", Type: "count", Default: strconv.Itoa(plan.ReleasePeriods), Meaning: "clock periods the latch must read 0 again after the rungs open", Lo: 1, Hi: 1000, Typ: 8, Why: srcPeriods}),
		v(Key{Name: "plan.search", Type: "section", Default: "every key's default", Meaning: "the trip search"}),
		v(Key{Name: "plan.search.strategy", Type: "text", Default: plan.Search.Strategy, Meaning: "bracket or staircase"}),
		v(Key{Name: "plan.search.se_target_pf", Type: "number", Unit: "pF", Default: g(plan.Search.SETargetPF), Meaning: "standard error of the trip estimate to stop at", Lo: 0.001, Hi: 5, Typ: 0.1, Why: srcSearch}),
		v(Key{Name: "plan.search.max_refine_samples", Type: "count", Default: strconv.Itoa(plan.Search.MaxRefineSamples), Meaning: "most latch samples spent refining", Lo: 1, Hi: 10000, Typ: 32, Why: srcCount}),
		v(Key{Name: "plan.search.spread_limit_pf", Type: "number", Unit: "pF", Default: g(plan.Search.SpreadLimitPF), Meaning: "widest acceptable 10–90 % transition; wider gives trip_noisy", Lo: 0.01, Hi: 50, Typ: 1.5, Why: srcSearch}),
		v(Key{Name: "plan.retest", Type: "section", Default: "every key's default", Meaning: "what happens after a fail"}),
		v(Key{Name: "plan.retest.max", Type: "count", Default: strconv.Itoa(plan.Retest.Max), Meaning: "how often a serial may be tested again after its first verdict (0: never)", Lo: 0, Hi: 10, ZeroOK: true, Typ: 1, Why: srcCount}),
		v(Key{Name: "plan.retest.flag_pass_after_fail", Type: "true/false", Default: strconv.FormatBool(plan.Retest.FlagPassAfterFail), Meaning: "mark a unit that passes only on retest"}),

		s(Key{Name: "name", Type: "text", Default: "required", Meaning: "the station's name (at most 64 bytes), e.g. L2-S1: what history --station-id filters by"}),
		s(Key{Name: "fixture", Type: "text", Default: "required", Meaning: "the fixture's name, e.g. FX-07"}),
		s(Key{Name: "driver", Type: "text", Default: "required", Meaning: "sim (the built-in simulated line) or gpio (real GPIO lines, opened by name)"}),
		s(Key{Name: "shift_log", Type: "text", Default: "required", Meaning: "the SQLite shift log file (--db and $PADLINE_DB override it)"}),
		s(Key{Name: "allow_unusual", Type: "list", Default: "none", Meaning: allow}),
		s(Key{Name: "pins", Type: "section", Default: "required", Meaning: "the GPIO line name of each fixture pin"}),
		s(Key{Name: "pins.latch", Type: "text", Default: "required (panels: per site)", Meaning: "the unit's latch output (in)"}),
		s(Key{Name: "pins.power", Type: "text", Default: "required (panels: per site or shared)", Meaning: "unit power switch (out)"}),
		s(Key{Name: "pins.clock", Type: "text", Default: "not wired", Meaning: "the unit's clock (in), for the frequency measurement"}),
		s(Key{Name: "pins.lid", Type: "text", Default: "required", Meaning: "the lid switch (in); power needs the lid closed"}),
		s(Key{Name: "pins.pass_lamp", Type: "text", Default: "not wired", Meaning: "pass lamp (out)"}),
		s(Key{Name: "pins.fail_lamp", Type: "text", Default: "not wired", Meaning: "fail lamp (out)"}),
		s(Key{Name: "pins.ladder", Type: "list", Default: "required", Meaning: "one relay pin per rung, in the order of ladder.rungs_pf"}),
		s(Key{Name: "ladder", Type: "section", Default: "required", Meaning: "the calibrated reference-capacitor ladder"}),
		s(Key{Name: "ladder.rungs_pf", Type: "list of numbers", Unit: "pF", Default: "required", Meaning: "each rung's capacitance as measured, relay closed minus open (1 to 12 rungs)", Lo: 0.1, Hi: maxPlausiblePF, Typ: 8, Why: srcLadderPF}),
		s(Key{Name: "ladder.stray_pf", Type: "number", Unit: "pF", Default: "required", Meaning: "calibrated stray at the pad with every relay open", Lo: 0.1, Hi: maxPlausiblePF, ZeroOK: true, Typ: 4.6, Why: srcLadderPF}),
		s(Key{Name: "ladder.operate_ms", Type: "number", Unit: "ms", Default: "required", Meaning: "relay operate time", Lo: 0.01, Hi: 100, Typ: 0.5, Why: srcRelay}),
		s(Key{Name: "ladder.bounce_ms", Type: "number", Unit: "ms", Default: "required", Meaning: "relay contact bounce", Lo: 0.01, Hi: 100, ZeroOK: true, Typ: 0.5, Why: srcRelay}),
		s(Key{Name: "ladder.rated_operations", Type: "number", Default: "required", Meaning: "the relays' rated life in operations ('padline station status' counts against it)", Lo: 1e3, Hi: 1e11, Typ: 1e9, Why: srcRelayLife}),
		s(Key{Name: "ladder.cal_uncertainty_pf", Type: "number", Unit: "pF", Default: g(defaultCalUncertaintyPF), Meaning: "one rung's calibration standard uncertainty (the LCR meter's), for the GUM budget", Lo: 0.001, Hi: 0.5, Typ: 0.05, Why: srcCal}),
		s(Key{Name: "uncertainty_pf", Type: "number", Unit: "pF", Default: fmt.Sprintf("the station's study, else the %g pF stand-in", DefaultUncertaintyPF), Meaning: "the station's expanded uncertainty U (k = 2): each test limit is pulled in by U", Lo: 0.01, Hi: 5, Typ: 0.3, Why: srcGUM}),
		s(Key{Name: "auto_approve_u_pf", Type: "number", Unit: "pF", Default: "0 (every limits change waits for 'padline limits approve')", Meaning: "a new limits version whose only change is U, by at most this much, approves itself (README \"Approving limits\")", Lo: 0.001, Hi: 0.5, ZeroOK: true, Typ: 0.05, Why: srcAutoU}),
		s(Key{Name: "reference_units", Type: "list", Default: "none ('padline run' refuses until a check passes)", Meaning: "the kept reference units, {serial, trip_pf, allowed_dev_pf, lab_trip_pf, lab_u_pf, sim_defects}"}),
		s(Key{Name: "reference_units[].serial", Type: "text", Default: "required", Meaning: "the reference unit's serial"}),
		s(Key{Name: "reference_units[].trip_pf", Type: "number", Unit: "pF", Default: "required", Meaning: "the trip point this station measured for it", Lo: 0.5, Hi: maxPlausiblePF, Typ: 30, Why: srcTouchPF}),
		s(Key{Name: "reference_units[].allowed_dev_pf", Type: "number", Unit: "pF", Default: "required", Meaning: "the allowed deviation of a check's trip from trip_pf", Lo: 0.01, Hi: 100, Typ: 0.3, Why: srcDev}),
		s(Key{Name: "reference_units[].lab_trip_pf", Type: "number", Unit: "pF", Default: "none (trip points are not corrected for the fixture)", Meaning: "the unit's trip point as capacitance at the pad, measured against a calibrated capacitance standard: a passing check then measures the fixture's offset, and every trip point is corrected by it until the next check", Lo: 0.5, Hi: maxPlausiblePF, Typ: 30, Why: srcTouchPF}),
		s(Key{Name: "reference_units[].lab_u_pf", Type: "number", Unit: "pF", Default: "required with lab_trip_pf", Meaning: "the standard uncertainty of lab_trip_pf", Lo: 0.001, Hi: 0.5, Typ: 0.02, Why: srcCal}),
		s(Key{Name: "reference_units[].sim_defects", Type: "list", Default: "none", Meaning: "driver sim: the simulator defects the unit is built with, e.g. [slow_gate]"}),
		s(Key{Name: "check_every_units", Type: "count", Default: "0 (no limit)", Meaning: "a new reference check after this many production units", Lo: 1, Hi: 1e6, Typ: 2000, Why: srcCount}),
		s(Key{Name: "check_every_hours", Type: "number", Unit: "h", Default: "0 (no limit)", Meaning: "a new reference check after this many hours (at most 720)", Lo: 0.25, Hi: 168, Typ: 8, Why: srcSchedule}),
		s(Key{Name: "relay_warn_fraction", Type: "number", Default: g(defaultRelayWarnFraction), Meaning: "fraction of rated relay life at which status and run warn", Lo: 0.1, Hi: 1, Typ: 0.8, Why: srcProbabilty}),
		s(Key{Name: "badges", Type: "section", Default: "no badges", Meaning: "scans that set the lot or operator instead of testing a unit"}),
		s(Key{Name: "badges.lot_prefix", Type: "text", Default: "none", Meaning: "a scan starting with it sets the lot"}),
		s(Key{Name: "badges.operator_prefix", Type: "text", Default: "none", Meaning: "a scan starting with it sets the operator"}),
		s(Key{Name: "plant", Type: "section", Default: "no plant store", Meaning: "the plant store this station forwards its runs to"}),
		s(Key{Name: "plant.url", Type: "text", Default: "required in plant", Meaning: "postgres://ROLE@HOST/DB"}),
		s(Key{Name: "sim", Type: "section", Default: "the simulator's defaults", Meaning: "driver sim: how the simulated line differs from the realism floor"}),
		s(Key{Name: "sim.seed", Type: "count", Default: "1", Meaning: "the simulator's random seed", Lo: 0, Hi: 1e9, ZeroOK: true, Typ: 1, Why: "any seed"}),
		s(Key{Name: "sim.noise_mv_at_5v", Type: "number", Unit: "mV", Default: g(um.Noise.CompareMVAt5V), Meaning: "σ of the D-input comparison noise at 5 V", Lo: 0.1, Hi: 1000, ZeroOK: true, Typ: 10, Why: srcSim}),
		s(Key{Name: "sim.jitter_ns", Type: "number", Unit: "ns", Default: g(um.Noise.SampleJitterNs), Meaning: "σ of the sample instant", Lo: 0.01, Hi: 100, ZeroOK: true, Typ: 1, Why: srcSim}),
		s(Key{Name: "sim.period_jitter_pct", Type: "number", Unit: "%", Default: g(um.Noise.PeriodJitter * 100), Meaning: "σ of each unit clock period", Lo: 0.001, Hi: 20, ZeroOK: true, Typ: 0.2, Why: srcSim}),
		s(Key{Name: "sim.rung_err_sd_pf", Type: "number", Unit: "pF", Default: g(fm.RungErrSD), Meaning: "σ of a rung's true minus entered value", Lo: 0.0005, Hi: 5, ZeroOK: true, Typ: 0.05, Why: srcSim}),
		s(Key{Name: "sim.stray_err_sd_pf", Type: "number", Unit: "pF", Default: g(fm.StrayErrSD), Meaning: "σ of the stray's true minus entered value", Lo: 0.0005, Hi: 5, ZeroOK: true, Typ: 0.05, Why: srcSim}),
		s(Key{Name: "sim.open_contact_pf", Type: "number", Unit: "pF", Default: g(fm.OpenContactPF), Meaning: "capacitance across one open relay contact", Lo: 0.001, Hi: 10, ZeroOK: true, Typ: 0.1, Why: srcSim}),
		s(Key{Name: "sim.defect_rates", Type: "section", Default: "0.2–1 % each", Meaning: "per-unit defect probabilities by name: " + strings.Join(sim.DefectNames(), ", ")}),
		s(Key{Name: "sim.defect_rates.*", Type: "number", Default: "the simulator's", Meaning: "one defect's probability per unit", Lo: 1e-9, Hi: 1, ZeroOK: true, Typ: 0.005, Why: srcProbabilty}),
		s(Key{Name: "sim.faults", Type: "section", Default: "no faults", Meaning: "injected fixture faults"}),
		s(Key{Name: "sim.faults.rung_stuck_open", Type: "list", Default: "none", Meaning: "rung indexes (0-based) whose relay never closes"}),
		s(Key{Name: "sim.faults.rung_stuck_closed", Type: "list", Default: "none", Meaning: "rung indexes (0-based) whose relay never opens"}),
		s(Key{Name: "sim.faults.pad_pin_open", Type: "true/false", Default: "false", Meaning: "the pogo pin to the pad makes no contact"}),
		s(Key{Name: "sim.faults.latch_pin_open", Type: "true/false", Default: "false", Meaning: "the pogo pin to the latch makes no contact"}),
		s(Key{Name: "sim.faults.lid_open", Type: "true/false", Default: "false", Meaning: "the lid switch never closes"}),
		s(Key{Name: "sites", Type: "section", Default: "one unit per closure", Meaning: "a panel station: every board of a panel in one closure (README \"Panels\")"}),
		s(Key{Name: "sites.ladder", Type: "text", Default: "required", Meaning: "ganged (pins.ladder drives a multi-pole relay per rung) or own (each site its own rung pins)"}),
		s(Key{Name: "sites.power", Type: "text", Default: "shared", Meaning: "shared (pins.power) or per_site"}),
		s(Key{Name: "sites.serials", Type: "text", Default: "pattern", Meaning: "pattern (the variant's panel_serial) or scan (every site's label scanned)"}),
		s(Key{Name: "sites.sim_coupling_pf", Type: "number", Unit: "pF", Default: g(sim.DefaultCouplingPF), Meaning: "driver sim: coupling between adjacent pads", Lo: 0.001, Hi: 10, ZeroOK: true, Typ: 0.5, Why: srcSim}),
		s(Key{Name: "sites.list", Type: "list", Default: "required", Meaning: "the sites, site 1 first: {latch, clock, power, ladder, rungs_pf, stray_pf}"}),
		s(Key{Name: "sites.list[].latch", Type: "text", Default: "required", Meaning: "this site's latch pin"}),
		s(Key{Name: "sites.list[].clock", Type: "text", Default: "not wired", Meaning: "this site's clock pin"}),
		s(Key{Name: "sites.list[].power", Type: "text", Default: "required with sites.power: per_site", Meaning: "this site's power pin"}),
		s(Key{Name: "sites.list[].ladder", Type: "list", Default: "required with sites.ladder: own", Meaning: "this site's own rung pins"}),
		s(Key{Name: "sites.list[].rungs_pf", Type: "list of numbers", Unit: "pF", Default: "required", Meaning: "this site's calibrated value of every rung", Lo: 0.1, Hi: maxPlausiblePF, Typ: 8, Why: srcLadderPF}),
		s(Key{Name: "sites.list[].stray_pf", Type: "number", Unit: "pF", Default: "required", Meaning: "this site's calibrated stray", Lo: 0.1, Hi: maxPlausiblePF, ZeroOK: true, Typ: 4.6, Why: srcLadderPF}),
	}
	return keys
}

// keyIndex finds a key of file kind by its normalised name.
func keyIndex(kind, name string) (Key, bool) {
	for _, k := range keyTable {
		if k.File == kind && k.Name == name {
			return k, true
		}
	}
	return Key{}, false
}

var listIndex = regexp.MustCompile(`\[\d+\]`)

// normKey turns a key as reported (by_supply[1].delay_ns.min,
// sim.defect_rates.rs_high) into its name in the table.
func normKey(kind, key string) string {
	key = strings.TrimSuffix(listIndex.ReplaceAllString(key, "[]"), "[]")
	for _, suf := range []string{".nom", ".min", ".typ", ".max", ".tol_pct", ".dist", ".sd"} {
		if k, ok := keyIndex(kind, strings.TrimSuffix(key, suf)); ok && k.Type == "toleranced" {
			return k.Name
		}
	}
	if strings.HasPrefix(key, "sim.defect_rates.") {
		return "sim.defect_rates.*"
	}
	return key
}

// plausible checks a number read at key against the table: outside the
// plausible range it is an error naming the likely intended value, or a
// warning when the file lists the key under allow_unusual.
func (d *doc) plausible(key string, x float64) {
	if d.kind == "" || strings.HasSuffix(key, ".tol_pct") || strings.HasSuffix(key, ".sd") {
		return // a tolerance or σ is checked by toleranced itself
	}
	name := normKey(d.kind, key)
	k, ok := keyIndex(d.kind, name)
	if !ok || !k.numeric() || (x >= k.Lo && x <= k.Hi) || (k.ZeroOK && x == 0) {
		return
	}
	short := name
	msg := fmt.Sprintf("%s%s is outside the plausible %s…%s%s", fmtNum(x), unitSuffix(k.Unit), fmtNum(k.Lo), fmtNum(k.Hi), unitSuffix(k.Unit))
	if hint := unitHint(k, x); hint != "" {
		msg = fmt.Sprintf("%s: %s (plausible %s…%s%s)", fmtNum(x), hint, fmtNum(k.Lo), fmtNum(k.Hi), unitSuffix(k.Unit))
	}
	if d.allow[short] {
		*d.warnings = append(*d.warnings, fmt.Sprintf("%s: %s: %s; accepted by allow_unusual", d.file, key, msg))
		return
	}
	d.fail(key, "%s; if it is right, list %s under allow_unusual (padline help %s-file)", msg, short, d.kind)
}

func unitSuffix(u string) string {
	if u == "" {
		return ""
	}
	return " " + u
}

// fmtNum prints a number as short as it round-trips, with a two-digit
// exponent shortened (1e-7, not 1e-07).
func fmtNum(x float64) string {
	s := strconv.FormatFloat(x, 'g', -1, 64)
	s = strings.Replace(s, "e+0", "e", 1)
	s = strings.Replace(s, "e+", "e", 1)
	return strings.Replace(s, "e-0", "e-", 1)
}

// siPrefixes are the multipliers a value is commonly written in.
var siPrefixes = []struct {
	p string
	f float64
}{{"p", 1e-12}, {"n", 1e-9}, {"µ", 1e-6}, {"m", 1e-3}, {"", 1}, {"k", 1e3}, {"M", 1e6}}

// unitWords names the base units in the hint's question.
var unitWords = map[string]string{"F": "farads", "Ω": "ohms", "V": "volts", "s": "seconds", "A": "amperes"}

// unitHint guesses the unit the writer meant: the SI prefix that brings x
// into the plausible range, nearest the typical value, e.g. for c_f 100
// "farads? 100 nF is 1e-7".
func unitHint(k Key, x float64) string {
	base, scale := splitUnit(k.Unit)
	if base == "" || x <= 0 {
		return ""
	}
	best, bestDist, bestP := 0.0, math.Inf(1), ""
	for _, p := range siPrefixes {
		y := x * p.f / scale
		// kilo- and megaseconds, -farads or -volts are nobody's habit; a
		// number is written in a prefixed unit as 0.1 to 9999 of it (100 nF,
		// 9000 mV), in the bare unit also with an exponent (8e-12 F)
		if p.f == scale || y < k.Lo || y > k.Hi || (p.f > 1 && base != "Ω") || (p.f != 1 && (x < 0.1 || x >= 1e4)) {
			continue
		}
		if dist := math.Abs(math.Log(y / k.Typ)); dist < bestDist {
			best, bestDist, bestP = y, dist, p.p
		}
	}
	if math.IsInf(bestDist, 1) {
		return ""
	}
	word := unitWords[k.Unit]
	if word == "" {
		word = k.Unit
	}
	return fmt.Sprintf("%s? %s %s%s is %s", word, fmtNum(x), bestP, base, fmtNum(roundSig(best)))
}

// splitUnit splits a unit into its SI base and the multiplier of its prefix
// (pF → F, 1e-12); base is "" for units without one (h, %, counts).
func splitUnit(u string) (base string, scale float64) {
	for _, b := range []string{"F", "Ω", "V", "s", "A"} {
		if !strings.HasSuffix(u, b) {
			continue
		}
		pre := strings.TrimSuffix(u, b)
		for _, p := range siPrefixes {
			if p.p == pre {
				return b, p.f
			}
		}
	}
	return "", 0
}

// roundSig rounds to 12 significant digits, so 100·1e-9 prints as 1e-7.
func roundSig(x float64) float64 {
	f, _ := strconv.ParseFloat(strconv.FormatFloat(x, 'g', 12, 64), 64)
	return f
}

// readAllow reads allow_unusual: the numeric keys of this file kind whose
// out-of-range values are accepted with a warning.
func (d *doc) readAllow() {
	d.allow = map[string]bool{}
	d.warnings = new([]string)
	if !d.has("allow_unusual") {
		d.lookup("allow_unusual")
		return
	}
	for i, it := range d.list("allow_unusual") {
		name, _ := it.(string)
		k, ok := keyIndex(d.kind, name)
		if !ok || !k.numeric() {
			d.fail(fmtIndex("allow_unusual", i), "%s is not a number key of a %s file (see 'padline help %s-file')", name, d.kind, d.kind)
			continue
		}
		d.allow[name] = true
	}
}
