package session_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/timing"
	"padline/store"
	"padline/store/plant"
)

// BenchmarkUnitForwarding measures the station's computer time per
// simulated QM-205 unit with the shift log (commit with synchronous=FULL),
// without and with a forwarder running to the plant store and handed every
// committed run (session.StartForwarding, as 'padline run --plant-url').
// Target: forwarding adds ≤ 1 ms per unit. ns/op is wall time;
// cpu-ms/unit is the whole process's CPU time (getrusage: the unit loop
// and the forwarder's goroutine together) per unit, with a 20 ms takt
// between units. "log+forwarding" is padline run's forwarder (a batch a
// second at most, so at this takt about 50 units a batch);
// "log+forwarding-per-unit" sends a batch per unit, the cost of one batch
// of one run. Needs the test PostgreSQL server.
//
//	go test ./sequences/session -run '^$' -bench UnitForwarding -benchtime 500x -count 5
func BenchmarkUnitForwarding(b *testing.B) {
	for _, c := range []struct {
		name  string
		fwd   bool
		every time.Duration
	}{{"log-only", false, 0}, {"log+forwarding", true, 0}, {"log+forwarding-per-unit", true, -1}} {
		name, fwd := c.name, c.fwd
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
			var fw *session.Forwarding
			if fwd {
				url := plantSchema(b)
				p, err := plant.Open(ctx, url)
				if err != nil {
					b.Fatal(err)
				}
				if err := p.AddStation(ctx, plant.Station{Name: st.Name}); err != nil {
					b.Fatal(err)
				}
				p.Close()
				if fw, err = session.StartForwarding(ctx, db, st, url, session.ForwardOptions{Every: c.every}); err != nil {
					b.Fatal(err)
				}
				defer fw.Stop()
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
				fw.Committed(oc.ID, oc.Run)
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

// plantSchema makes a migrated plant schema of the benchmark's own on the
// test PostgreSQL server (PADLINE_TEST_PG, else 127.0.0.1:5432 database
// test) and drops it after; it skips (fails under PADLINE_REQUIRE_PARTS=1)
// when no server answers.
func plantSchema(t testing.TB) string {
	t.Helper()
	base := os.Getenv("PADLINE_TEST_PG")
	if base == "" {
		base = "postgres://root@127.0.0.1:5432/test?sslmode=disable"
	}
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, base)
	if err != nil {
		reason := "no PostgreSQL at " + base + ": " + err.Error()
		if os.Getenv("PADLINE_REQUIRE_PARTS") == "1" {
			t.Fatal(reason)
		}
		t.Skip(reason)
	}
	defer conn.Close(ctx)
	schema := fmt.Sprintf("plant_sess%d_%d", time.Now().UnixNano()%1e9, rand.IntN(1e6))
	if _, err := conn.Exec(ctx, "CREATE SCHEMA "+schema); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if c, err := pgx.Connect(context.Background(), base); err == nil {
			c.Exec(context.Background(), "DROP SCHEMA "+schema+" CASCADE")
			c.Close(context.Background())
		}
	})
	sep := "?"
	if strings.Contains(base, "?") {
		sep = "&"
	}
	url := base + sep + "search_path=" + schema
	p, err := plant.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if err := p.Migrate(ctx); err != nil {
		t.Fatal(err)
	}
	return url
}
