package sequences_test

import (
	"errors"
	"math"
	"strings"
	"testing"

	"padline/sequences"
)

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }

func TestType1Constructed(t *testing.T) {
	// Constructed data: 12 × 30.1, 12 × 29.9, 1 × 30.0 → mean 30.0,
	// s = √(24·0.01/24) = 0.1; reference 29.95 → bias +0.05; T = 6 pF.
	// Cg = 0.2·6/(6·0.1) = 2.0; Cgk = (0.6 − 0.05)/(3·0.1) = 1.8333
	// (convention: common practice, VDA 5 / company practice, from memory).
	var xs []float64
	for range 12 {
		xs = append(xs, 30.1, 29.9)
	}
	xs = append(xs, 30.0)
	r, err := sequences.Type1(xs, 29.95, 6)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name      string
		got, want float64
	}{
		{"mean", r.MeanPF, 30.0}, {"bias", r.BiasPF, 0.05}, {"sd", r.SDPF, 0.1},
		{"cg", r.Cg, 2.0}, {"cgk", r.Cgk, 0.55 / 0.3},
	} {
		if !near(c.got, c.want, 1e-9) {
			t.Errorf("%s = %.10g, want %.10g", c.name, c.got, c.want)
		}
	}
	if !r.Capable {
		t.Error("not capable at Cg 2.0, Cgk 1.83")
	}
	if _, err := sequences.Type1([]float64{1}, 1, 1); !errors.Is(err, sequences.ErrStudyData) {
		t.Errorf("one reading: %v", err)
	}
}

func TestGaugeRRHandExample(t *testing.T) {
	// Worked example built by hand (not from the manual): 2 appraisers ×
	// 3 parts × 2 trials. Ranges A: 2 0 1, B: 0 2 1 → R̿ = 1; appraiser
	// means 123/6 = 20.5 and 129/6 = 21.5 → X̄diff = 1; part means 11, 21,
	// 31 → Rp = 20. AIAG MSA 4th ed. (2010) with K1(2 trials) 0.8862,
	// K2(2 appraisers) 0.7071, K3(3 parts) 0.5231 (DEVELOPERS.md "References"):
	// EV = 0.8862; AV = √((0.7071)² − 0.8862²/6) = 0.607535;
	// GRR = √(EV² + AV²) = 1.074453; PV = 20·0.5231 = 10.462;
	// TV = 10.517030; %GRR = 10.2163 %; ndc = ⌊1.41·10.462/1.074453⌋ = 13.
	data := [][][]float64{
		{{10, 12}, {20, 20}, {30, 31}},
		{{11, 11}, {21, 23}, {31, 32}},
	}
	r, err := sequences.GaugeRR(data, 6)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name      string
		got, want float64
	}{
		{"R̿", r.RBarBar, 1}, {"X̄diff", r.XDiff, 1}, {"Rp", r.RP, 20},
		{"EV", r.EV, 0.8862}, {"AV", r.AV, 0.607535}, {"GRR", r.GRR, 1.074453},
		{"PV", r.PV, 10.462}, {"TV", r.TV, 10.517030}, {"%GRR", r.PctGRR, 10.2163},
		{"%tol", r.PctTol, 100 * 6 * 1.074453 / 6},
	} {
		if !near(c.got, c.want, 1e-4) {
			t.Errorf("%s = %.6f, want %.6f", c.name, c.got, c.want)
		}
	}
	if r.NDC != 13 || r.Verdict != sequences.GRRConditional {
		t.Errorf("ndc %d verdict %q, want 13 conditional", r.NDC, r.Verdict)
	}
}

func TestGaugeRRBadShapes(t *testing.T) {
	for name, d := range map[string][][][]float64{
		"empty":        nil,
		"4 trials":     {{{1, 2, 3, 4}, {1, 2, 3, 4}}, {{1, 2, 3, 4}, {1, 2, 3, 4}}},
		"1 appraiser":  {{{1, 2}, {3, 4}}},
		"ragged parts": {{{1, 2}, {3, 4}}, {{1, 2}}},
		"NaN":          {{{1, math.NaN()}, {3, 4}}, {{1, 2}, {3, 4}}},
	} {
		if _, err := sequences.GaugeRR(d, 0); !errors.Is(err, sequences.ErrStudyData) {
			t.Errorf("%s: %v, want ErrStudyData", name, err)
		}
	}
}

func TestGUMCombination(t *testing.T) {
	// JCGM 100:2008 eq. (10), unit sensitivities: u_c = √(0.3² + 0.4²) = 0.5
	// exactly; U = k·u_c = 1.0 with k = 2 (§6.2).
	b := sequences.Combine([]sequences.UComponent{{Name: "a", U: 0.3}, {Name: "b", U: 0.4}}, 2)
	if !near(b.UC, 0.5, 1e-12) || !near(b.U, 1.0, 1e-12) {
		t.Errorf("u_c %g U %g, want 0.5 1.0", b.UC, b.U)
	}
	// Resolution δ → δ/√12 = 0.2887·δ (JCGM 100:2008 F.2.2.1).
	if u := sequences.ResolutionU(0.5); !near(u, 0.144338, 1e-6) {
		t.Errorf("resolution 0.5 pF: u %g, want 0.144338", u)
	}
	// Station budget: δ 0.5 → 0.144338; cal 0.05 × √4 = 0.1; repeat 0.08:
	// u_c = √(0.0208333 + 0.01 + 0.0064) = 0.192959, U = 0.385918.
	sb := sequences.StationBudget(sequences.StationBudgetInput{StepPF: 0.5, CalPF: 0.05, ClosedRungs: 4, RepeatPF: 0.08, RepeatSource: "type-1"})
	if len(sb.Components) != 3 || !near(sb.UC, 0.192959, 1e-6) || !near(sb.U, 0.385918, 1e-6) {
		t.Errorf("station budget %+v", sb)
	}
}

// TestCombineChecksDrift: constructed deviations of three reference units
// with known rung weights (our own numbers, no outside source), explained
// by least squares over single drifts.
func TestCombineChecksDrift(t *testing.T) {
	ref := func(serial string, dev, allowed float64, w ...float64) sequences.RefCheck {
		rc := sequences.RefCheck{Reference: sequences.Reference{Serial: serial, AllowedDevPF: allowed}, DevPF: &dev, RungWeights: w}
		for r := range w {
			rc.Rungs = append(rc.Rungs, sequences.RungFinding{Rung: r, EnteredPF: float64(int(1) << r), Status: sequences.RungOK})
		}
		if math.Abs(dev) > allowed {
			rc.Faults = []string{"reference unit " + serial + ": deviation"}
		}
		return rc
	}
	for _, c := range []struct {
		name    string
		refs    []sequences.RefCheck
		want    string
		drifted int // rung marked drifted, −1 none
	}{
		// Rung 1 carries A and B fully, C not: only a rung-1 drift (true −
		// entered = −δ) moves A and B alike and leaves C.
		{"one rung", []sequences.RefCheck{
			ref("A", -0.5, 0.3, 0, 1, 0),
			ref("B", -0.5, 0.3, 1, 1, 0),
			ref("C", 0, 0.3, 0, 0, 1)}, "rung 1 (2.00 pF) drifted by +0.50 pF", 1},
		// Every reference rests on rung 1: it reads like the stray.
		{"like the stray", []sequences.RefCheck{
			ref("A", -0.5, 0.3, 0, 1, 0),
			ref("B", -0.5, 0.3, 1, 1, 0),
			ref("C", -0.5, 0.3, 0, 1, 1)}, "drift of rung 1 (2.00 pF) by +0.50 pF or the stray by +0.50 pF", -1},
		// Only C rests on rung 2: C's own drift fits as well.
		{"one reference", []sequences.RefCheck{
			ref("A", 0, 0.3, 0, 1, 0),
			ref("B", 0, 0.3, 1, 1, 0),
			ref("C", 0.5, 0.3, 0, 0, 1)}, "drift of rung 2 (4.00 pF) by -0.50 pF or reference unit C itself by +0.50 pF", -1},
	} {
		t.Run(c.name, func(t *testing.T) {
			rungs, faults := sequences.CombineChecks(c.refs)
			all := strings.Join(faults, "; ")
			if !strings.Contains(all, c.want) {
				t.Errorf("faults %q, want %q", faults, c.want)
			}
			for _, f := range rungs {
				if (f.Status == sequences.RungDrifted) != (f.Rung == c.drifted) {
					t.Errorf("rung %d: %s", f.Rung, f.Status)
				}
			}
		})
	}
}
