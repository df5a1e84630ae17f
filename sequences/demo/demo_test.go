package demo

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"padline/store"
)

// shiftOf runs a demo shift of QM-205 on the built-in simulated station
// and returns it with the first pass's units as they streamed.
func shiftOf(t *testing.T, o Options) (*Result, []Unit) {
	t.Helper()
	o.Variant, o.Station = "QM-205", "demo-sim"
	if o.Search == "" {
		o.Search = "bracket"
	}
	var us []Unit
	o.EachUnit = func(u Unit) error { us = append(us, u); return nil }
	res, err := Run(context.Background(), o)
	if err != nil {
		t.Fatal(err)
	}
	return res, us
}

// The shift's statistics are recomputed here from the units beside the
// simulator's ground truth (fixture/sim's own physics, which never calls the
// timing model): counts, defect outcomes, and the trip error of good units.
func TestShiftAgainstGroundTruth(t *testing.T) {
	res, us := shiftOf(t, Options{Units: 200, Seed: 11})
	s := res.Summary().Passes[0]
	if len(us) != 200 || s.Units != 200 {
		t.Fatalf("%d units, summary %d", len(us), s.Units)
	}
	var pass, fail, sf, good int
	var errs []float64
	outcomes := map[string]map[string]int{}
	for _, u := range us {
		switch u.Verdict {
		case "pass":
			pass++
		case "fail":
			fail++
		default:
			sf++
		}
		for _, d := range u.Defects {
			if outcomes[d] == nil {
				outcomes[d] = map[string]int{}
			}
			o := u.FailCode
			if o == "" {
				o = "pass"
			}
			outcomes[d][o]++
		}
		if len(u.Defects) > 0 {
			continue
		}
		good++
		if u.TripPF == nil || u.TrueTripPF == nil {
			t.Errorf("good unit %s has no measured or no true trip point", u.Serial)
			continue
		}
		errs = append(errs, *u.TripPF-*u.TrueTripPF)
		// A good unit whose true trip lies a pF or more inside the test
		// limits must pass: no false fail away from the limits.
		lo, hi := res.Limits.TestLimits.Low, res.Limits.TestLimits.High
		if *u.TrueTripPF > lo+1 && *u.TrueTripPF < hi-1 && u.Verdict != "pass" {
			t.Errorf("good unit %s, true trip %.2f pF inside %.2f … %.2f: %s %s", u.Serial, *u.TrueTripPF, lo, hi, u.Verdict, u.FailCode)
		}
	}
	if s.Pass != pass || s.Fail != fail || s.StationFault != sf || s.GoodUnits != good {
		t.Errorf("summary %d/%d/%d good %d, recount %d/%d/%d good %d", s.Pass, s.Fail, s.StationFault, s.GoodUnits, pass, fail, sf, good)
	}
	if math.Abs(s.YieldPct-100*float64(pass)/200) > 1e-9 {
		t.Errorf("yield %.3f %%, recount %.3f %%", s.YieldPct, 100*float64(pass)/200)
	}
	for d, m := range outcomes {
		for o, n := range m {
			if s.DefectOutcomes[d][o] != n {
				t.Errorf("defect %s → %s: summary %d, recount %d", d, o, s.DefectOutcomes[d][o], n)
			}
		}
	}
	var sum, sq, maxErr float64
	for _, e := range errs {
		sum, sq, maxErr = sum+e, sq+e*e, math.Max(maxErr, math.Abs(e))
	}
	n := float64(len(errs))
	bias, rms := sum/n, math.Sqrt(sq/n)
	spread := math.Sqrt(math.Max(0, sq/n-bias*bias))
	if math.Abs(s.TripBiasPF-bias) > 1e-9 || math.Abs(s.TripRMSErrPF-rms) > 1e-9 || math.Abs(s.TripMaxErrPF-maxErr) > 1e-9 {
		t.Errorf("summary bias %.4f rms %.4f max %.4f, recount %.4f %.4f %.4f", s.TripBiasPF, s.TripRMSErrPF, s.TripMaxErrPF, bias, rms, maxErr)
	}
	// Accuracy against the ground truth: the spread about the bias within
	// the demo's 0.2 pF target (DEVELOPERS.md "Simulator realism floor":
	// transitions 0.4–0.9 pF wide, so a search that found only the ladder
	// step would scatter more), and the bias, which the rungs' calibration
	// error (σ 0.05 pF each) makes systematic, under the smallest rung.
	if spread > 0.2 || math.Abs(bias) > 0.5 {
		t.Errorf("trip error on %d good units: bias %+.3f pF, spread %.3f pF", len(errs), bias, spread)
	}
}

// The same seed gives the same shift, unit by unit; another seed another.
func TestShiftSameSeedSameShift(t *testing.T) {
	enc := func(_ *Result, us []Unit) string {
		b, err := json.Marshal(us)
		if err != nil {
			t.Fatal(err)
		}
		return string(b)
	}
	_, a := shiftOf(t, Options{Units: 40, Seed: 5})
	_, b := shiftOf(t, Options{Units: 40, Seed: 5})
	if enc(nil, a) != enc(nil, b) {
		t.Errorf("seed 5 twice gave two shifts")
	}
	_, c := shiftOf(t, Options{Units: 40, Seed: 6})
	if enc(nil, a) == enc(nil, c) {
		t.Errorf("seeds 5 and 6 gave the same shift")
	}
	// Serials in test order, the same for every seed.
	for i := range a {
		if a[i].Serial != c[i].Serial || (i > 0 && a[i].Serial <= a[i-1].Serial) {
			t.Fatalf("serial %d: %s / %s", i, a[i].Serial, c[i].Serial)
		}
	}
}

// progressLog counts what a shift tells its progress bars.
type progressLog struct {
	labels      []string
	steps, done int
}

func (p *progressLog) bar(label string, n int) Progress { p.labels = append(p.labels, label); return p }
func (p *progressLog) Step()                            { p.steps++ }
func (p *progressLog) Done()                            { p.done++ }

// Shift streams one JSON line per unit in test order, then the summary;
// --compare-search runs every strategy, tells a progress bar per pass, and
// logs the shift once.
func TestShiftJSONLinesAndPasses(t *testing.T) {
	var prog progressLog
	db := filepath.Join(t.TempDir(), "shift.db")
	var out bytes.Buffer
	o := Options{Variant: "QM-205", Station: "demo-sim", Units: 12, Seed: 2, Search: "bracket", Compare: true, DB: db, Progress: prog.bar}
	if err := Shift(context.Background(), &out, o, true); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(out.String()), "\n")
	if len(lines) != 13 {
		t.Fatalf("%d lines, want 12 units and the summary", len(lines))
	}
	prev := ""
	for _, l := range lines[:12] {
		var u Unit
		if err := json.Unmarshal([]byte(l), &u); err != nil || u.Serial <= prev {
			t.Fatalf("unit line %q after %s: %v", l, prev, err)
		}
		prev = u.Serial
	}
	var sum Summary
	if err := json.Unmarshal([]byte(lines[12]), &sum); err != nil || !sum.Summary || len(sum.Passes) != 3 {
		t.Fatalf("summary %+v: %v", sum, err)
	}
	if len(prog.labels) != 3 || prog.steps != 36 || prog.done != 3 || !strings.Contains(prog.labels[2], "staircase") {
		t.Errorf("progress %+v", prog)
	}
	s, err := store.Open(db)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	n := 0
	for _, err := range s.Runs(context.Background(), store.Filter{Variant: "QM-205"}) {
		if err != nil {
			t.Fatal(err)
		}
		n++
	}
	if n != 12 {
		t.Errorf("%d runs logged, want the first pass's 12", n)
	}
}

// Without --db the shift log is temporary and gone afterwards; the text
// summary names the shift.
func TestShiftTextAndTemporaryLog(t *testing.T) {
	var out bytes.Buffer
	res, _ := shiftOf(t, Options{Units: 5, Seed: 1})
	if res.Kept {
		t.Fatalf("a temporary log kept")
	}
	if _, err := os.Stat(res.DBPath); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("temporary log %s still there: %v", res.DBPath, err)
	}
	WriteText(&out, res)
	if !strings.Contains(out.String(), "simulated shift  QM-205 on") || !strings.Contains(out.String(), ", 5 units") {
		t.Errorf("text:\n%s", out.String())
	}
	if _, err := Run(context.Background(), Options{Variant: "QM-205", Station: "demo-sim", Units: 0}); err == nil {
		t.Errorf("0 units accepted")
	}
}

func TestBar(t *testing.T) {
	var b bytes.Buffer
	p := Bar(&b, false)("testing", 100)
	for range 100 {
		p.Step()
	}
	p.Done()
	out := b.String()
	if !strings.Contains(out, "\rtesting [==============================] 100/100\n") || strings.Count(out, "\r") > 40 {
		t.Errorf("bar drew %d times: %q", strings.Count(out, "\r"), out[max(0, len(out)-80):])
	}
	b.Reset()
	q := Bar(&b, true)("testing", 10)
	q.Step()
	q.Done()
	if b.Len() != 0 {
		t.Errorf("quiet bar drew %q", b.String())
	}
}
