package drift_test

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"testing"

	"padline/store/drift"
)

// needR returns the path of Rscript with the spc package loaded, or skips
// (fails when PADLINE_REQUIRE_PARTS=1, as in CI) with a one-line reason.
func needR(t *testing.T) string {
	t.Helper()
	miss := func(reason string) {
		if os.Getenv("PADLINE_REQUIRE_PARTS") == "1" {
			t.Fatalf("R spc required (PADLINE_REQUIRE_PARTS=1): %s", reason)
		}
		t.Skipf("R spc not available: %s (apt-get install r-cran-spc)", reason)
	}
	r, err := exec.LookPath("Rscript")
	if err != nil {
		miss("no Rscript on PATH")
	}
	if out, err := exec.Command(r, "-e", "library(spc)").CombinedOutput(); err != nil {
		miss(fmt.Sprintf("library(spc): %v: %s", err, bytes.TrimSpace(out)))
	}
	return r
}

// rARL asks R spc for the zero-state ARL of one study cell.
func rARL(t *testing.T, rscript, chart string, shift float64) float64 {
	t.Helper()
	var expr string
	switch {
	case strings.HasPrefix(chart, "CUSUM k=0.5 h=4"):
		expr = fmt.Sprintf(`xcusum.arl(k=0.5, h=4, mu=%g, hs=0, sided="two")`, shift)
	case strings.HasPrefix(chart, "CUSUM k=0.5 h=5"):
		expr = fmt.Sprintf(`xcusum.arl(k=0.5, h=5, mu=%g, hs=0, sided="two")`, shift)
	case strings.HasPrefix(chart, "EWMA"):
		expr = fmt.Sprintf(`xewma.arl(l=%g, c=%g, mu=%g, zr=0, sided="two", limits="vacl")`, drift.DefaultLambda, drift.DefaultL, shift)
	default:
		t.Fatalf("no R spc expression for %q", chart)
	}
	out, err := exec.Command(rscript, "-e", fmt.Sprintf(`suppressMessages(library(spc)); cat(sprintf("%%.8g", %s))`, expr)).Output()
	if err != nil {
		t.Fatalf("R %s: %v", expr, err)
	}
	v, err := strconv.ParseFloat(strings.TrimSpace(string(out)), 64)
	if err != nil {
		t.Fatalf("R %s printed %q", expr, out)
	}
	return v
}

// Every CUSUM and EWMA cell of the run-length study: the reference ARL the
// study prints equals what R spc computes now (so the printed source is
// true), and the simulated ARL lies within 3 standard errors of it.
// Reference: R package spc (Knoth), xcusum.arl and xewma.arl.
func TestStudyMatchesRSpc(t *testing.T) {
	rscript := needR(t)
	if out, err := exec.Command(rscript, "-e", `cat(as.character(packageVersion("spc")))`).Output(); err == nil &&
		strings.TrimSpace(string(out)) != drift.RSpcVersion {
		t.Logf("R spc %s here, references computed with %s", strings.TrimSpace(string(out)), drift.RSpcVersion)
	}
	rows, err := drift.Study(20000, 1)
	if err != nil {
		t.Fatal(err)
	}
	checked := 0
	for _, r := range rows {
		if !strings.HasPrefix(r.Chart, "CUSUM") && !strings.HasPrefix(r.Chart, "EWMA") {
			continue
		}
		want := rARL(t, rscript, r.Chart, r.Shift)
		if math.IsNaN(r.Published) || math.Abs(r.Published-want) > 5e-4*want {
			t.Errorf("%s at %gσ: study prints %.5g, R spc computes %.5g", r.Chart, r.Shift, r.Published, want)
		}
		if !strings.Contains(r.Source, "R spc") {
			t.Errorf("%s at %gσ: source %q does not name R spc", r.Chart, r.Shift, r.Source)
		}
		z := (r.Result.Mean - want) / r.Result.SE
		t.Logf("%-34s %3.1fσ  simulated %8.2f ± %6.2f  R spc %8.3f  z %+5.2f", r.Chart, r.Shift, r.Result.Mean, r.Result.SE, want, z)
		if math.Abs(z) > 3 || r.Result.Censored != 0 {
			t.Errorf("%s at %gσ: simulated ARL %.2f ± %.2f is %.1f SE from R spc's %.3f (censored %d)",
				r.Chart, r.Shift, r.Result.Mean, r.Result.SE, z, want, r.Result.Censored)
		}
		checked++
	}
	if checked != 12 {
		t.Errorf("checked %d CUSUM/EWMA cells, want 12", checked)
	}
}
