package main

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"padline/sequences/session"
)

// runCLI runs padline in-process and returns its exit status and output.
func runCLI(t *testing.T, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var out, errOut bytes.Buffer
	code = run(context.Background(), args, strings.NewReader(""), &out, &errOut)
	return code, out.String(), errOut.String()
}

func TestLimitsJSON(t *testing.T) {
	for _, ref := range []string{"QM-205", "QM-212", repo + "/testdata/variants/QM-212.yaml"} {
		t.Run(ref, func(t *testing.T) {
			code, out, errOut := runCLI(t, "limits", "--variant", ref, "--json", "--draws", "5000")
			if code != 0 {
				t.Fatalf("exit %d: %s", code, errOut)
			}
			var got map[string]any
			if err := json.Unmarshal([]byte(out), &got); err != nil {
				t.Fatalf("not one JSON object: %v\n%s", err, out)
			}
			// The fields the limits report must carry.
			for _, path := range []string{
				"trip_pf.nominal", "trip_pf.corner_low", "trip_pf.corner_high", "trip_pf.mc_mean", "trip_pf.mc_sd",
				"clock_hz.nominal", "clock_hz.corner_low", "clock_hz.corner_high",
				"test_limits_pf.low", "test_limits_pf.high", "guard_band_pf", "predicted.cpk", "predicted.yield",
			} {
				var cur any = got
				for _, k := range strings.Split(path, ".") {
					m, _ := cur.(map[string]any)
					cur = m[k]
				}
				if _, ok := cur.(float64); !ok {
					t.Errorf("%s missing or not a number: %v", path, cur)
				}
			}
			if got["guard_band_pf"] != session.DefaultUncertaintyPF {
				t.Errorf("guard band %v, want default %v", got["guard_band_pf"], session.DefaultUncertaintyPF)
			}
		})
	}
}

func TestLimitsReport(t *testing.T) {
	code, out, errOut := runCLI(t, "limits", "--variant", "QM-205", "--uncertainty-pf", "0.5", "--draws", "5000", "--seed", "9")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	// Nominal trip worked by hand: the gate's 400 Ω (0.4 V / 1.0 mA) joins
	// R_s, C_total = 2.96 µs/(100.4 kΩ·ln 2) = 42.53 pF, less 13 pF = 29.53 pF;
	// the loaded clock pin crosses 0.25 ns later, +0.01 pF.
	for _, want := range []string{"clock", "trip point", "nominal 29.54 pF", "sensitivity", "threshold_frac", "race        2960 ns", "Monte Carlo (5000 draws, seed 9)", "99.865 %",
		"spec window no trip at ≤ 10.00 pF, trip by 60.00 pF", "guard band  0.50 pF", "test limits 10.50 … 59.50 pF", "Cpk", "yield"} {
		if !strings.Contains(out, want) {
			t.Errorf("report lacks %q:\n%s", want, out)
		}
	}
	_, again, _ := runCLI(t, "limits", "--variant", "QM-205", "--uncertainty-pf", "0.5", "--draws", "5000", "--seed", "9")
	if again != out {
		t.Error("same seed printed a different report")
	}
}

func TestLimitsWarnsWhenGuardBandEatsTheWindow(t *testing.T) {
	code, out, _ := runCLI(t, "limits", "--variant", "QM-205", "--uncertainty-pf", "30", "--draws", "2000", "--json")
	if code != 0 {
		t.Fatalf("exit %d", code)
	}
	var rep struct {
		TestLimits struct{ Low, High float64 } `json:"test_limits_pf"`
		Warnings   []string                    `json:"warnings"`
	}
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatal(err)
	}
	if math.Abs(rep.TestLimits.Low-40) > 1e-9 || math.Abs(rep.TestLimits.High-30) > 1e-9 || !strings.Contains(strings.Join(rep.Warnings, "|"), "collapse") {
		t.Errorf("limits %+v warnings %q", rep.TestLimits, rep.Warnings)
	}
}

func TestLimitsErrors(t *testing.T) {
	cases := []struct {
		name string
		args []string
		want string
	}{
		{"no variant", []string{"limits"}, "--variant is required"},
		{"unknown name", []string{"limits", "--variant", "QM-999"}, "QM-205, QM-212"},
		{"bad file", []string{"limits", "--variant", repo + "/testdata/config/bad/variant-unknown-key.yaml"}, "unknown key oscillator.r_ohmm"},
		{"negative uncertainty", []string{"limits", "--variant", "QM-205", "--uncertainty-pf", "-1"}, "uncertainty"},
		{"zero draws", []string{"limits", "--variant", "QM-205", "--draws", "0"}, "--draws"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			code, out, errOut := runCLI(t, tc.args...)
			if code == 0 || out != "" {
				t.Errorf("exit %d, stdout %q", code, out)
			}
			if !strings.Contains(errOut, tc.want) || strings.Count(errOut, "\n") != 1 {
				t.Errorf("stderr %q, want one line containing %q", errOut, tc.want)
			}
		})
	}
}

func TestLimitsHelp(t *testing.T) {
	code, out, _ := runCLI(t, "limits", "--help")
	if code != 0 {
		t.Fatalf("exit %d", code)
	}
	for _, want := range []string{"--variant", "--uncertainty-pf", "--draws", "--seed", "--json", "ISO 14253-1", "QM-205", "Examples:"} {
		if !strings.Contains(out, want) {
			t.Errorf("help lacks %q", want)
		}
	}
}

func TestLimitsGatesAndSensitivity(t *testing.T) {
	// The fast 9 V stress variant: a 130 ns race against a 60 ns edge warns;
	// QM-205 (2960 ns against 100 ns) does not. Both rank their inputs.
	fast := repo + "/sequences/timing/spicecheck/testdata/QM-909F.yaml"
	code, out, errOut := runCLI(t, "limits", "--variant", fast, "--draws", "500")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	for _, want := range []string{"WARNING     the race lasts 130 ns, only 2.2 clock edge times", "sensitivity what moves the trip point",
		"gates       R_out 294 Ω", "ideal gates would give trip 54.46 pF"} {
		if !strings.Contains(out, want) {
			t.Errorf("QM-909F report lacks %q:\n%s", want, out)
		}
	}
	code, out, _ = runCLI(t, "limits", "--variant", "QM-205", "--draws", "500")
	if code != 0 || strings.Contains(out, "race lasts") || !strings.Contains(out, "threshold_frac") {
		t.Errorf("QM-205 report (exit %d):\n%s", code, out)
	}
	code, out, _ = runCLI(t, "limits", "--variant", fast, "--draws", "500", "--json")
	var got struct {
		Gate struct {
			ShortRace bool    `json:"short_race"`
			ROhm      float64 `json:"r_out_ohm"`
		} `json:"gate"`
		Sensitivity []struct {
			Input string  `json:"input"`
			PF    float64 `json:"trip_pf"`
			Share float64 `json:"share"`
		} `json:"sensitivity"`
		Warnings []string `json:"warnings"`
	}
	if err := json.Unmarshal([]byte(out), &got); err != nil || code != 0 {
		t.Fatalf("json (exit %d): %v\n%s", code, err, out)
	}
	if !got.Gate.ShortRace || len(got.Sensitivity) == 0 || got.Sensitivity[0].Input != "delay_ns" || !strings.Contains(strings.Join(got.Warnings, "|"), "race lasts") {
		t.Errorf("json gate %+v sensitivity %+v warnings %q", got.Gate, got.Sensitivity, got.Warnings)
	}
}

// TestLimitsWarnsAllowUnusual: a value accepted by allow_unusual is said on
// stderr, naming file and key, and the report still comes out.
func TestLimitsWarnsAllowUnusual(t *testing.T) {
	raw, err := os.ReadFile(repo + "/testdata/config/good/variant-every-key.yaml")
	if err != nil {
		t.Fatal(err)
	}
	f := filepath.Join(t.TempDir(), "v.yaml")
	body := strings.Replace(string(raw), "c_f: {nom: 100.0e-9, tol_pct: 10}", "c_f: {nom: 22.0e-6, tol_pct: 10}", 1)
	if err := os.WriteFile(f, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	var out, errOut bytes.Buffer
	code := run(context.Background(), []string{"limits", "--variant", f, "--draws", "200"}, strings.NewReader(""), &out, &errOut)
	if code != 0 || !strings.Contains(errOut.String(), "warning: "+f+": oscillator.c_f.nom: 2.2e-5 F is outside the plausible") {
		t.Errorf("exit %d, stderr %q", code, errOut.String())
	}
}
