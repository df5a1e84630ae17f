package session

import (
	"slices"
	"time"
)

// Station is one station file, parsed and validated: which fixture, which
// driver, which pins, the ladder as calibrated, and where the shift log is.
type Station struct {
	Name     string
	Fixture  string
	Driver   Driver
	ShiftLog string
	Pins     StationPins
	Ladder   StationLadder
	// Sim is the optional `sim:` section: how the simulated line differs
	// from its defaults (driver: sim only).
	Sim StationSim
	// UncertaintyPF is the station's expanded measurement uncertainty U
	// (k = 2) in pF; 0 when the file does not state it.
	UncertaintyPF float64
	// AutoApproveUPF is auto_approve_u_pf: a new limits version whose only
	// change is U, by at most this many pF, is approved without a person
	// (0: every change waits for 'padline limits approve').
	AutoApproveUPF float64
	// Trust is how the station proves it still measures right: its
	// reference units and how often they must be checked.
	Trust StationTrust
	// Plant is the optional `plant:` section: the plant store this station
	// forwards its runs to (station_plant.go).
	Plant StationPlant
	// Badges are the prefixes of lot and operator badges (badges.go).
	Badges StationBadges
	// Sites is the optional `sites:` section of a panel station (nil for a
	// station that tests one unit per closure).
	Sites *StationSites
	// Source is where the file came from, its exact bytes and their sha256.
	Source Source
	// Warnings are the values outside their plausible range that the file
	// accepts with allow_unusual, one line each naming file and key.
	Warnings []string
}

// Driver says what drives a station's pins; every run records it.
type Driver string

const (
	// DriverSim is the built-in simulated line (no hardware).
	DriverSim Driver = "sim"
	// DriverGPIO is real GPIO lines, opened by name.
	DriverGPIO Driver = "gpio"
)

// StationPins maps each logical fixture pin to a GPIO line name. Clock,
// PassLamp and FailLamp are optional ("" = not wired).
type StationPins struct {
	Latch, Power, Clock, Lid string
	PassLamp, FailLamp       string
	// Ladder has one pin per rung, in the order of StationLadder.RungsPF.
	Ladder []string
}

// StationLadder is the calibrated reference-capacitor ladder.
type StationLadder struct {
	// RungsPF is each rung's capacitance as measured (relay closed minus
	// open), pF; 1 to 12 rungs, each > 0. Equal values are allowed.
	RungsPF []float64
	// StrayPF is the calibrated stray at the pad with every relay open.
	StrayPF float64
	// Operate and Bounce are the relay settling times.
	Operate, Bounce time.Duration
	// RatedOperations is the relays' rated life in operations.
	RatedOperations float64
	// CalUncertaintyPF is one rung's calibration standard uncertainty (the
	// LCR meter's), pF; default 0.05.
	CalUncertaintyPF float64
}

// StationTrust is the station file's reference units and check schedule
// (station_cmd.go uses them).
type StationTrust struct {
	// References are the kept reference units, each with the trip point
	// this station measured for it and the allowed deviation.
	References []StationRef
	// CheckEveryUnits and CheckEveryHours require a new check after that
	// many production units or hours (0: no such limit).
	CheckEveryUnits int
	CheckEveryHours float64
	// RelayWarnFraction is the fraction of rated relay life at which
	// 'padline station status' warns (default 0.8).
	RelayWarnFraction float64
}

// maxRungs is the most rungs a ladder may have (DEVELOPERS.md "Fixture").
const maxRungs = 12

// Plausible ranges of a station file's numbers (common practice, no
// source): a touch-pad ladder's rungs and stray are tens of pF, so 1,000 pF
// is a typo; an uncertainty of a tenth of a pF is usual, 10 pF would accept
// anything.
const (
	maxPlausiblePF   = 1000.0
	maxUncertaintyPF = 10.0
)

// LoadStation resolves ref (a file path, or a built-in station name such as
// demo-sim) and parses it.
func LoadStation(ref string) (*Station, error) {
	src, err := openConfig(ref, "stations", "station")
	if err != nil {
		return nil, err
	}
	return parseStation(src)
}

// parseStation parses and validates one station file. Every problem is a
// one-line *ConfigError naming the file and the key.
//
// Length: it reads the station file's keys in the file's own order, one
// line per key; the reading order is the documentation of the format.
func parseStation(src Source) (*Station, error) {
	d, err := parseDoc(src.Name, src.Raw)
	if err != nil {
		return nil, err
	}
	d.kind = "station"
	d.readAllow()
	s := &Station{Source: src}
	s.Name = d.name("name")
	s.Fixture = d.name("fixture")
	s.Driver = Driver(d.str("driver", true))
	if s.Driver != "" && s.Driver != DriverSim && s.Driver != DriverGPIO {
		d.fail("driver", "must be sim or gpio, got %q", s.Driver)
	}
	s.ShiftLog = d.str("shift_log", true)
	if d.section("pins", true) {
		p := &s.Pins
		panel := d.has("sites") // a panel names each site's latch (and power) under sites
		p.Latch = d.str("pins.latch", !panel)
		p.Power = d.str("pins.power", !panel)
		p.Clock = d.str("pins.clock", false)
		p.Lid = d.str("pins.lid", true)
		p.PassLamp = d.str("pins.pass_lamp", false)
		p.FailLamp = d.str("pins.fail_lamp", false)
		p.Ladder = d.strList("pins.ladder")
		roles := map[string]string{}
		claim := func(role, pin string) {
			if pin == "" {
				return
			}
			if other, dup := roles[pin]; dup {
				d.fail("pins."+role, "pin %s is already used by pins.%s", pin, other)
				return
			}
			roles[pin] = role
		}
		claim("latch", p.Latch)
		claim("power", p.Power)
		claim("clock", p.Clock)
		claim("lid", p.Lid)
		claim("pass_lamp", p.PassLamp)
		claim("fail_lamp", p.FailLamp)
		for i, pin := range p.Ladder {
			claim(fmtIndex("ladder", i), pin)
		}
	}
	if d.section("ladder", true) {
		l := &s.Ladder
		l.RungsPF = d.numList("ladder.rungs_pf")
		if d.err == nil {
			switch {
			case len(l.RungsPF) == 0 || len(l.RungsPF) > maxRungs:
				d.fail("ladder.rungs_pf", "want 1 to %d rungs, got %d", maxRungs, len(l.RungsPF))
			case len(s.Pins.Ladder) != len(l.RungsPF):
				d.fail("pins.ladder", "has %d pins but ladder.rungs_pf has %d rungs", len(s.Pins.Ladder), len(l.RungsPF))
			}
			for i, c := range l.RungsPF {
				if c <= 0 {
					d.fail(fmtIndex("ladder.rungs_pf", i), "must be > 0, got %g", c)
				}
				if c > maxPlausiblePF {
					d.fail(fmtIndex("ladder.rungs_pf", i), "%g pF is not a touch-pad ladder rung (at most %g pF)", c, maxPlausiblePF)
				}
				// Each rung is measured on its own: two identical readings
				// are almost always one line pasted twice.
				if j := slices.Index(l.RungsPF[:i], c); j >= 0 {
					d.fail(fmtIndex("ladder.rungs_pf", i), "repeats rungs_pf[%d] (%g pF) exactly: measure each rung and enter its own reading", j, c)
				}
			}
		}
		l.StrayPF = d.atMost("ladder.stray_pf", d.nonNegative("ladder.stray_pf", true, 0), maxPlausiblePF)
		l.Operate = msDuration(d.atMost("ladder.operate_ms", d.positive("ladder.operate_ms", true, 0), maxRelayMS))
		l.Bounce = msDuration(d.atMost("ladder.bounce_ms", d.nonNegative("ladder.bounce_ms", true, 0), maxRelayMS))
		if l.Operate <= 0 && d.err == nil {
			d.fail("ladder.operate_ms", "must be at least 1 µs")
		}
		l.RatedOperations = d.atMost("ladder.rated_operations", d.positive("ladder.rated_operations", true, 0), 1e12)
		// > 0: no LCR meter reads a rung exactly, and the reference check
		// takes this as the levels' calibration uncertainty.
		l.CalUncertaintyPF = d.atMost("ladder.cal_uncertainty_pf", d.positive("ladder.cal_uncertainty_pf", false, defaultCalUncertaintyPF), maxUncertaintyPF)
	}
	s.Trust = readStationTrust(d, s.Ladder)
	s.Badges = readStationBadges(d)
	s.Sim = readStationSim(d)
	s.Plant = readStationPlant(d)
	s.UncertaintyPF = d.atMost("uncertainty_pf", d.positive("uncertainty_pf", false, 0), maxUncertaintyPF)
	s.AutoApproveUPF = d.atMost("auto_approve_u_pf", d.nonNegative("auto_approve_u_pf", false, 0), maxUncertaintyPF)
	s.Sites = readStationSites(d, s)
	if err := d.finish(); err != nil {
		return nil, err
	}
	s.Warnings = *d.warnings
	return s, nil
}

// maxRelayMS bounds a relay's operate or bounce time: even slow armature
// relays settle in tens of ms, so anything past 10 s is a typo.
const maxRelayMS = 10000

// atMost fails key when f exceeds max, and returns f.
func (d *doc) atMost(key string, f, max float64) float64 {
	if f > max {
		d.fail(key, "must be at most %g, got %g", max, f)
	}
	return f
}

func msDuration(ms float64) time.Duration {
	return time.Duration(ms * float64(time.Millisecond))
}
