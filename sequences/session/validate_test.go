package session

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// writeStation writes the demo station with edit applied to its text.
func writeStation(t *testing.T, edit func(string) string) string {
	t.Helper()
	raw, err := os.ReadFile("../../testdata/stations/demo-sim.yaml")
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), "station.yaml")
	if err := os.WriteFile(p, []byte(edit(string(raw))), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

func TestValidateStation(t *testing.T) {
	keep := func(s string) string { return s }
	cases := []struct {
		name     string
		edit     func(string) string
		host     *HostGPIO
		ok       bool
		mentions []string
	}{
		{"demo station", keep, nil, true, []string{"reaches QM-205's test limits"}},
		{"pin used twice", func(s string) string { return strings.Replace(s, "clock: GPIO22", "clock: GPIO17", 1) }, nil, false,
			[]string{"pins.clock", "GPIO17", "pins.latch"}},
		{"role missing", func(s string) string { return strings.Replace(s, "  lid: GPIO23\n", "", 1) }, nil, false, []string{"pins.lid"}},
		{"ladder too short", func(s string) string {
			s = strings.Replace(s, "rungs_pf: [0.51, 1.02, 1.98, 4.03, 7.96, 16.05, 31.9, 64.2]", "rungs_pf: [0.51, 1.02, 1.98, 4.03, 7.96, 16.05]", 1)
			s = strings.Replace(s, "GPIO26, GPIO16, GPIO20, GPIO21]", "GPIO26, GPIO16]", 1)
			i := strings.Index(s, "reference_units:")
			j := strings.Index(s, "# 'padline run' wants")
			return s[:i] + s[j:]
		}, nil, false, []string{"ladder: reaches 4.60 … 36.15 pF", "10.30 … 59.70", "reference_units: none registered"}},
		{"allowance wider than the window", func(s string) string {
			return strings.Replace(s, "trip_pf: 31.779, allowed_dev_pf: 0.3", "trip_pf: 31.779, allowed_dev_pf: 30", 1)
		}, nil, false, []string{"reference_units[0].allowed_dev_pf", "half QM-205's test window"}},
		{"unusual value accepted", func(s string) string {
			return strings.Replace(s, "rated_operations: 1.0e9", "rated_operations: 100", 1) + "allow_unusual: [ladder.rated_operations]\n"
		}, nil, true, []string{"ladder.rated_operations: 100 is outside the plausible 1000…1e11; accepted by allow_unusual"}},
		{"good reference outside the limits", func(s string) string {
			return strings.Replace(s, "trip_pf: 31.779", "trip_pf: 65.1", 1)
		}, nil, true, []string{"reference_units[0].trip_pf", "outside QM-205's test limits"}},
		{"gpio host without lines", func(s string) string { return strings.Replace(s, "\ndriver: sim", "\ndriver: gpio", 1) },
			&HostGPIO{}, true, []string{"this host has no GPIO lines (GPIO character devices: none)"}},
		{"gpio pin the host lacks", func(s string) string { return strings.Replace(s, "\ndriver: sim", "\ndriver: gpio", 1) },
			&HostGPIO{Chips: []string{"/dev/gpiochip0"}, Lines: []string{"GPIO5", "GPIO6", "GPIO13", "GPIO19", "GPIO26", "GPIO16", "GPIO20", "GPIO21", "GPIO17", "GPIO27", "GPIO22", "GPIO23", "GPIO24"}},
			false, []string{"pins.fail_lamp: GPIO25 is not a GPIO line of this host", "host GPIO chips: /dev/gpiochip0"}},
	}
	for _, c := range cases {
		var host func() ([]string, []string, error)
		if c.host != nil {
			host = func() ([]string, []string, error) { return c.host.Chips, c.host.Lines, nil }
		}
		rep, err := ValidateStation(writeStation(t, c.edit), "QM-205", host)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		var b strings.Builder
		WriteValidate(&b, rep)
		if rep.OK != c.ok {
			t.Errorf("%s: ok %v, want %v:\n%s", c.name, rep.OK, c.ok, b.String())
		}
		for _, m := range c.mentions {
			if !strings.Contains(b.String(), m) {
				t.Errorf("%s: report does not mention %q:\n%s", c.name, m, b.String())
			}
		}
	}
}
