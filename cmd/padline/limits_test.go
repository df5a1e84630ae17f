package main

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
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
	for _, want := range []string{"clock", "trip point", "nominal 29.70 pF", "Monte Carlo (5000 draws, seed 9)", "99.865 %",
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
