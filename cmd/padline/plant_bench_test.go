package main

import (
	"context"
	"fmt"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/timing"
	"padline/store"
	"padline/store/plant"
)

// BenchmarkUnitForwarding measures the station's computer time per
// simulated QM-205 unit with the shift log (commit with synchronous=FULL),
// without and with a forwarder running to the plant store and kicked after
// every commit, as 'padline run --plant-url' does. Target: forwarding adds
// ≤ 1 ms per unit. ns/op is wall time with units back to back;
// cpu-ms/unit is the whole process's CPU time (getrusage: the unit loop
// and the forwarder's goroutine together) per unit, with a 20 ms takt so
// each unit goes to the plant in a batch of its own, as on a line. Needs
// the test PostgreSQL server.
//
//	go test ./cmd/padline -run '^$' -bench UnitForwarding -benchtime 500x -count 5
func BenchmarkUnitForwarding(b *testing.B) {
	for _, fwd := range []bool{false, true} {
		name := "log-only"
		if fwd {
			name = "log+forwarding"
		}
		b.Run(name, func(b *testing.B) {
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
			cfg, err := session.PlanConfig(v, rep, true, "")
			if err != nil {
				b.Fatal(err)
			}
			plan, err := sequences.NewPlan(cfg, fx.Ladder().Distinct())
			if err != nil {
				b.Fatal(err)
			}
			db, err := store.Open(filepath.Join(b.TempDir(), "shift.db"))
			if err != nil {
				b.Fatal(err)
			}
			defer db.Close()
			ctx := context.Background()
			hash, err := db.PutVariant(ctx, v.Name, v.Source.Raw)
			if err != nil {
				b.Fatal(err)
			}
			var fw *forwarding
			if fwd {
				url := plantSchemaB(b)
				a := &app{}
				p, err := plant.Open(ctx, url)
				if err != nil {
					b.Fatal(err)
				}
				if err := p.AddStation(ctx, plant.Station{Name: st.Name}); err != nil {
					b.Fatal(err)
				}
				p.Close()
				fw = a.startForwarding(ctx, db, st, url)
				defer fw.stop()
			}
			sess := &sequences.Session{Plan: plan, Station: fx, Clock: line.Clock(), Recorder: db,
				Template: sequences.Run{Variant: v.Name, ConfigHash: hash, Station: st.Name, Fixture: st.Fixture}}
			b.ResetTimer()
			cpu0 := cpuTime()
			var slept time.Duration
			for i := range b.N {
				serial := fmt.Sprintf("QM205-%06d", i%100000+1)
				line.Load(serial)
				oc, err := sess.Test(ctx, serial)
				line.Unload()
				if oc == nil {
					b.Fatal(err)
				}
				fw.kick()
				b.StopTimer()
				time.Sleep(benchTakt) // the operator changes the unit
				slept += benchTakt
				b.StartTimer()
			}
			if fw != nil {
				// Let the last batches go, inside the CPU measure.
				for o, _ := db.OutboxState(ctx); o.BacklogRuns > 0; o, _ = db.OutboxState(ctx) {
					time.Sleep(5 * time.Millisecond)
				}
			}
			b.StopTimer()
			b.ReportMetric(float64(cpuTime()-cpu0)/1e6/float64(b.N), "cpu-ms/unit")
		})
	}
}

// benchTakt is the pause between units in BenchmarkUnitForwarding.
const benchTakt = 20 * time.Millisecond

// cpuTime is the process's user + system CPU time so far.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
