package demo

import (
	"context"
	"fmt"
	"testing"
	"time"

	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/timing"
)

// BenchmarkSimulatedUnit measures the computer time to test one simulated
// QM-205 unit end to end (plan, trip search, simulator, fixture), without the
// shift log. Target (DEVELOPERS.md "Benchmarks, studies and torture"): ≤ 1 ms CPU per unit. It also reports the
// unit's fixture time, which is virtual and exact.
//
//	go test ./sequences/demo -run '^$' -bench SimulatedUnit
func BenchmarkSimulatedUnit(b *testing.B) {
	for _, strategy := range []string{"bracket", "staircase"} {
		b.Run(strategy, func(b *testing.B) {
			v, err := session.LoadVariant("QM-205")
			if err != nil {
				b.Fatal(err)
			}
			st, err := session.LoadStation("demo-sim")
			if err != nil {
				b.Fatal(err)
			}
			rep, err := v.Limits(timing.Options{Draws: timing.DefaultDraws, Seed: 1, UncertaintyPF: session.DefaultUncertaintyPF})
			if err != nil {
				b.Fatal(err)
			}
			line, err := session.NewSimLine(st, v)
			if err != nil {
				b.Fatal(err)
			}
			fx, err := session.NewFixture(st, line.Pins(), line.Clock())
			if err != nil {
				b.Fatal(err)
			}
			cfg, err := session.PlanConfig(v, rep, true, strategy)
			if err != nil {
				b.Fatal(err)
			}
			plan, err := sequences.NewPlan(cfg, fx.Ladder().Distinct())
			if err != nil {
				b.Fatal(err)
			}
			sess := &sequences.Session{Plan: plan, Station: fx, Clock: line.Clock(), Recorder: discard{}}
			var fixture time.Duration
			b.ResetTimer()
			for i := range b.N {
				serial := fmt.Sprintf("QM205-%06d", i%100000+1)
				line.Load(serial)
				oc, err := sess.Test(context.Background(), serial)
				line.Unload()
				if oc == nil {
					b.Fatal(err)
				}
				fixture += oc.Run.Finished.Sub(oc.Run.Started)
			}
			b.ReportMetric(float64(fixture.Milliseconds())/float64(b.N), "fixture-ms/unit")
		})
	}
}
