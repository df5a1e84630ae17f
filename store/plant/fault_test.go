package plant_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"net"
	"os"
	"os/exec"
	"os/user"
	"path/filepath"
	"strconv"
	"sync"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"padline/store"
	"padline/store/plant"
)

// TestHelperForwarder is not a test: TestSIGKILLMidBatch runs the test
// binary with PADLINE_PLANT_HELPER set to forward a shift log until it is
// killed or the backlog is empty.
func TestHelperForwarder(t *testing.T) {
	if os.Getenv("PADLINE_PLANT_HELPER") != "1" {
		t.Skip("helper process for TestSIGKILLMidBatch")
	}
	ctx := context.Background()
	log, err := store.Open(os.Getenv("PADLINE_PLANT_LOG"))
	if err != nil {
		t.Fatal(err)
	}
	p, err := plant.Open(ctx, os.Getenv("PADLINE_PLANT_URL"))
	if err != nil {
		t.Fatal(err)
	}
	f := &plant.Forwarder{Log: log, Plant: p, Station: "KILLED", BatchSize: 40}
	if err := f.Drain(ctx); err != nil {
		t.Fatal(err)
	}
}

// A forwarder SIGKILLed mid-batch 20 times: after it finally drains, every
// run is in the plant exactly once, with all its measurements.
func TestSIGKILLMidBatch(t *testing.T) {
	url, _ := newSchema(t, baseURL())
	ctx := context.Background()
	p := openPlant(t, url)
	register(t, p, plant.Station{Name: "KILLED"})
	path := tempLog(t, "killed")
	// Long enough that 20 kills never drain it, even on an idle machine
	// where a forwarder moves about 5,000 runs a second (each kill lands
	// within about 0.1 s of the first batch): 4,000 drained after 17 kills.
	const runs = 20000
	log := stationLog(t, path, "KILLED", runs, time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC), 9)
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 2))
	kills, midStream := 0, 0
	for kills < 20 {
		cmd := exec.Command(exe, "-test.run", "^TestHelperForwarder$", "-test.count=1")
		cmd.Env = append(os.Environ(), "PADLINE_PLANT_HELPER=1", "PADLINE_PLANT_LOG="+path, "PADLINE_PLANT_URL="+url)
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		// Wait until batches flow, then kill at a random instant.
		before, _ := log.OutboxState(ctx)
		deadline := time.Now().Add(20 * time.Second)
		for time.Now().Before(deadline) {
			o, _ := log.OutboxState(ctx)
			if o.RunCursor > before.RunCursor {
				break
			}
			time.Sleep(5 * time.Millisecond)
		}
		time.Sleep(time.Duration(rng.IntN(60)) * time.Millisecond)
		if err := cmd.Process.Signal(syscall.SIGKILL); err != nil {
			t.Fatal(err)
		}
		err := cmd.Wait()
		o, _ := log.OutboxState(ctx)
		if ws, ok := cmd.ProcessState.Sys().(syscall.WaitStatus); ok && ws.Signaled() {
			kills++
			if o.BacklogRuns > 0 {
				midStream++
			}
		} else if o.BacklogRuns == 0 {
			t.Fatalf("backlog drained after %d kills: make the log longer (exit: %v)", kills, err)
		}
	}
	t.Logf("%d SIGKILLs, %d with runs still to send", kills, midStream)
	if err := forwarder(log, p, "KILLED").Drain(ctx); err != nil {
		t.Fatal(err)
	}
	var nRuns, nDistinct, nMeas, wantMeas int64
	if err := p.QueryRowForTest(ctx, `SELECT count(*), count(DISTINCT serial) FROM runs`, &nRuns, &nDistinct); err != nil {
		t.Fatal(err)
	}
	if err := p.QueryRowForTest(ctx, `SELECT count(*) FROM measurements`, &nMeas); err != nil {
		t.Fatal(err)
	}
	for e, err := range log.Runs(ctx, store.Filter{}) {
		if err != nil {
			t.Fatal(err)
		}
		wantMeas += int64(len(e.Measurements))
	}
	if nRuns != runs || nDistinct != runs || nMeas != wantMeas {
		t.Fatalf("plant holds %d runs (%d serials), %d measurements; want %d, %d", nRuns, nDistinct, nMeas, runs, wantMeas)
	}
	o, _ := log.OutboxState(ctx)
	if o.BacklogRuns != 0 || o.RunCursor == 0 {
		t.Fatalf("outbox %+v", o)
	}
}

// privatePG starts a PostgreSQL server of the test's own on a free
// loopback port (initdb into a temporary directory), so the test can stop
// and restart it without touching the shared server. It returns the
// server's base URL and start/stop functions.
func privatePG(t *testing.T) (base string, start, stop func()) {
	t.Helper()
	bins, _ := filepath.Glob("/usr/lib/postgresql/*/bin/initdb")
	if len(bins) == 0 {
		need(t, "no PostgreSQL server binaries under /usr/lib/postgresql/*/bin")
	}
	bin := filepath.Dir(bins[len(bins)-1])
	dir, err := os.MkdirTemp("", "padline-pg-")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { os.RemoveAll(dir) })
	var wrap []string
	if os.Geteuid() == 0 {
		// initdb refuses root: run the server as the postgres user.
		u, err := user.Lookup("postgres")
		if err != nil {
			need(t, "running as root and no postgres user to run a private server")
		}
		uid, _ := strconv.Atoi(u.Uid)
		gid, _ := strconv.Atoi(u.Gid)
		if err := os.Chown(dir, uid, gid); err != nil {
			t.Fatal(err)
		}
		wrap = []string{"runuser", "-u", "postgres", "--"}
	}
	run := func(args ...string) error {
		all := append(append([]string{}, wrap...), args...)
		out, err := exec.Command(all[0], all[1:]...).CombinedOutput()
		if err != nil {
			return fmt.Errorf("%v: %v\n%s", args, err, out)
		}
		return nil
	}
	data := filepath.Join(dir, "data")
	if err := run(filepath.Join(bin, "initdb"), "-D", data, "-A", "trust", "-U", "root", "--no-sync"); err != nil {
		t.Fatal(err)
	}
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	port := l.Addr().(*net.TCPAddr).Port
	l.Close()
	start = func() {
		if err := run(filepath.Join(bin, "pg_ctl"), "-D", data, "-l", filepath.Join(dir, "log"), "-w", "-o",
			fmt.Sprintf("-p %d -k %s -c listen_addresses=127.0.0.1", port, dir), "start"); err != nil {
			t.Fatal(err)
		}
	}
	stop = func() {
		if err := run(filepath.Join(bin, "pg_ctl"), "-D", data, "-m", "immediate", "-w", "stop"); err != nil {
			t.Fatal(err)
		}
	}
	start()
	t.Cleanup(func() { _ = run(filepath.Join(bin, "pg_ctl"), "-D", data, "-m", "immediate", "-w", "stop") })
	return fmt.Sprintf("postgres://root@127.0.0.1:%d/postgres?sslmode=disable", port), start, stop
}

// PostgreSQL stopped (immediate shutdown, as in a crash) while three
// stations test and forward, then restarted: the stations keep testing,
// back off, catch up on their own, and every run arrives exactly once.
func TestPostgresStoppedAndRestarted(t *testing.T) {
	base, start, stop := privatePG(t)
	url, _ := newSchema(t, base)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	p := openPlant(t, url)
	names := []string{"R1", "R2", "R3"}
	logs := make([]*store.DB, len(names))
	var failures atomic.Int64
	var wg sync.WaitGroup
	fwd := make([]*plant.Forwarder, len(names))
	for i, n := range names {
		register(t, p, plant.Station{Name: n})
		logs[i] = stationLog(t, tempLog(t, n), n, 200, time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC), uint64(i))
		f := forwarder(logs[i], p, n)
		f.BatchSize = 25
		fwd[i] = f
		wg.Add(1)
		go func() {
			defer wg.Done()
			f.Run(ctx)
		}()
	}
	// Production goes on throughout: each station records a unit every
	// 5 ms and kicks its forwarder.
	hash := store.HashConfig([]byte("name: QM-205\n# demo variant of the tests\n"))
	prodCtx, stopProd := context.WithCancel(ctx)
	var prod sync.WaitGroup
	for i, n := range names {
		prod.Add(1)
		go func() {
			defer prod.Done()
			for k := 0; prodCtx.Err() == nil; k++ {
				r := simRun(n, fmt.Sprintf("LIVE-%s-%d", n, k), hash, time.Date(2026, 12, 1, 9, 0, 0, 0, time.UTC).Add(time.Duration(k)*time.Second), 30, false, false)
				if _, err := logs[i].Record(ctx, r); err != nil {
					t.Error(err)
					return
				}
				fwd[i].Kick()
				time.Sleep(5 * time.Millisecond)
			}
		}()
	}
	time.Sleep(300 * time.Millisecond)
	stop()
	time.Sleep(1500 * time.Millisecond)
	for _, l := range logs {
		if o, _ := l.OutboxState(ctx); o.LastError != "" {
			failures.Add(1)
		}
	}
	start()
	time.Sleep(500 * time.Millisecond)
	stopProd()
	prod.Wait()
	deadline := time.Now().Add(60 * time.Second)
	for {
		left := int64(0)
		for _, l := range logs {
			o, _ := l.OutboxState(ctx)
			left += o.BacklogRuns
		}
		if left == 0 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("%d runs still not forwarded a minute after the restart", left)
		}
		time.Sleep(50 * time.Millisecond)
	}
	cancel()
	wg.Wait()
	if failures.Load() == 0 {
		t.Fatal("no station noticed the outage: the test did not test it")
	}
	total := int64(0)
	for i, n := range names {
		c, _ := logs[i].Counts(context.Background(), store.Filter{})
		var got, distinct int64
		if err := p.QueryRowForTest(context.Background(), `SELECT count(*), count(DISTINCT local_id) FROM runs r
			JOIN stations s ON s.id = r.station_id WHERE s.name = $1`, &got, &distinct, n); err != nil {
			t.Fatal(err)
		}
		if got != c.Runs || distinct != c.Runs {
			t.Fatalf("%s: plant holds %d runs (%d distinct), the station logged %d", n, got, distinct, c.Runs)
		}
		total += got
	}
	t.Logf("%d runs from %d stations arrived exactly once across the outage; %d stations saw errors", total, len(names), failures.Load())
}
