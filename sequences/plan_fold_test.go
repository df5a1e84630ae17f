package sequences_test

import (
	"context"
	"testing"
	"time"

	"padline/sequences"
)

// foldConfig is demoConfig with the clock, idle and release checks folded
// into the trip search.
func foldConfig() sequences.PlanConfig {
	c := demoConfig()
	c.FoldChecks = true
	return c
}

// TestPlanFoldedFailCodes: folding the checks keeps every fail code of the
// separate steps, with the same precedence (clock, idle, release, trip),
// and a good unit passes with its clock measured from the sample edges.
// trip_noisy is caught with a probability, not always: TestPlanNoisyNotWorse
// compares its rate.
func TestPlanFoldedFailCodes(t *testing.T) {
	tests := []struct {
		name string
		unit func(f *fakeStation)
		code sequences.FailCode
		step sequences.StepName // the step of the last measurement
	}{
		{"good unit", func(f *fakeStation) {}, "", "trip_search"},
		{"dead oscillator", func(f *fakeStation) { f.ClockHz = 0 }, sequences.CodeClockDead, "idle"},
		{"slow oscillator", func(f *fakeStation) { f.ClockHz = 300 }, sequences.CodeClockLow, "idle"},
		{"fast oscillator", func(f *fakeStation) { f.ClockHz = 700 }, sequences.CodeClockHigh, "idle"},
		{"latch stuck high", func(f *fakeStation) { f.StuckHigh = true }, sequences.CodeIdleLatched, "idle"},
		{"trips below the open ladder", func(f *fakeStation) { f.TripPF = 3 }, sequences.CodeIdleLatched, "idle"},
		{"never trips", func(f *fakeStation) { f.TripPF = 500 }, sequences.CodeNoTrip, "trip_search"},
		{"trips low", func(f *fakeStation) { f.TripPF = 12 }, sequences.CodeTripLow, "trip_search"},
		{"trips high", func(f *fakeStation) { f.TripPF = 55 }, sequences.CodeTripHigh, "trip_search"},
		{"sticky latch", func(f *fakeStation) { f.Sticky = true }, sequences.CodeStuckLatched, "release"},
		{"sticky latch tripping high", func(f *fakeStation) { f.Sticky, f.TripPF = true, 55 }, sequences.CodeStuckLatched, "release"},
		{"dead oscillator and latch stuck high", func(f *fakeStation) { f.ClockHz, f.StuckHigh = 0, true }, sequences.CodeClockDead, "idle"},
		{"slow oscillator and trips high", func(f *fakeStation) { f.ClockHz, f.TripPF = 300, 55 }, sequences.CodeClockLow, "idle"},
		{"latch stuck high and never trips", func(f *fakeStation) { f.StuckHigh, f.TripPF = true, 500 }, sequences.CodeIdleLatched, "idle"},
	}
	levels := demoLevels(t)
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			for seed := range uint64(seeds) {
				f := newFake(levels, seed)
				tc.unit(f)
				tr, run, err := execute(t, context.Background(), foldConfig(), f)
				if err != nil {
					t.Fatalf("seed %d: Execute: %v", seed, err)
				}
				want := sequences.Verdict(sequences.Fail)
				if tc.code == "" {
					want = sequences.Pass
				}
				if run.Verdict != want || run.FailCode != tc.code {
					t.Errorf("seed %d: verdict %q code %q, want %s %s", seed, run.Verdict, run.FailCode, want, tc.code)
				}
				if n := len(run.Measurements); n == 0 || run.Measurements[n-1].Step != tc.step {
					t.Errorf("seed %d: measurements %+v, want the last from step %s", seed, run.Measurements, tc.step)
				}
				if f.Calls["measure_clock"] != 0 {
					t.Errorf("seed %d: %d separate clock measurements", seed, f.Calls["measure_clock"])
				}
				if tr.Phases["clock"] != 0 || tr.Phases["release"] != 0 {
					t.Errorf("seed %d: phases %v: clock and release should be folded", seed, tr.Phases)
				}
				if tc.code == "" {
					m := measurements(t, run)
					// The fake's edges are exactly 1/465 Hz apart.
					if hz := m["clock_hz"].Value; hz < 464.999 || hz > 465.001 {
						t.Errorf("seed %d: clock %.4f Hz from the sample edges, want 465", seed, hz)
					}
					if m["release_lows"].Value < 1 || m["idle_highs"].Value != 0 || m["idle_lows"].Value < 8 {
						t.Errorf("seed %d: release %v idle %v %v", seed, m["release_lows"], m["idle_highs"], m["idle_lows"])
					}
				}
				f.checkSafe(t)
			}
		})
	}
}

// TestPlanFoldedSavesTime: on the fake QM-205 station the folded plan
// spends less fixture time per good unit than the separate checks (the
// clock step's gate and the release check's touch and wait are gone).
func TestPlanFoldedSavesTime(t *testing.T) {
	levels := demoLevels(t)
	var sep, fold time.Duration
	for seed := range uint64(seeds) {
		for _, c := range []struct {
			cfg sequences.PlanConfig
			sum *time.Duration
		}{{demoConfig(), &sep}, {foldConfig(), &fold}} {
			f := newFake(levels, seed)
			_, run, err := execute(t, context.Background(), c.cfg, f)
			if err != nil || run.Verdict != sequences.Pass {
				t.Fatalf("seed %d: %v %v", seed, run.Verdict, err)
			}
			*c.sum += run.Finished.Sub(run.Started)
		}
	}
	t.Logf("mean fixture time: separate checks %v, folded %v", sep/seeds, fold/seeds)
	// The clock step (16 periods + 1) and the release check (2 + 8
	// periods and two relay moves) are about 60 ms at 2.5 ms per sample.
	if fold >= sep-40*time.Millisecond*seeds {
		t.Errorf("folded %v, separate %v: want at least 40 ms per unit saved", fold/seeds, sep/seeds)
	}
}

// TestPlanNoisyNotWorse: the folded plan with the posterior search (guard
// samples in full only for suspect units) flags noisy units at least as
// often as the separate checks with the Laplace search (guard samples on
// every unit), on the same 300 units per case, within 2 %.
func TestPlanNoisyNotWorse(t *testing.T) {
	if testing.Short() {
		t.Skip("1,800 plan runs")
	}
	levels := demoLevels(t)
	cases := []struct {
		name string
		unit func(f *fakeStation)
	}{
		{"σ 3 pF", func(f *fakeStation) { f.SigmaPF = 3 }},
		{"σ 1 pF", func(f *fakeStation) { f.SigmaPF = 1 }},
		{"coin flip", func(f *fakeStation) {
			f.LatchFunc = func(c float64) float64 {
				if c < 20 {
					return 0
				}
				return 0.5
			}
		}},
	}
	const n = 300
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			var flagged [2]int
			for seed := range uint64(n) {
				for i, cfg := range []sequences.PlanConfig{demoConfig(), foldConfig()} {
					if i == 0 {
						cfg.Search.Refine = sequences.Laplace
					}
					f := newFake(levels, seed)
					tc.unit(f)
					_, run, err := execute(t, context.Background(), cfg, f)
					if err != nil {
						t.Fatal(err)
					}
					if run.FailCode == sequences.CodeTripNoisy {
						flagged[i]++
					}
				}
			}
			t.Logf("trip_noisy: Laplace, separate checks %d of %d; posterior, folded %d of %d", flagged[0], n, flagged[1], n)
			if flagged[1] < flagged[0]-n/50 {
				t.Errorf("folded posterior flags %d, Laplace %d of %d", flagged[1], flagged[0], n)
			}
		})
	}
}

// TestPlanSigmaPriorFromRecentUnits: after SigmaMinUnits passing units the
// plan searches with a prior on σ centred on their fitted σ (the fake
// unit's is 0.25 pF) and records it with each run.
func TestPlanSigmaPriorFromRecentUnits(t *testing.T) {
	levels := demoLevels(t)
	cfg := foldConfig()
	cfg.SigmaWindow, cfg.SigmaMinUnits = 30, 20
	p, err := sequences.NewPlan(cfg, levels)
	if err != nil {
		t.Fatal(err)
	}
	for i := range 25 {
		f := newFake(levels, uint64(100+i))
		run := &sequences.Run{Serial: "QM205-000001"}
		if _, err := p.Execute(context.Background(), f, f.clock, run); err != nil || run.Verdict != sequences.Pass {
			t.Fatalf("unit %d: %v %v", i, run.Verdict, err)
		}
		m := measurements(t, run)
		units := m["prior_sigma_units"].Value
		if want := float64(max(0, i)); i < 20 && units != 0 || i >= 20 && units != want {
			t.Errorf("unit %d: prior from %g units", i, units)
		}
		if i >= 20 {
			// 20+ fitted σ of a 0.25 pF unit: their geometric mean lies
			// well within a factor 1.5 of it.
			if sg := m["prior_sigma_pf"].Value; sg < 0.25/1.5 || sg > 0.25*1.5 {
				t.Errorf("unit %d: prior σ %.3f pF, the units' σ is 0.25 pF", i, sg)
			}
			if lsd := m["prior_sigma_log_sd"].Value; lsd < 0.15 || lsd > 0.7 {
				t.Errorf("unit %d: prior ln-SD %.3f", i, lsd)
			}
		}
	}
}

// plainStation hides every optional capability of the station it wraps.
type plainStation struct{ sequences.Station }

// TestPlanFoldedWithoutEdges: a station that cannot time its samples'
// edges still has its unit's clock measured and judged, apart.
func TestPlanFoldedWithoutEdges(t *testing.T) {
	levels := demoLevels(t)
	for _, tc := range []struct {
		hz   float64
		code sequences.FailCode
	}{{465, ""}, {300, sequences.CodeClockLow}, {0, sequences.CodeClockDead}} {
		f := newFake(levels, 1)
		f.ClockHz = tc.hz
		p, err := sequences.NewPlan(foldConfig(), levels)
		if err != nil {
			t.Fatal(err)
		}
		run := &sequences.Run{Serial: "QM205-000001"}
		if _, err := p.Execute(context.Background(), plainStation{f}, f.clock, run); err != nil {
			t.Fatal(err)
		}
		if run.FailCode != tc.code || f.Calls["measure_clock"] != 1 {
			t.Errorf("%g Hz: code %q after %d clock measurements, want %q after 1", tc.hz, run.FailCode, f.Calls["measure_clock"], tc.code)
		}
	}
}

// TestPlanTripPriorFailCodes: with the variant's predicted trip
// distribution as the search's prior, a unit whose trip lies far from the
// prediction (a defect) fails with the same code as with the bisection of
// the whole ladder, a good unit passes, and each run records the prior.
func TestPlanTripPriorFailCodes(t *testing.T) {
	levels := demoLevels(t)
	for _, tc := range []struct {
		name string
		unit func(f *fakeStation)
		code sequences.FailCode
	}{
		{"good unit", func(f *fakeStation) {}, ""},
		{"trips low", func(f *fakeStation) { f.TripPF = 8 }, sequences.CodeTripLow},
		{"trips high", func(f *fakeStation) { f.TripPF = 65 }, sequences.CodeTripHigh},
		{"trips far high", func(f *fakeStation) { f.TripPF = 120 }, sequences.CodeTripHigh},
		{"never trips", func(f *fakeStation) { f.TripPF = 500 }, sequences.CodeNoTrip},
		{"trips below the open ladder", func(f *fakeStation) { f.TripPF = 3 }, sequences.CodeIdleLatched},
		{"sticky latch tripping high", func(f *fakeStation) { f.Sticky, f.TripPF = true, 80 }, sequences.CodeStuckLatched},
		{"noisy", func(f *fakeStation) { f.SigmaPF = 3 }, sequences.CodeTripNoisy},
	} {
		t.Run(tc.name, func(t *testing.T) {
			for seed := range uint64(seeds) {
				for _, prior := range []bool{false, true} {
					cfg := foldConfig()
					if prior {
						cfg.Search.TripPriorPF, cfg.Search.TripPriorSDPF = priorPF, priorSDPF
					}
					f := newFake(levels, seed)
					tc.unit(f)
					_, run, err := execute(t, context.Background(), cfg, f)
					if err != nil {
						t.Fatal(err)
					}
					if run.FailCode != tc.code && (tc.code != sequences.CodeTripNoisy || run.FailCode != "") {
						t.Errorf("seed %d prior %v: code %q, want %q", seed, prior, run.FailCode, tc.code)
					}
					m := measurements(t, run)
					if got, ok := m["prior_trip_pf"]; prior && run.FailCode != sequences.CodeIdleLatched && (!ok || got.Value != priorPF || m["prior_trip_sd_pf"].Value != priorSDPF) {
						t.Errorf("seed %d: prior recorded as %+v, %+v", seed, got, m["prior_trip_sd_pf"])
					} else if !prior && ok {
						t.Errorf("seed %d: a prior recorded for a search without one", seed)
					}
				}
			}
		})
	}
}
