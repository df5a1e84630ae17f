package session

import (
	"os"
	"strings"
	"testing"
)

// withReference edits the YAML tree: every comment and key stays, a known
// serial's entry is replaced in place, a new one is appended, and the result
// is still the station file it was, plus the entry.
func TestWithReference(t *testing.T) {
	raw, err := os.ReadFile("../../testdata/stations/demo-sim.yaml")
	if err != nil {
		t.Fatal(err)
	}
	out, err := withReference(raw, "QM205-REF-54", "{serial: QM205-REF-54, trip_pf: 31.5, allowed_dev_pf: 0.31}")
	if err != nil {
		t.Fatal(err)
	}
	out, err = withReference(out, "QM205-REF-7", "{serial: QM205-REF-7, trip_pf: 30.25, allowed_dev_pf: 0.3}")
	if err != nil {
		t.Fatal(err)
	}
	for _, line := range strings.Split(string(raw), "\n") {
		if c := strings.TrimSpace(line); strings.HasPrefix(c, "#") && !strings.Contains(string(out), c) {
			t.Errorf("comment lost: %s", c)
		}
	}
	st, err := parseStation(newSource("demo-sim.yaml", out))
	if err != nil {
		t.Fatalf("edited file does not parse: %v\n%s", err, out)
	}
	refs := st.Trust.References
	if len(refs) != 4 || refs[0].Serial != "QM205-REF-54" || refs[0].TripPF != 31.5 || refs[0].AllowedDevPF != 0.31 ||
		refs[1].Serial != "QM205-REF-449" || len(refs[1].SimDefects) != 1 || refs[3].Serial != "QM205-REF-7" || refs[3].TripPF != 30.25 {
		t.Errorf("references after the edit: %+v", refs)
	}
	if i, j := strings.Index(string(out), "ladder:"), strings.Index(string(out), "reference_units:"); i > j {
		t.Error("key order changed")
	}
	// A file without the list gets it at its end.
	out, err = withReference([]byte("name: A # the line\nfixture: F\n"), "S-1", "{serial: S-1, trip_pf: 20, allowed_dev_pf: 0.3}")
	if err != nil || !strings.HasSuffix(string(out), "reference_units:\n  - {serial: S-1, trip_pf: 20, allowed_dev_pf: 0.3}\n") ||
		!strings.HasPrefix(string(out), "name: A # the line\n") {
		t.Errorf("new list: %v\n%s", err, out)
	}
}

// A built-in station is never written: the entry to paste is printed.
func TestRegisterReferenceBuiltin(t *testing.T) {
	st, err := LoadStation("demo-sim")
	if err != nil {
		t.Fatal(err)
	}
	rep := RegisterReport{Serial: "QM205-REF-7", TripPF: 30.25, AllowedDevPF: 0.3}
	if err := RegisterReference(st, &rep); err != nil {
		t.Fatal(err)
	}
	var b strings.Builder
	WriteRegister(&b, rep)
	if rep.Written || !strings.Contains(b.String(), "built-in demo-sim is built into padline") ||
		!strings.Contains(b.String(), "reference_units:\n  - {serial: QM205-REF-7, trip_pf: 30.25, allowed_dev_pf: 0.3}\n") {
		t.Errorf("built-in station:\n%s", b.String())
	}
	// An entry the station cannot check (outside the ladder's reach) is refused.
	rep.TripPF = 500
	if err := RegisterReference(st, &rep); err == nil || !strings.Contains(err.Error(), "reference_units[3].trip_pf") {
		t.Errorf("trip outside the ladder: %v", err)
	}
}

// A station file nobody may write (mode 0444, as root too) is left as it
// is; the entry to paste is printed instead.
func TestRegisterReferenceReadOnly(t *testing.T) {
	p := writeStation(t, func(s string) string { return s })
	if err := os.Chmod(p, 0o444); err != nil {
		t.Fatal(err)
	}
	before, _ := os.ReadFile(p)
	st, err := LoadStation(p)
	if err != nil {
		t.Fatal(err)
	}
	rep := RegisterReport{Serial: "QM205-REF-7", TripPF: 30.25, AllowedDevPF: 0.3}
	if err := RegisterReference(st, &rep); err != nil {
		t.Fatal(err)
	}
	after, _ := os.ReadFile(p)
	if rep.Written || !strings.Contains(rep.WhyNot, "read-only (mode 0444)") || string(before) != string(after) {
		t.Errorf("read-only file: written %v, why not %q, changed %v", rep.Written, rep.WhyNot, string(before) != string(after))
	}
}
