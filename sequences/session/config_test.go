package session

import (
	"bytes"
	"flag"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

var update = flag.Bool("update", false, "rewrite the golden .err files of testdata/config/bad")

// repo is the repository root relative to this package.
const repo = "../.."

func TestBadConfigCorpus(t *testing.T) {
	// Each testdata/config/bad/*.yaml has its exact expected error line in a
	// .err file beside it; the file is named as a user at the repository
	// root would give it.
	files, err := filepath.Glob(filepath.Join(repo, "testdata/config/bad/*.yaml"))
	if err != nil || len(files) < 20 {
		t.Fatalf("corpus: %v (%d files)", err, len(files))
	}
	for _, f := range files {
		name := strings.TrimSuffix(filepath.Base(f), ".yaml")
		t.Run(name, func(t *testing.T) {
			var err error
			switch {
			case strings.HasPrefix(name, "variant-"):
				_, err = LoadVariant(f)
			case strings.HasPrefix(name, "station-"):
				_, err = LoadStation(f)
			default:
				t.Fatalf("corpus file %s must start with variant- or station-", name)
			}
			if err == nil {
				t.Fatal("accepted")
			}
			got := strings.ReplaceAll(err.Error(), repo+"/", "")
			golden := strings.TrimSuffix(f, ".yaml") + ".err"
			if *update {
				if err := os.WriteFile(golden, []byte(got+"\n"), 0o644); err != nil {
					t.Fatal(err)
				}
			}
			want, rerr := os.ReadFile(golden)
			if rerr != nil {
				t.Fatal(rerr)
			}
			if got+"\n" != string(want) {
				t.Errorf("error\n got %s\nwant %s", got, want)
			}
			if strings.Contains(got, "\n") {
				t.Errorf("error spans lines: %q", got)
			}
		})
	}
}

func TestBuiltinsMatchTestdata(t *testing.T) {
	// The embedded defaults must be byte-identical copies of testdata.
	for _, dir := range []string{"variants", "stations"} {
		td, _ := filepath.Glob(filepath.Join(repo, "testdata", dir, "*.yaml"))
		names := builtinNames(dir)
		if len(td) != len(names) || len(names) == 0 {
			t.Errorf("%s: testdata has %d files, built-in %d (%v)", dir, len(td), len(names), names)
		}
		for _, f := range td {
			want, _ := os.ReadFile(f)
			got, err := builtin.ReadFile("defaults/" + dir + "/" + filepath.Base(f))
			if err != nil || !bytes.Equal(got, want) {
				t.Errorf("sequences/session/defaults/%s/%s differs from %s: cp it over (%v)", dir, filepath.Base(f), f, err)
			}
		}
	}
}

func TestDemoVariants(t *testing.T) {
	for _, ref := range []string{"QM-205", "QM-212", repo + "/testdata/variants/QM-205.yaml"} {
		t.Run(filepath.Base(ref), func(t *testing.T) {
			v, err := LoadVariant(ref)
			if err != nil {
				t.Fatal(err)
			}
			// JEDEC JESD13-B, buffered inputs: VIL max 30 %, VIH min 70 % of
			// VDD at 5 and 10 V: the threshold's guaranteed corners (QM-212
			// states its threshold by supply: read it at 10 V).
			at := map[string]float64{"QM-205": 5, "QM-212": 10}[v.Name]
			c, err := v.Circuit.AtSupply(at)
			if err != nil {
				t.Fatal(err)
			}
			if th := c.ThresholdFrac; th.Min != 0.30 || th.Max != 0.70 {
				t.Errorf("threshold_frac corners %v/%v at %g V, want JESD13-B 0.30/0.70", th.Min, th.Max, at)
			}
			if v.Serial == nil || !v.Serial.MatchString(strings.ReplaceAll(v.Name, "-", "")+"-000123") {
				t.Errorf("serial pattern %q rejects a plain serial", v.SerialPattern)
			}
			if len(v.Source.Hash) != 64 || len(v.Source.Raw) == 0 {
				t.Errorf("hash %q, %d raw bytes", v.Source.Hash, len(v.Source.Raw))
			}
			if v.Plan != DefaultPlanSection() {
				t.Errorf("plan %+v, want defaults", v.Plan)
			}
		})
	}
	a, _ := LoadVariant("QM-205")
	b, _ := LoadVariant(repo + "/testdata/variants/QM-205.yaml")
	if a.Source.Hash != b.Source.Hash {
		t.Error("built-in and file copy hash differently")
	}
}

func TestVariantPlanSection(t *testing.T) {
	raw, err := os.ReadFile(repo + "/testdata/variants/QM-205.yaml")
	if err != nil {
		t.Fatal(err)
	}
	raw = append(raw, []byte(`plan:
  power_settle_ms: 20
  idle_periods: 4
  search: {strategy: staircase, se_target_pf: 0.05}
  retest: {max: 0, flag_pass_after_fail: false}
`)...)
	v, err := parseVariant(newSource("x.yaml", raw))
	if err != nil {
		t.Fatal(err)
	}
	want := DefaultPlanSection()
	want.PowerSettleMS, want.IdlePeriods = 20, 4
	want.Search.Strategy, want.Search.SETargetPF = "staircase", 0.05
	want.Retest = PlanRetest{Max: 0, FlagPassAfterFail: false}
	if v.Plan != want {
		t.Errorf("plan %+v, want %+v", v.Plan, want)
	}
}

func TestUnknownVariantName(t *testing.T) {
	_, err := LoadVariant("QM-999")
	if err == nil || !strings.Contains(err.Error(), "QM-205, QM-212") {
		t.Errorf("err = %v, want the built-in names listed", err)
	}
	if _, err := LoadVariant("no/such/file.yaml"); err == nil || !strings.Contains(err.Error(), "read variant") {
		t.Errorf("missing file: %v", err)
	}
}

func TestDemoStation(t *testing.T) {
	for _, ref := range []string{"demo-sim", repo + "/testdata/stations/demo-sim.yaml"} {
		s, err := LoadStation(ref)
		if err != nil {
			t.Fatal(err)
		}
		if s.Driver != "sim" || len(s.Ladder.RungsPF) != 8 || len(s.Pins.Ladder) != 8 || s.Ladder.StrayPF != 4.6 ||
			s.Ladder.Operate.Microseconds() != 500 || s.Ladder.Bounce.Microseconds() != 500 || s.Pins.Clock != "GPIO22" {
			t.Errorf("demo station parsed as %+v", s)
		}
	}
	raw, _ := os.ReadFile(repo + "/testdata/stations/demo-sim.yaml")
	raw = append(raw, []byte("uncertainty_pf: 0.25\nsim:\n  noise_mv_at_5v: 12\n  defect_rates: {open_pad: 0.01}\n  faults: {rung_stuck_open: [3]}\n")...)
	s, err := parseStation(newSource("x.yaml", raw))
	if err != nil {
		t.Fatal(err)
	}
	if s.UncertaintyPF != 0.25 || s.Sim.NoiseMVAt5V != 12 || s.Sim.DefectRates["open_pad"] != 0.01 ||
		len(s.Sim.Faults.RungStuckOpen) != 1 || s.Sim.Faults.RungStuckOpen[0] != 3 {
		t.Errorf("uncertainty %v, sim %+v", s.UncertaintyPF, s.Sim)
	}
	// The realism floor (DEVELOPERS.md "Simulator realism floor") is the default when the section is absent.
	if s, _ := LoadStation("demo-sim"); s.Sim.NoiseMVAt5V != 10 || s.Sim.JitterNs != 1 || s.Sim.RungErrSDPF != 0.05 {
		t.Errorf("sim defaults %+v", s.Sim)
	}
	bad := append(raw[:len(raw):len(raw)], []byte("  bogus: 1\n")...)
	if _, err := parseStation(newSource("x.yaml", bad)); err == nil || err.Error() != "x.yaml: unknown key sim.bogus" {
		t.Errorf("unknown sim key: %v", err)
	}
}
