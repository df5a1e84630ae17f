package spicecheck_test

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"text/template"
	"time"

	"github.com/spf13/viper"

	"padline/sequences/timing"
)

// needNgspice returns the ngspice binary, or skips (fails under
// PADLINE_REQUIRE_PARTS=1) when it is missing.
func needNgspice(t *testing.T) string {
	t.Helper()
	bin, err := exec.LookPath("ngspice")
	if err != nil {
		msg := "ngspice not on PATH (apt-get install ngspice): timing model not cross-checked"
		if os.Getenv("PADLINE_REQUIRE_PARTS") == "1" {
			t.Fatal(msg)
		}
		t.Skip(msg)
	}
	return bin
}

// netlist is the parsed testdata/race.cir template.
var netlist = template.Must(template.ParseFiles(filepath.Join("testdata", "race.cir")))

// deck is one simulation: the circuit's values in SI units and the run's
// length, all taken from the circuit's components (never from the model).
type deck struct {
	Name                  string
	VDD, VP, VN, Theta    float64
	Ro, Co, Rg, Rs, CNode float64
	Race, Ramp            float64 // seconds
	VCo0                  float64 // C_o at the start: V_N, where a charging half begins
	TStep, TStop, TMax    float64
	N, N1                 int // measured falling edge and the one before
}

// newDeck builds the deck for point p with cExtPF at the pad. The run reaches
// falling edge n; its time-step ceiling is a fixed fraction of R_o·C_o.
func newDeck(name string, p timing.Point, cExtPF float64, n int) deck {
	rg := math.Max(p.GateROhm, 1e-3) // SPICE wants R > 0: 1 mΩ is an ideal gate
	rc := (p.OscROhm + rg) * p.OscCF
	return deck{
		Name: name, VDD: p.SupplyV, VP: p.VtPosFrac, VN: p.VtNegFrac, Theta: p.ThresholdFrac,
		Ro: p.OscROhm, Co: p.OscCF, Rg: rg, Rs: p.SenseROhm,
		CNode: (p.InputPF + p.PadPF + cExtPF) * 1e-12,
		Race:  (p.DelayNS - p.SetupNS) * 1e-9, Ramp: p.EdgeNS * 1e-9 / 0.8,
		VCo0: p.VtNegFrac * p.SupplyV, TStep: rc / 1e4, TMax: rc / 1e4,
		// The run ends 10 % past falling edge n + ½ of a period, sized with
		// the textbook relaxation-oscillator period (Horowitz & Hill): if it
		// were short, the .meas lines would fail, not pass.
		TStop: 1.1 * (float64(n) + 0.5) * rc * (math.Log((1-p.VtNegFrac)/(1-p.VtPosFrac)) + math.Log(p.VtPosFrac/p.VtNegFrac)),
		N:     n, N1: n - 1,
	}
}

// result is what one ngspice run measured.
type result struct {
	PeriodS, VSample, VHi, SampleS float64
}

var measLine = regexp.MustCompile(`(?m)^(\w+)\s*=\s*([-+0-9.eE]+)`)

// simulate renders d, runs ngspice in batch mode and parses the .meas lines.
func simulate(t *testing.T, bin string, d deck) result {
	t.Helper()
	var buf bytes.Buffer
	if err := netlist.Execute(&buf, d); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "race.cir")
	if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	out, err := exec.CommandContext(ctx, bin, "-b", path).CombinedOutput()
	if err != nil {
		t.Fatalf("%s: ngspice: %v\n%s", d.Name, err, out)
	}
	got := map[string]float64{}
	for _, m := range measLine.FindAllStringSubmatch(string(out), -1) {
		if f, err := strconv.ParseFloat(m[2], 64); err == nil {
			got[strings.ToLower(m[1])] = f
		}
	}
	for _, k := range []string{"fa", "fb", "vs", "vhi", "tsamp"} {
		if _, ok := got[k]; !ok {
			t.Fatalf("%s: ngspice printed no %s:\n%s", d.Name, k, out)
		}
	}
	return result{PeriodS: got["fb"] - got["fa"], VSample: got["vs"], VHi: got["vhi"], SampleS: got["tsamp"] - got["fb"]}
}

// simTrip runs ngspice at capacitances lo and hi around the trip point and
// refines by the secant on ln(v_sample) against 1/C_total (the exact
// relation of a pure RC decay) until the step is below 0.001 pF. It returns
// the simulator's trip point, its clock, and the runs at lo and hi.
func simTrip(t *testing.T, bin, name string, p timing.Point, lo, hi float64, n int) (trip, hz float64, rLo, rHi result) {
	t.Helper()
	vt := p.ThresholdFrac * p.SupplyV
	cTot := func(c float64) float64 { return p.InputPF + p.PadPF + c }
	rLo = simulate(t, bin, newDeck(name, p, lo, n))
	rHi = simulate(t, bin, newDeck(name, p, hi, n))
	a, ra, b, rb := lo, rLo, hi, rHi
	for range 4 {
		ya, yb := math.Log(ra.VSample/vt), math.Log(rb.VSample/vt)
		xa, xb := 1/cTot(a), 1/cTot(b)
		x := xa - ya*(xb-xa)/(yb-ya)
		c := 1/x - p.InputPF - p.PadPF
		if math.Abs(c-b) < 1e-3 {
			return c, 1 / rb.PeriodS, rLo, rHi
		}
		a, ra = b, rb
		b, rb = c, simulate(t, bin, newDeck(name, p, c, n))
	}
	return b, 1 / rb.PeriodS, rLo, rHi
}

// readVariant reads the circuit keys of a variant file into a timing.Circuit
// (the full parser, with its checks, lives in cmd/padline and is tested
// there). A toleranced key is a number, {nom, tol_pct} or {min, typ, max}.
func readVariant(t *testing.T, path string) timing.Circuit {
	t.Helper()
	v := viper.New()
	v.SetConfigFile(path)
	if err := v.ReadInConfig(); err != nil {
		t.Fatal(err)
	}
	val := func(x any) timing.Value {
		if f, ok := num(x); ok {
			return timing.Fixed(f)
		}
		m, _ := x.(map[string]any)
		if nom, ok := num(m["nom"]); ok {
			tol, _ := num(m["tol_pct"])
			return timing.Tol(nom, tol)
		}
		lo, _ := num(m["min"])
		typ, _ := num(m["typ"])
		hi, _ := num(m["max"])
		out := timing.Range(lo, typ, hi)
		out.SD, _ = num(m["sd"])
		return out
	}
	get := func(key string) timing.Value {
		if !v.IsSet(key) {
			return timing.Value{}
		}
		return val(v.Get(key))
	}
	gateR := func(m map[string]any, prefix string) (timing.Value, bool) {
		if x, ok := m[prefix+"r_out_ohm"]; ok {
			return val(x), true
		}
		if x, ok := m[prefix+"i_out_ma"]; ok {
			at, _ := num(m[prefix+"i_out_at_v"])
			r, err := timing.GateROhmFromCurrent(val(x), at)
			if err != nil {
				t.Fatal(err)
			}
			return r, true
		}
		return timing.Value{}, false
	}
	c := timing.Circuit{
		SupplyV: get("supply_v"), OscROhm: get("oscillator.r_ohm"), OscCF: get("oscillator.c_f"),
		VtPosFrac: get("oscillator.vt_pos_frac"), VtNegFrac: get("oscillator.vt_neg_frac"),
		SenseROhm: get("sense.r_ohm"), PadPF: get("sense.pad_pf"), InputPF: get("sense.input_pf"),
		DelayNS: get("clock_path.delay_ns"), SetupNS: get("clock_path.setup_ns"),
		ThresholdFrac: get("threshold_frac"), EdgeNS: get("gate.edge_ns"),
	}
	if g, ok := v.Get("gate").(map[string]any); ok {
		c.GateROhm, _ = gateR(g, "")
	}
	if rows, ok := v.Get("by_supply").([]any); ok {
		tab := &timing.SupplyTable{Inputs: map[string][]timing.Value{}}
		for _, r := range rows {
			m := r.(map[string]any)
			s, _ := num(m["supply_v"])
			tab.SupplyV = append(tab.SupplyV, s)
			for key, in := range map[string]string{"delay_ns": "delay_ns", "setup_ns": "setup_ns", "threshold_frac": "threshold_frac", "edge_ns": "edge_ns"} {
				if x, ok := m[key]; ok {
					tab.Inputs[in] = append(tab.Inputs[in], val(x))
				}
			}
			if g, ok := gateR(m, ""); ok {
				tab.Inputs["gate_r_ohm"] = append(tab.Inputs["gate_r_ohm"], g)
			}
		}
		c.BySupply = tab
	}
	if err := c.Validate(); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	return c
}

func num(x any) (float64, bool) {
	switch v := x.(type) {
	case int:
		return float64(v), true
	case float64:
		return v, true
	}
	return 0, false
}

// A case is one circuit at its nominal point.
type spiceCase struct {
	name string
	p    timing.Point
	n    int // falling edge measured (enough periods for the steady state)
}

func variantCase(t *testing.T, file string) spiceCase {
	c := readVariant(t, file)
	return spiceCase{name: strings.TrimSuffix(filepath.Base(file), ".yaml"), p: c.Nominal(), n: 3}
}

// implicitCase is a synthetic circuit whose sense node does not reach the
// supply between samples: τ ≈ 0.3 ms against 1.1 ms half periods, so v_hi
// (the start voltage) solves the periodic steady state, not V_DD.
func implicitCase() spiceCase {
	return spiceCase{name: "implicit", n: 5, p: timing.Point{
		SupplyV: 5, OscROhm: 22e3, OscCF: 100e-9, VtPosFrac: 0.62, VtNegFrac: 0.38,
		SenseROhm: 4.7e6, PadPF: 8, InputPF: 5, DelayNS: 300e3, SetupNS: 40, ThresholdFrac: 0.5,
	}}
}

func ideal(p timing.Point) timing.Point { p.GateROhm, p.EdgeNS = 0, 0; return p }

var (
	demoFiles = []string{"../../../testdata/variants/QM-205.yaml", "../../../testdata/variants/QM-212.yaml"}
	fastFile  = "testdata/QM-909F.yaml"
)

// TestIdealGatesAgainstNgspice: with ideal gates the model is exact, so
// ngspice must agree on which side of the trip point a capacitance lies
// (no latch at trip×0.995 − 0.05 pF, latch at trip×1.005 + 0.05 pF) and on
// the clock within 0.1 % — for each demo variant and a case whose sense node
// does not reach the supply (the implicit start voltage).
func TestIdealGatesAgainstNgspice(t *testing.T) {
	bin := needNgspice(t)
	cases := []spiceCase{implicitCase()}
	for _, f := range demoFiles {
		cases = append(cases, variantCase(t, f))
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			t.Parallel()
			p := ideal(tc.p)
			trip, err := timing.TripPF(p)
			if err != nil {
				t.Fatal(err)
			}
			_, _, hz := timing.Oscillator(p)
			vt := p.ThresholdFrac * p.SupplyV
			lo, hi := trip*0.995-0.05, trip*1.005+0.05
			simT, simHz, rLo, rHi := simTrip(t, bin, tc.name+" ideal", p, lo, hi, tc.n)
			if rLo.VSample >= vt {
				t.Errorf("at %.3f pF (trip×0.995−0.05) the latch sets: D %.5f V ≥ V_T %.4f V", lo, rLo.VSample, vt)
			}
			if rHi.VSample <= vt {
				t.Errorf("at %.3f pF (trip×1.005+0.05) the latch stays clear: D %.5f V ≤ V_T %.4f V", hi, rHi.VSample, vt)
			}
			if d := math.Abs(hz/simHz - 1); d > 0.001 {
				t.Errorf("clock: model %.3f Hz, ngspice %.3f Hz (%.3f %%, want ≤ 0.1 %%)", hz, simHz, 100*d)
			}
			if tc.name == "implicit" {
				if vh := timing.VHi(p, trip); vh > 0.99*p.SupplyV {
					t.Errorf("implicit case: v_hi %.3f V reaches the supply; the case does not test the implicit solution", vh)
				}
				if vh := timing.VHi(p, hi); math.Abs(vh-rHi.VHi) > 0.002*p.SupplyV {
					t.Errorf("implicit case: v_hi model %.4f V, ngspice %.4f V", vh, rHi.VHi)
				}
			}
			t.Logf("| %-9s | ideal | %8.3f | %8.3f | %+6.3f %% | %9.2f | %9.2f | %+6.3f %% |",
				tc.name, trip, simT, 100*(trip/simT-1), hz, simHz, 100*(hz/simHz-1))
		})
	}
}

// TestGateEffectsAgainstNgspice: with the gates' output resistance and edge
// time in the netlist, the extended model is within 2 % of ngspice on trip
// point and clock for each demo variant and the fast 9 V low-R_s variant.
// The ideal-gate model's error on the same circuit is logged beside it.
func TestGateEffectsAgainstNgspice(t *testing.T) {
	bin := needNgspice(t)
	var cases []spiceCase
	for _, f := range append(demoFiles, fastFile) {
		cases = append(cases, variantCase(t, f))
	}
	// The fast variant at its threshold corners with its slowest edge: away
	// from θ = 0.5 the ramp's midpoint and the clock path's crossing no
	// longer coincide, so the edge itself moves the trip point.
	for _, th := range []float64{0.3, 0.7} {
		c := variantCase(t, fastFile)
		c.name = fmt.Sprintf("909F θ%.1f", th)
		c.p.ThresholdFrac, c.p.EdgeNS = th, 100
		cases = append(cases, c)
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			t.Parallel()
			p := tc.p
			if p.GateROhm == 0 || p.EdgeNS == 0 {
				t.Fatalf("%s states no gate figures", tc.name)
			}
			trip, err := timing.TripPF(p)
			if err != nil {
				t.Fatal(err)
			}
			idealTrip, _ := timing.TripPF(ideal(p))
			_, _, hz := timing.Oscillator(p)
			_, _, idealHz := timing.Oscillator(ideal(p))
			simT, simHz, _, _ := simTrip(t, bin, tc.name+" gates", p, trip*0.99, trip*1.01, tc.n)
			if d := math.Abs(trip/simT - 1); d > 0.02 {
				t.Errorf("trip: model %.3f pF, ngspice %.3f pF (%.2f %%, want ≤ 2 %%)", trip, simT, 100*d)
			}
			if d := math.Abs(hz/simHz - 1); d > 0.02 {
				t.Errorf("clock: model %.3f Hz, ngspice %.3f Hz (%.2f %%, want ≤ 2 %%)", hz, simHz, 100*d)
			}
			t.Logf("| %-9s | gates | %8.3f | %8.3f | %+6.3f %% | %9.2f | %9.2f | %+6.3f %% | ideal model %+6.2f %% trip, %+6.2f %% clock |",
				tc.name, trip, simT, 100*(trip/simT-1), hz, simHz, 100*(hz/simHz-1),
				100*(idealTrip/simT-1), 100*(idealHz/simHz-1))
		})
	}
}

// TestNetlistRenders keeps the template honest without ngspice: every value
// reaches the deck.
func TestNetlistRenders(t *testing.T) {
	p := variantCase(t, fastFile).p
	var buf bytes.Buffer
	if err := netlist.Execute(&buf, newDeck("QM-909F", p, 40, 3)); err != nil {
		t.Fatal(err)
	}
	s := buf.String()
	for _, want := range []string{"rs=2700", "Gslew", fmt.Sprintf("vdd=%g", p.SupplyV), "FALL=3", "FALL=2"} {
		if !strings.Contains(s, want) {
			t.Errorf("netlist lacks %q", want)
		}
	}
}
