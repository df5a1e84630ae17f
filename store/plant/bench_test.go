package plant_test

import (
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"padline/store"
	"padline/store/plant"
)

// BenchmarkCatchUp measures catching up after an outage: one station's
// backlog of 20,000 runs (4 measurements each) forwarded to a fresh plant
// schema, logged in as the station's own role as README "The plant store"
// deploys it (station-role: the row-level policies apply) and as the
// schema owner (owner: they do not). Target: ≥ 5,000 runs/s (issue 17).
//
//	go test ./store/plant -run '^$' -bench CatchUp -benchtime 3x
//
// Beside wall time it reports CPU time, since the machine is shared and
// its load stretches wall time: the test process's (the station side:
// reading the shift log, building batches; getrusage) and the PostgreSQL
// backends' serving the forwarder's connections (utime + stime from
// /proc/PID/stat, found by the connections' application_name), and the
// load average when the iteration ended. runs/s is wall time;
// runs/cpu-s divides the runs by both CPU times together.
func BenchmarkCatchUp(b *testing.B) {
	src := tempLog(b, "backlog")
	log := stationLog(b, src, "S1", catchUpBacklog, time.Date(2026, 11, 20, 6, 0, 0, 0, time.UTC), 1)
	log.Close()
	b.Run("station-role", func(b *testing.B) { benchCatchUp(b, src, true) })
	b.Run("owner", func(b *testing.B) { benchCatchUp(b, src, false) })
}

const catchUpBacklog = 20_000

// catchUpBatch sets the forwarder's batch size (0: its default), to
// compare batch sizes: -catchup.batch 2000.
var catchUpBatch = flag.Int("catchup.batch", 0, "BenchmarkCatchUp: runs per batch (0: the forwarder's default)")

func benchCatchUp(b *testing.B, src string, asStation bool) {
	const backlog = catchUpBacklog
	ctx := context.Background()
	var total, cpuClient, cpuServer time.Duration
	serverKnown := true
	for i := range b.N {
		b.StopTimer()
		url, schema := newSchema(b, baseURL())
		app := "padline_bench_" + schema
		admin := openPlant(b, url)
		st := plant.Station{Name: "S1"}
		if asStation {
			st.Role = schema + "_s1"
			url = asRole(url, st.Role)
		}
		register(b, admin, st)
		p := openPlant(b, withParam(url, "application_name="+app))
		path := filepath.Join(b.TempDir(), "copy.db")
		copyFile(b, src, path)
		db, err := store.Open(path)
		if err != nil {
			b.Fatal(err)
		}
		f := &plant.Forwarder{Log: db, Plant: p, Station: "S1", BatchSize: *catchUpBatch}
		srv0, ok0 := backendCPU(b, admin, app)
		cli0 := selfCPU(b)
		b.StartTimer()
		start := time.Now()
		if err := f.Drain(ctx); err != nil {
			b.Fatal(err)
		}
		wall := time.Since(start)
		b.StopTimer()
		cli := selfCPU(b) - cli0
		srv1, ok1 := backendCPU(b, admin, app)
		var srv time.Duration
		for pid, t := range srv1 {
			srv += t - srv0[pid]
		}
		serverKnown = serverKnown && ok0 && ok1
		total, cpuClient, cpuServer = total+wall, cpuClient+cli, cpuServer+srv
		load, _ := os.ReadFile("/proc/loadavg")
		server := "unknown (PostgreSQL not on this machine)"
		if ok0 && ok1 {
			server = fmt.Sprintf("%.2f s", srv.Seconds())
		}
		b.Logf("iteration %d: %d runs in %.2f s wall (%.0f runs/s), CPU: station side %.2f s, PostgreSQL backends %s; load %s",
			i, backlog, wall.Seconds(), backlog/wall.Seconds(), cli.Seconds(), server, strings.Join(strings.Fields(string(load))[:3], " "))
		if n := countRuns(b, admin, store.Filter{}); n != backlog {
			b.Fatalf("iteration %d: %d runs landed", i, n)
		}
		db.Close()
		b.StartTimer()
	}
	b.ReportMetric(float64(backlog*b.N)/total.Seconds(), "runs/s")
	b.ReportMetric(cpuClient.Seconds()/float64(b.N), "station-cpu-s/op")
	if serverKnown {
		b.ReportMetric(cpuServer.Seconds()/float64(b.N), "pg-cpu-s/op")
		b.ReportMetric(float64(backlog*b.N)/(cpuClient+cpuServer).Seconds(), "runs/cpu-s")
	}
}

// selfCPU is the user and system CPU time of this process.
func selfCPU(t testing.TB) time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		t.Fatal(err)
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// backendCPU returns the CPU time (utime + stime, proc(5): fields 14 and
// 15 of /proc/PID/stat, in clock ticks of 1/100 s on Linux) of each
// PostgreSQL backend whose application_name is app; false when a backend's
// process cannot be read (the server runs elsewhere).
func backendCPU(t testing.TB, p *plant.DB, app string) (map[int64]time.Duration, bool) {
	t.Helper()
	pids, err := p.BackendPIDsForTest(context.Background(), app)
	if err != nil {
		t.Fatal(err)
	}
	out := map[int64]time.Duration{}
	for _, pid := range pids {
		b, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
		if err != nil {
			return nil, false
		}
		s := string(b)
		f := strings.Fields(s[strings.LastIndexByte(s, ')')+2:]) // fields from 3 on
		ut, err1 := strconv.ParseInt(f[11], 10, 64)
		st, err2 := strconv.ParseInt(f[12], 10, 64)
		if err1 != nil || err2 != nil {
			return nil, false
		}
		out[pid] = time.Duration(ut+st) * 10 * time.Millisecond
	}
	return out, true
}

func copyFile(t testing.TB, from, to string) {
	t.Helper()
	in, err := os.Open(from)
	if err != nil {
		t.Fatal(err)
	}
	defer in.Close()
	out, err := os.Create(to)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := io.Copy(out, in); err != nil {
		t.Fatal(err)
	}
	if err := out.Close(); err != nil {
		t.Fatal(err)
	}
}

// BenchmarkPutBatch compares the two ways Put stores a batch, to place
// smallBatch: as arrays in two round trips ("arrays", putSmall) and by
// COPY into staging tables ("copy"), for batches of 1 to 1,000 runs (4
// measurements each). An iteration stores a backlog of putBatchRuns runs
// batch by batch into a fresh schema as the station's own role;
// station-cpu-us/run is this process's CPU time (getrusage) per run, the
// figure a station pays, and station-cpu-us/batch the same per batch.
//
//	go test ./store/plant -run '^$' -bench PutBatch -benchtime 1x
func BenchmarkPutBatch(b *testing.B) {
	ctx := context.Background()
	src := tempLog(b, "putbatch")
	log := stationLog(b, src, "S1", putBatchRuns, time.Date(2026, 11, 20, 6, 0, 0, 0, time.UTC), 1)
	st, err := log.OutboxState(ctx)
	if err != nil {
		b.Fatal(err)
	}
	runs, err := log.PendingRuns(ctx, 0, putBatchRuns)
	if err != nil {
		b.Fatal(err)
	}
	var configs []plant.Config
	seen := map[[2]string]bool{}
	for _, r := range runs {
		k := [2]string{r.Variant, r.ConfigHash}
		if seen[k] {
			continue
		}
		seen[k] = true
		snap, err := log.Snapshot(ctx, r.Variant, r.ConfigHash)
		if err != nil {
			b.Fatal(err)
		}
		configs = append(configs, plant.Config{Variant: r.Variant, Hash: r.ConfigHash, Snapshot: snap})
	}
	for _, size := range putBatchSizes {
		for _, path := range []string{"arrays", "copy"} {
			b.Run(fmt.Sprintf("runs-%d/%s", size, path), func(b *testing.B) {
				restore := plant.SetSmallBatchForTest(map[string]int{"arrays": size, "copy": -1}[path])
				defer restore()
				var cpu time.Duration
				batches := 0
				for range b.N {
					b.StopTimer()
					url, schema := newSchema(b, baseURL())
					admin := openPlant(b, url)
					register(b, admin, plant.Station{Name: "S1", Role: schema + "_s1"})
					p := openPlant(b, asRole(url, schema+"_s1"))
					// The first batch registers the names and the configuration.
					if _, err := p.Put(ctx, &plant.Batch{Log: st.LogUUID, Station: "S1", Sent: time.Now(), Runs: runs[:1], Configs: configs}); err != nil {
						b.Fatal(err)
					}
					b.StartTimer()
					cpu0 := selfCPU(b)
					for lo := 1; lo < len(runs); lo += size {
						res, err := p.Put(ctx, &plant.Batch{Log: st.LogUUID, Station: "S1", Sent: time.Now(), Runs: runs[lo:min(lo+size, len(runs))]})
						if err != nil {
							b.Fatal(err)
						}
						if len(res.Refused) > 0 {
							b.Fatalf("refused: %v", res.Refused)
						}
						batches++
					}
					cpu += selfCPU(b) - cpu0
					b.StopTimer()
					if n := countRuns(b, admin, store.Filter{}); n != int64(len(runs)) {
						b.Fatalf("%d runs landed of %d", n, len(runs))
					}
					b.StartTimer()
				}
				b.ReportMetric(float64(cpu.Microseconds())/float64(b.N*(len(runs)-1)), "station-cpu-us/run")
				b.ReportMetric(float64(cpu.Microseconds())/float64(batches), "station-cpu-us/batch")
				load, _ := os.ReadFile("/proc/loadavg")
				b.Logf("load %s", strings.Join(strings.Fields(string(load))[:3], " "))
			})
		}
	}
}

// putBatchRuns is BenchmarkPutBatch's backlog.
const putBatchRuns = 3001

// putBatchSizes are BenchmarkPutBatch's batch sizes.
var putBatchSizes = []int{1, 10, 50, 200, 500, 1000}
