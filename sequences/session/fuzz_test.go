package session

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"unicode"
	"unicode/utf8"

	"padline/fixture"
	"padline/sequences/timing"
)

// Hostile-input fuzz targets: a config file edited by hand at
// 3 a.m. or a scanner gone wrong must give one clear error line, never a
// panic and never a half-checked config. Seeds are the demo variants and
// stations and every file of the bad-config corpus; crashers the fuzzer
// finds are kept under testdata/fuzz/<target>/ and rerun by `go test`.

// addConfigSeeds adds every demo variant, demo station, bad-config file and
// the deployment example station as a seed, so each target starts from valid
// files of both kinds and from one example of each known mistake.
func addConfigSeeds(f *testing.F) {
	f.Helper()
	var files []string
	for _, glob := range []string{"testdata/variants/*.yaml", "testdata/stations/*.yaml", "testdata/config/bad/*.yaml", "deploy/*.yaml"} {
		m, err := filepath.Glob(filepath.Join(repo, glob))
		if err != nil || len(m) == 0 {
			f.Fatalf("seeds %s: %v (%d files)", glob, err, len(m))
		}
		files = append(files, m...)
	}
	for _, name := range files {
		raw, err := os.ReadFile(name)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(raw)
	}
}

// writeConfig writes raw to x.yaml in dir and returns its path. One
// directory serves a whole fuzz worker (inputs run one at a time in it), so
// an exec costs a file write, not a directory.
func writeConfig(t *testing.T, dir string, raw []byte) string {
	t.Helper()
	name := filepath.Join(dir, "x.yaml")
	if err := os.WriteFile(name, raw, 0o600); err != nil {
		t.Fatal(err)
	}
	return name
}

// checkErrorLine checks the shape every config error must have: one line of
// valid UTF-8 without control characters, starting with the file's path.
func checkErrorLine(t *testing.T, file string, err error) {
	t.Helper()
	msg := err.Error()
	if !strings.HasPrefix(msg, file+": ") {
		t.Errorf("error does not start with %q: %q", file+": ", msg)
	}
	if !utf8.ValidString(msg) {
		t.Errorf("error is not valid UTF-8: %q", msg)
	}
	if i := strings.IndexFunc(msg, func(r rune) bool { return unicode.IsControl(r) && r != '\t' }); i >= 0 {
		t.Errorf("error has a control character at %d (more than one line, or raw terminal codes): %q", i, msg)
	}
}

// checkSource checks that a loaded config keeps the exact bytes it came from
// and their hash (the snapshot and config hash every run records).
func checkSource(t *testing.T, file string, raw []byte, src Source) {
	t.Helper()
	sum := sha256.Sum256(raw)
	if src.Name != file || !bytes.Equal(src.Raw, raw) || src.Hash != hex.EncodeToString(sum[:]) {
		t.Errorf("source = {%q, %d bytes, %s}, want {%q, %d bytes, sha256 of them}", src.Name, len(src.Raw), src.Hash, file, len(raw))
	}
}

func finite(xs ...float64) bool {
	for _, x := range xs {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}

func TestDeployStationExampleLoads(t *testing.T) {
	// deploy/station.example.yaml is what the README tells a technician to
	// copy: it must load, drive real pins and keep the shift log in the
	// service's state directory (padline.service may write nowhere else).
	s, err := LoadStation(repo + "/deploy/station.example.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if s.Driver != "gpio" || !strings.HasPrefix(s.ShiftLog, "/var/lib/padline/") {
		t.Errorf("driver %q, shift log %q; want gpio under /var/lib/padline/", s.Driver, s.ShiftLog)
	}
}

func FuzzVariant(f *testing.F) {
	addConfigSeeds(f)
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, raw []byte) {
		file := writeConfig(t, dir, raw)
		v, err := LoadVariant(file)
		if err != nil {
			if v != nil {
				t.Errorf("LoadVariant returned a variant and %v", err)
			}
			checkErrorLine(t, file, err)
			return
		}
		// Accepted: the variant must pass every check its consumers make.
		checkSource(t, file, raw, v.Source)
		if strings.TrimSpace(v.Name) == "" {
			t.Errorf("empty name accepted")
		}
		if v.Serial == nil || v.Serial.String() != v.SerialPattern {
			t.Errorf("serial pattern %q compiled to %v", v.SerialPattern, v.Serial)
		}
		if err := v.Circuit.Validate(); err != nil {
			t.Errorf("accepted circuit fails its own validation: %v", err)
		}
		if err := v.Spec.Check(); err != nil || v.Spec.NoTripAtPF < 0 {
			t.Errorf("accepted spec window %+v: %v", v.Spec, err)
		}
		p := v.Plan
		switch {
		case !finite(p.PowerSettleMS, p.Search.SETargetPF, p.Search.SpreadLimitPF) || p.PowerSettleMS < 0:
			t.Errorf("plan numbers: %+v", p)
		case p.IdlePeriods < 1 || p.ClockPeriods < 1 || p.ReleasePeriods < 1 || p.Search.MaxRefineSamples < 1 || p.Retest.Max < 0:
			t.Errorf("plan counts: %+v", p)
		case p.Search.SETargetPF <= 0 || p.Search.SpreadLimitPF <= 0:
			t.Errorf("plan search targets: %+v", p.Search)
		case p.Search.Strategy != "bracket" && p.Search.Strategy != "staircase":
			t.Errorf("plan search strategy %q", p.Search.Strategy)
		}
		// The limits the run will compute from it must not panic; an error
		// (e.g. no corner trips at all) is allowed but must be one line.
		if _, err := v.Limits(timing.Options{Draws: 16, Seed: 1}); err != nil && strings.ContainsAny(err.Error(), "\r\n") {
			t.Errorf("limits error spans lines: %q", err)
		}
	})
}

func FuzzStation(f *testing.F) {
	addConfigSeeds(f)
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, raw []byte) {
		file := writeConfig(t, dir, raw)
		s, err := LoadStation(file)
		if err != nil {
			if s != nil {
				t.Errorf("LoadStation returned a station and %v", err)
			}
			checkErrorLine(t, file, err)
			return
		}
		checkSource(t, file, raw, s.Source)
		for key, val := range map[string]string{"name": s.Name, "fixture": s.Fixture, "shift_log": s.ShiftLog,
			"pins.latch": s.Pins.Latch, "pins.power": s.Pins.Power, "pins.lid": s.Pins.Lid} {
			// A panel station names each site's latch (and power, per
			// site) under sites.
			if s.Sites != nil && (key == "pins.latch" || key == "pins.power" && !s.Sites.SharedPower) {
				continue
			}
			if strings.TrimSpace(val) == "" {
				t.Errorf("empty %s accepted", key)
			}
		}
		if s.Sites != nil {
			for i, site := range s.Sites.List {
				if strings.TrimSpace(site.Latch) == "" || len(site.RungsPF) != len(s.Ladder.RungsPF) {
					t.Errorf("site %d without latch or with %d rungs accepted", i+1, len(site.RungsPF))
				}
			}
		}
		if s.Driver != "sim" && s.Driver != "gpio" {
			t.Errorf("driver %q accepted", s.Driver)
		}
		// Every pin in exactly one role.
		seen := map[string]bool{}
		for _, pin := range append([]string{s.Pins.Latch, s.Pins.Power, s.Pins.Clock, s.Pins.Lid, s.Pins.PassLamp, s.Pins.FailLamp}, s.Pins.Ladder...) {
			if pin == "" {
				continue
			}
			if seen[pin] {
				t.Errorf("pin %q in two roles accepted: %+v", pin, s.Pins)
			}
			seen[pin] = true
		}
		l := s.Ladder
		if n := len(l.RungsPF); n < 1 || n > maxRungs || len(s.Pins.Ladder) != n {
			t.Errorf("%d rungs, %d ladder pins accepted", n, len(s.Pins.Ladder))
		}
		for i, c := range l.RungsPF {
			if !(c > 0) || !finite(c) {
				t.Errorf("rung %d = %g accepted", i, c)
			}
		}
		if !(l.StrayPF >= 0) || !finite(l.StrayPF) || !(l.RatedOperations > 0) || !finite(l.RatedOperations) {
			t.Errorf("ladder %+v accepted", l)
		}
		if l.Operate <= 0 || l.Bounce < 0 {
			t.Errorf("relay settling operate %v, bounce %v accepted", l.Operate, l.Bounce)
		}
		if !(s.UncertaintyPF >= 0) || !finite(s.UncertaintyPF) {
			t.Errorf("uncertainty %g accepted", s.UncertaintyPF)
		}
		// The fixture must be able to build the ladder the file describes.
		if _, err := fixture.NewLadder(l.RungsPF, l.StrayPF); err != nil {
			t.Errorf("accepted ladder rejected by fixture.NewLadder: %v", err)
		}
	})
}

func FuzzSerial(f *testing.F) {
	qm205 := qm205Serial(f)
	v212, err := LoadVariant(repo + "/testdata/variants/QM-212.yaml")
	if err != nil {
		f.Fatal(err)
	}
	patterns := []*regexp.Regexp{qm205, v212.Serial, nil}
	for _, s := range []string{
		"QM205-000123", "QM212-004711", "QM205-000123\r", "QM205-000123\r\n", "  QM205-000123\t",
		"", "\r\n", "QM205\x00000123", "\x1b[2JQM205-000123", "QM205-00\r0123", "QM205-00０123",
		"QM205-\xff00123", strings.Repeat("7", 10*1024), strings.Repeat("A", 64), strings.Repeat("A", 65),
		strings.Repeat("é", 50),
	} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, raw string) {
		for _, re := range patterns {
			got, err := CleanSerial(re, raw)
			if verr := validSerial(re, raw); (verr == nil) != (err == nil) {
				t.Fatalf("validSerial %v, CleanSerial %v", verr, err)
			}
			if err != nil {
				msg := err.Error()
				if !strings.HasPrefix(msg, "bad serial") || !utf8.ValidString(msg) ||
					strings.IndexFunc(msg, unicode.IsControl) >= 0 {
					t.Fatalf("error line %q", msg)
				}
				// 40 quoted characters (each at most \U0010FFFF, 10 bytes)
				// plus the pattern plus the words.
				if limit := 600 + 2*len(regexpString(re)); len(msg) > limit {
					t.Fatalf("error line of %d bytes for a %d-byte serial", len(msg), len(raw))
				}
				continue
			}
			if got == "" || len(got) > maxSerialBytes || got != strings.Trim(got, " \t\r\n") {
				t.Fatalf("accepted %q", got)
			}
			for i := 0; i < len(got); i++ {
				if got[i] < 0x20 || got[i] > 0x7e {
					t.Fatalf("accepted %q with byte %#02x", got, got[i])
				}
			}
			if !strings.Contains(raw, got) {
				t.Fatalf("cleaned %q is not inside %q", got, raw)
			}
			if re != nil && !re.MatchString(got) {
				t.Fatalf("accepted %q not matching %s", got, re)
			}
			if again, err := CleanSerial(re, got); err != nil || again != got {
				t.Fatalf("not idempotent: %q → %q, %v", got, again, err)
			}
		}
	})
}

func regexpString(re *regexp.Regexp) string {
	if re == nil {
		return ""
	}
	return re.String()
}
