package session_test

import (
	"context"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"runtime/pprof"
	"strconv"
	"strings"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
	"padline/store/plant"
	"padline/store/plant/planttest"
)

// BenchmarkUnitForwarding measures what forwarding to the plant store adds
// to a simulated QM-205 unit's computer time on the station (target ≤ 1 ms,
// README "Plant"). Two shift logs on one simulated line: units go to the
// plain log ("log") and to a log forwarded by session.StartForwarding, as
// 'padline run --plant-url' runs it ("fwd"), in alternating blocks of
// -forward.block units (order swapped every pair of blocks), b.N units in
// all. A unit's CPU time is the whole process's (getrusage: the unit, the
// forwarder's goroutine, the runtime) over its block, the takt between
// units included; a forwarded block ends when the plant store has every
// run of it, so its batches count in it. cpu-ms/unit-added is the mean of
// the block pairs' differences and cpu-ms/unit-added-se its standard error
// (their spread over √pairs). wall-ms/unit-* is one unit's test and commit
// (the takt excluded); batches/unit counts the forwarder's batches.
// "every-1s" is padline run's forwarder (a batch a second at most);
// "every-unit" sends a batch per unit. Needs the test PostgreSQL server.
//
//	go test ./sequences/session -run '^$' -bench UnitForwarding -benchtime 4000x
//	go test ./sequences/session -run '^$' -bench UnitForwarding/every-unit -benchtime 300x -forward.takt 1.2s -forward.block 10
func BenchmarkUnitForwarding(b *testing.B) {
	for _, c := range []struct {
		name  string
		every time.Duration
	}{{"every-1s", 0}, {"every-unit", -1}} {
		b.Run(c.name, func(b *testing.B) { benchForwarding(b, c.every) })
	}
}

var benchBlock = flag.Int("forward.block", 50, "BenchmarkUnitForwarding: units per block")

// benchArm is one side of BenchmarkUnitForwarding: a shift log and its
// test session, forwarded or not.
type benchArm struct {
	name string
	db   *store.DB
	sess *sequences.Session
	fw   *session.Forwarding
	// landed counts the runs the plant store has taken (OnBatch); batch
	// is signalled after each batch.
	landed, batches atomic.Int64
	batch           chan struct{}
	committed       int64
	cpu, wall       time.Duration // over its blocks
	units           int
}

func benchForwarding(b *testing.B, every time.Duration) {
	ctx := context.Background()
	r, err := session.OpenRig(ctx, "QM-205", "demo-sim", "", session.RigOptions{UncertaintyPF: session.DefaultUncertaintyPF})
	if err != nil {
		b.Fatal(err)
	}
	v, st := r.Variant, r.Station
	url := plantSchema(b)
	p, err := plant.Open(ctx, url)
	if err != nil {
		b.Fatal(err)
	}
	if err := p.AddStation(ctx, plant.Station{Name: st.Name}); err != nil {
		b.Fatal(err)
	}
	p.Close()
	arms := [2]*benchArm{{}, {batch: make(chan struct{}, 1)}} // log, fwd
	for i, a := range arms {
		if a.db, err = store.Open(filepath.Join(b.TempDir(), fmt.Sprintf("shift%d.db", i))); err != nil {
			b.Fatal(err)
		}
		defer a.db.Close()
		hash, err := a.db.PutVariant(ctx, v.Name, v.Source.Raw)
		if err != nil {
			b.Fatal(err)
		}
		a.sess = &sequences.Session{Plan: r.Plan, Station: r.Fixture, Clock: r.Clock, Recorder: a.db,
			Template: sequences.Run{Variant: v.Name, ConfigHash: hash, Station: st.Name, Fixture: st.Fixture}}
	}
	fwd := arms[1]
	arms[0].name, fwd.name = "log", "fwd"
	// Profile labels: the forwarder's goroutines (pgx's included) carry
	// arm=forwarder, each block's unit loop its arm's name, so -cpuprofile
	// tells what forwarding adds to the unit's path from what it costs
	// beside it (go tool pprof -tagfocus arm=fwd …).
	pprof.Do(ctx, pprof.Labels("arm", "forwarder"), func(ctx context.Context) {
		fwd.fw, err = session.StartForwarding(ctx, fwd.db, st, url, session.ForwardOptions{Every: every,
			OnBatch: func(r plant.Result) {
				fwd.landed.Add(int64(r.RunsLanded))
				fwd.batches.Add(1)
				select {
				case fwd.batch <- struct{}{}:
				default:
				}
			}})
	})
	if err != nil {
		b.Fatal(err)
	}
	defer fwd.fw.Stop()
	block := max(1, *benchBlock)
	var diffs []float64 // per pair of blocks: fwd − log, ms per unit
	b.ResetTimer()
	for done, pair := 0, 0; done < b.N; pair++ {
		n := min(block, (b.N-done+1)/2)
		order := arms
		if pair%2 == 1 {
			order = [2]*benchArm{arms[1], arms[0]}
		}
		var per [2]float64
		for _, a := range order {
			cpu0 := cpuTime()
			pprof.Do(ctx, pprof.Labels("arm", a.name), func(ctx context.Context) {
				for i := range n {
					serial := fmt.Sprintf("QM205-%06d", (done/2+i)%100000+1)
					t0 := time.Now()
					r.Line.Load(serial)
					oc, err := a.sess.Test(ctx, serial)
					r.Line.Unload()
					if oc == nil {
						b.Fatal(err)
					}
					a.fw.Committed(oc.ID, oc.Run) // as the session's commit does
					a.wall += time.Since(t0)
					b.StopTimer()
					time.Sleep(*benchTakt) // the operator changes the unit
					b.StartTimer()
				}
			})
			a.committed += int64(n)
			if a.fw != nil {
				// The block ends when the plant store has all of it.
				b.StopTimer()
				for a.landed.Load() < a.committed {
					select {
					case <-a.batch:
					case <-time.After(30 * time.Second):
						b.Fatalf("plant store has %d of %d runs after 30 s", a.landed.Load(), a.committed)
					}
				}
				b.StartTimer()
			}
			d := cpuTime() - cpu0
			a.cpu += d
			a.units += n
			if a == fwd {
				per[1] = float64(d) / 1e6 / float64(n)
			} else {
				per[0] = float64(d) / 1e6 / float64(n)
			}
		}
		diffs = append(diffs, per[1]-per[0])
		done += 2 * n
	}
	b.StopTimer()
	log, fw := arms[0], arms[1]
	ms := func(d time.Duration, n int) float64 { return float64(d) / 1e6 / float64(max(n, 1)) }
	b.ReportMetric(ms(log.cpu, log.units), "cpu-ms/unit-log")
	b.ReportMetric(ms(fw.cpu, fw.units), "cpu-ms/unit-fwd")
	mean, se := meanSE(diffs)
	b.ReportMetric(mean, "cpu-ms/unit-added")
	b.ReportMetric(se, "cpu-ms/unit-added-se")
	b.ReportMetric(ms(log.wall, log.units), "wall-ms/unit-log")
	b.ReportMetric(ms(fw.wall, fw.units), "wall-ms/unit-fwd")
	b.ReportMetric(float64(fw.batches.Load())/float64(max(fw.units, 1)), "batches/unit")
	b.ReportMetric(loadAvg(), "load")
}

// meanSE is the mean of xs and its standard error (sample standard
// deviation over √n; 0 for fewer than two).
func meanSE(xs []float64) (mean, se float64) {
	if len(xs) == 0 {
		return 0, 0
	}
	for _, x := range xs {
		mean += x
	}
	mean /= float64(len(xs))
	if len(xs) < 2 {
		return mean, 0
	}
	var ss float64
	for _, x := range xs {
		ss += (x - mean) * (x - mean)
	}
	return mean, math.Sqrt(ss / float64(len(xs)-1) / float64(len(xs)))
}

// loadAvg is the machine's 1-minute load average (0 if unknown).
func loadAvg() float64 {
	b, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return 0
	}
	f := strings.Fields(string(b))
	if len(f) == 0 {
		return 0
	}
	l, _ := strconv.ParseFloat(f[0], 64)
	return l
}

// benchTakt is the pause between units in BenchmarkUnitForwarding. The
// 20 ms default keeps a run of 4,000 units to minutes; a slow line's takt
// (-forward.takt 1.2s, a few hundred units) checks that every-unit's
// figure holds when the forwarder idles between units (its poll, the idle
// flush of the outbox cursor, the runtime's timers).
var benchTakt = flag.Duration("forward.takt", 20*time.Millisecond, "BenchmarkUnitForwarding: pause between units")

// cpuTime is the process's user + system CPU time so far.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// plantSchema makes a migrated plant schema of the test's own and drops it
// after (planttest.URL: it skips, or fails under PADLINE_REQUIRE_PARTS=1,
// when no server answers).
func plantSchema(t testing.TB) string { return planttest.URL(t, "plant_sess") }
