package demo

import (
	"context"
	"fmt"
	"testing"
	"time"

	"padline/sequences"
	"padline/sequences/session"
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
			// The rig as 'padline run' builds it; the stand-in guard band
			// stands, so no shift log is read.
			r, err := session.OpenRig(context.Background(), "QM-205", "demo-sim", "", session.RigOptions{UncertaintyPF: session.DefaultUncertaintyPF, Strategy: strategy})
			if err != nil {
				b.Fatal(err)
			}
			sess := &sequences.Session{Plan: r.Plan, Station: r.Fixture, Clock: r.Clock, Recorder: discard{}}
			var fixture time.Duration
			b.ResetTimer()
			for i := range b.N {
				serial := fmt.Sprintf("QM205-%06d", i%100000+1)
				r.Line.Load(serial)
				oc, err := sess.Test(context.Background(), serial)
				r.Line.Unload()
				if oc == nil {
					b.Fatal(err)
				}
				fixture += oc.Run.Finished.Sub(oc.Run.Started)
			}
			b.ReportMetric(float64(fixture.Milliseconds())/float64(b.N), "fixture-ms/unit")
		})
	}
}
