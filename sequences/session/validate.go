package session

import (
	"fmt"
	"io"
	"math"
	"slices"
	"strings"
)

// 'padline station validate': a station file checked completely without
// touching a pin, against a variant's limits when one is given, and against
// the GPIO lines the host has when asked to look.

// Finding levels: an error stops a station; a warning is worth reading.
const (
	LevelOK      = "ok"
	LevelWarning = "warning"
	LevelError   = "error"
)

// Finding is one line of a validation: what was checked, at which key.
type Finding struct {
	Level string `json:"level"`
	Key   string `json:"key,omitempty"`
	Msg   string `json:"message"`
}

// HostGPIO is what a host has: its GPIO character devices and the line
// names its drivers registered. Err is why they could not be listed.
type HostGPIO struct {
	Chips []string `json:"chips"`
	Lines []string `json:"lines"`
	Err   string   `json:"error,omitempty"`
}

// ValidateReport is what 'padline station validate' prints (also as JSON).
type ValidateReport struct {
	Station  string    `json:"station_file"`
	Name     string    `json:"station,omitempty"`
	Fixture  string    `json:"fixture,omitempty"`
	Driver   string    `json:"driver,omitempty"`
	Variant  string    `json:"variant,omitempty"`
	Findings []Finding `json:"findings"`
	// Host is the GPIO the host has (nil when not looked at).
	Host *HostGPIO `json:"host_gpio,omitempty"`
	OK   bool      `json:"ok"`
}

func (r *ValidateReport) add(level, key, format string, args ...any) {
	r.Findings = append(r.Findings, Finding{Level: level, Key: key, Msg: fmt.Sprintf(format, args...)})
	if level == LevelError {
		r.OK = false
	}
}

// ValidateStation checks the station file stationRef: the strict parse
// (every key, pins unique, roles complete, ladder values in range,
// references inside the ladder's reach), then, with variantRef, the ladder
// and the references against the variant's test limits; with host (nil:
// not looked at; fixture/hostpins.Inventory) every pin name against the lines the host has. No pin is
// opened. A file that does not parse is one error finding, not an error.
func ValidateStation(stationRef, variantRef string, host func() (chips, lines []string, err error)) (ValidateReport, error) {
	rep := ValidateReport{Station: stationRef, OK: true}
	st, err := LoadStation(stationRef)
	if err != nil {
		if _, isConfig := err.(*ConfigError); !isConfig {
			return rep, err
		}
		rep.add(LevelError, "", "%v", err)
		return rep, nil
	}
	rep.Station, rep.Name, rep.Fixture, rep.Driver = st.Source.Name, st.Name, st.Fixture, string(st.Driver)
	rep.add(LevelOK, "", "parses: every key known, pins unique, every role has a pin, ladder and references in range")
	for _, w := range st.Warnings {
		rep.add(LevelWarning, "allow_unusual", "%s", w)
	}
	validateLadder(&rep, st)
	if len(st.Trust.References) == 0 {
		rep.add(LevelWarning, "reference_units", "none registered: 'padline run' refuses until a reference check passes, and the check needs at least one (register a kept good unit with 'padline station register-ref')")
	}
	if variantRef != "" {
		v, err := LoadVariant(variantRef)
		if err != nil {
			return rep, err
		}
		rep.Variant = v.Name
		for _, w := range v.Warnings {
			rep.add(LevelWarning, "allow_unusual", "%s", w)
		}
		if err := validateAgainst(&rep, st, v); err != nil {
			return rep, err
		}
	}
	if host != nil && st.Driver == DriverGPIO {
		chips, lines, err := host()
		h := HostGPIO{Chips: chips, Lines: lines}
		if err != nil {
			h.Err = err.Error()
		}
		rep.Host = &h
		validatePins(&rep, st, h)
	}
	return rep, nil
}

// validateLadder checks what the parse cannot: the ladder's resolution
// against the uncertainty the file states.
func validateLadder(rep *ValidateReport, st *Station) {
	l := st.Ladder
	if len(l.RungsPF) == 0 {
		return
	}
	// GUM (JCGM 100:2008) §4.3.7: a step δ contributes u = δ/√12; U = 2u.
	δ := slices.Min(l.RungsPF)
	uRes := 2 * δ / math.Sqrt(12)
	if st.UncertaintyPF > 0 && st.UncertaintyPF < uRes {
		rep.add(LevelWarning, "uncertainty_pf", "%g pF is less than the ladder's resolution alone gives (smallest rung %g pF: U = 2·δ/√12 = %.2f pF)", st.UncertaintyPF, δ, uRes)
	}
	rep.add(LevelOK, "ladder", "%d rungs, %.2f … %.2f pF reachable, smallest step %g pF", len(l.RungsPF), l.StrayPF, l.StrayPF+sumPF(l.RungsPF), δ)
}

// validateAgainst checks the station against variant v's test limits: the
// ladder must reach both limits with room for the search, and every
// reference's allowed deviation must be smaller than the window.
func validateAgainst(rep *ValidateReport, st *Station, v *Variant) error {
	u, from := StatedUncertainty(st)
	lim, err := v.StationLimits(u)
	if err != nil {
		return err
	}
	lo, hi := st.Ladder.StrayPF, st.Ladder.StrayPF+sumPF(st.Ladder.RungsPF)
	tl := lim.TestLimits
	if tl.Low < lo || tl.High > hi {
		rep.add(LevelError, "ladder", "reaches %.2f … %.2f pF but %s's test limits are %.2f … %.2f pF (U %.2f pF from %s): add or change rungs", lo, hi, v.Name, tl.Low, tl.High, u, from)
	} else {
		rep.add(LevelOK, "ladder", "reaches %s's test limits %.2f … %.2f pF (U %.2f pF from %s)", v.Name, tl.Low, tl.High, u, from)
	}
	for i, ref := range st.Trust.References {
		key := fmtIndex("reference_units", i)
		switch {
		case ref.AllowedDevPF >= (tl.High-tl.Low)/2:
			rep.add(LevelError, key+".allowed_dev_pf", "%g pF is half %s's test window (%.2f pF) or more: such a check accepts any station", ref.AllowedDevPF, v.Name, tl.High-tl.Low)
		case ref.AllowedDevPF < u/2:
			rep.add(LevelWarning, key+".allowed_dev_pf", "%g pF is less than half the station's U (%.2f pF): healthy checks will fail (register it again with 'padline station register-ref')", ref.AllowedDevPF, u)
		}
		if len(ref.SimDefects) == 0 && (ref.TripPF < tl.Low || ref.TripPF > tl.High) {
			rep.add(LevelWarning, key+".trip_pf", "%s trips at %g pF, outside %s's test limits %.2f … %.2f pF: is it a %s?", ref.Serial, ref.TripPF, v.Name, tl.Low, tl.High, v.Name)
		}
	}
	return nil
}

// validatePins checks every pin name against the host's lines.
func validatePins(rep *ValidateReport, st *Station, h HostGPIO) {
	if len(h.Lines) == 0 {
		why := ""
		if h.Err != "" {
			why = " (" + h.Err + ")"
		}
		rep.add(LevelWarning, "pins", "this host has no GPIO lines (GPIO character devices: %s)%s: the pin names were not checked against hardware", listOrNone(h.Chips), why)
		return
	}
	have := map[string]bool{}
	for _, n := range h.Lines {
		have[n] = true
	}
	p := st.Pins
	named := []struct{ key, pin string }{{"pins.latch", p.Latch}, {"pins.power", p.Power}, {"pins.clock", p.Clock},
		{"pins.lid", p.Lid}, {"pins.pass_lamp", p.PassLamp}, {"pins.fail_lamp", p.FailLamp}}
	for i, pin := range p.Ladder {
		named = append(named, struct{ key, pin string }{fmtIndex("pins.ladder", i), pin})
	}
	missing := 0
	for _, n := range named {
		if n.pin != "" && !have[n.pin] {
			missing++
			rep.add(LevelError, n.key, "%s is not a GPIO line of this host", n.pin)
		}
	}
	if missing == 0 {
		rep.add(LevelOK, "pins", "every pin name is a GPIO line of this host")
	}
}

func listOrNone(s []string) string {
	if len(s) == 0 {
		return "none"
	}
	return strings.Join(s, ", ")
}

// WriteValidate prints the report: one line per finding, then the host's
// GPIO when looked at.
func WriteValidate(w io.Writer, r ValidateReport) {
	fmt.Fprintf(w, "station file %s", r.Station)
	if r.Name != "" {
		fmt.Fprintf(w, " (station %s, fixture %s, driver %s)", r.Name, r.Fixture, r.Driver)
	}
	fmt.Fprintln(w)
	for _, f := range r.Findings {
		key := ""
		if f.Key != "" {
			key = f.Key + ": "
		}
		fmt.Fprintf(w, "  %-7s %s%s\n", f.Level, key, f.Msg)
	}
	if h := r.Host; h != nil {
		fmt.Fprintf(w, "host GPIO chips: %s\n", listOrNone(h.Chips))
		fmt.Fprintf(w, "host GPIO lines: %s\n", listOrNone(h.Lines))
	}
	if r.OK {
		fmt.Fprintln(w, "valid")
	} else {
		fmt.Fprintln(w, "NOT VALID")
	}
}
