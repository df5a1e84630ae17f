package plant_test

import (
	"bufio"
	"context"
	"fmt"
	"os"
	"os/exec"
	"strconv"
	"testing"
	"time"

	"padline/store"
	"padline/store/plant"
)

// fileOutbox reads the outbox of the shift log at path as another process
// does ('padline plant status'): through a handle of its own.
func fileOutbox(t *testing.T, path string) store.Outbox {
	t.Helper()
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	o, err := db.OutboxState(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	return o
}

// recordOffered commits run i of station to log and hands it to f, as the
// station session does, and returns its id.
func recordOffered(t *testing.T, log *store.DB, f *plant.Forwarder, station, hash string, i int) int64 {
	t.Helper()
	r := simRun(station, fmt.Sprintf("QM205-%s-P%05d", station, i), hash,
		time.Date(2026, 12, 2, 9, 0, 0, 0, time.UTC).Add(time.Duration(i)*time.Second), 29.7, false, false)
	id, err := log.Record(context.Background(), r)
	if err != nil {
		t.Fatal(err)
	}
	f.Offer(store.EntryOf(id, *r))
	return id
}

// A forwarder that keeps up leaves each batch's cursor to the next run's
// commit: the station's own state shows it at once, the file (another
// process, 'padline plant status') one unit later. Drain writes it, and so
// does a forwarder's Run as it stops; the status then matches the state
// the station showed before.
func TestPendingCursorRidesNextRun(t *testing.T) {
	ctx := context.Background()
	url, _ := newSchema(t, baseURL())
	p := openPlant(t, url)
	register(t, p, plant.Station{Name: "P1"})
	path := tempLog(t, "p1")
	log := stationLog(t, path, "P1", 0, time.Now(), 1)
	hash := store.HashConfig([]byte("name: QM-205\n# demo variant of the tests\n"))
	f := forwarder(log, p, "P1")
	step := func(want int) {
		t.Helper()
		if n, err := f.Step(ctx); err != nil || n != want {
			t.Fatalf("step sent %d (%v), want %d", n, err, want)
		}
	}
	id1 := recordOffered(t, log, f, "P1", hash, 1)
	step(1)
	if o, _ := log.OutboxState(ctx); o.RunCursor != id1 || o.Forwarded != 1 || o.BacklogRuns != 0 {
		t.Fatalf("station's state after a batch: %+v", o)
	}
	if o := fileOutbox(t, path); o.RunCursor != 0 || o.BacklogRuns != 1 {
		t.Fatalf("the batch's cursor was committed on its own: %+v", o)
	}
	id2 := recordOffered(t, log, f, "P1", hash, 2)
	if o := fileOutbox(t, path); o.RunCursor != id1 || o.Forwarded != 1 || o.BacklogRuns != 1 {
		t.Fatalf("the next run's commit did not carry the cursor: %+v", o)
	}
	step(1)
	before, err := log.OutboxState(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if err := f.Drain(ctx); err != nil {
		t.Fatal(err)
	}
	st, err := plant.StationStatus(ctx, path, "")
	if err != nil {
		t.Fatal(err)
	}
	if st.LastRunID != id2 || st.Forwarded != 2 || st.BacklogRuns != 0 || st.LastTime == nil ||
		st.LastRunID != before.RunCursor || st.Forwarded != before.Forwarded || !st.LastTime.Equal(before.LastTime) {
		t.Fatalf("after Drain the status is %+v; the station showed %+v", st, before)
	}

	// Run: a batch lands, and the cursor is written as it stops.
	landed := make(chan struct{}, 8)
	f.OnBatch = func(plant.Result) { landed <- struct{}{} }
	rctx, cancel := context.WithCancel(ctx)
	done := make(chan error, 1)
	go func() { done <- f.Run(rctx) }()
	id3 := recordOffered(t, log, f, "P1", hash, 3)
	select {
	case <-landed:
	case <-time.After(20 * time.Second):
		t.Fatal("no batch in 20 s")
	}
	if o := fileOutbox(t, path); o.RunCursor != id2 {
		t.Fatalf("while running: file cursor %d, want %d (the batch's own one pending)", o.RunCursor, id2)
	}
	cancel()
	<-done
	if o := fileOutbox(t, path); o.RunCursor != id3 || o.Forwarded != 3 || o.BacklogRuns != 0 {
		t.Fatalf("after Run stopped: %+v", o)
	}
	if n := countRuns(t, p, store.Filter{Station: "P1"}); n != 3 {
		t.Fatalf("plant holds %d runs, want 3", n)
	}
}

// TestHelperPendingCrash is not a test: TestPendingCursorCrash runs the
// test binary with PADLINE_PENDING_HELPER set to record and forward runs
// one by one, then waits to be killed with the last batch's cursor still
// pending.
func TestHelperPendingCrash(t *testing.T) {
	if os.Getenv("PADLINE_PENDING_HELPER") != "1" {
		t.Skip("helper process for TestPendingCursorCrash")
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
	hash, err := log.PutVariant(ctx, "QM-205", []byte("name: QM-205\n# demo variant of the tests\n"))
	if err != nil {
		t.Fatal(err)
	}
	f := forwarder(log, p, "CRASH")
	n, _ := strconv.Atoi(os.Getenv("PADLINE_PENDING_RUNS"))
	for i := range n {
		recordOffered(t, log, f, "CRASH", hash, i)
		if k, err := f.Step(ctx); err != nil || k != 1 {
			t.Fatalf("step sent %d (%v)", k, err)
		}
	}
	fmt.Println("pending")
	time.Sleep(time.Minute) // killed before
}

// A station killed with a landed batch's cursor pending sends that batch
// again when it restarts; the plant store drops it by its run key, so
// every run is there exactly once, and the log counts each forwarded run
// once.
func TestPendingCursorCrash(t *testing.T) {
	url, _ := newSchema(t, baseURL())
	ctx := context.Background()
	p := openPlant(t, url)
	register(t, p, plant.Station{Name: "CRASH"})
	path := tempLog(t, "crash")
	const runs = 5
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(exe, "-test.run", "^TestHelperPendingCrash$", "-test.count=1")
	cmd.Env = append(os.Environ(), "PADLINE_PENDING_HELPER=1", "PADLINE_PLANT_LOG="+path, "PADLINE_PLANT_URL="+url,
		"PADLINE_PENDING_RUNS="+strconv.Itoa(runs))
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	sc := bufio.NewScanner(out)
	ready := false
	for sc.Scan() {
		if sc.Text() == "pending" {
			ready = true
			break
		}
		t.Log(sc.Text())
	}
	cmd.Process.Kill() // SIGKILL
	cmd.Wait()
	if !ready {
		t.Fatal("helper did not forward its runs")
	}
	if n := countRuns(t, p, store.Filter{Station: "CRASH"}); n != runs {
		t.Fatalf("plant holds %d runs before the restart, want %d", n, runs)
	}
	if o := fileOutbox(t, path); o.BacklogRuns != 1 || o.Forwarded != runs-1 {
		t.Fatalf("after the kill the log shows %+v, want the last batch's cursor lost", o)
	}
	log, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer log.Close()
	resent := 0
	f := forwarder(log, p, "CRASH")
	f.OnBatch = func(r plant.Result) { resent += r.Duplicates }
	if err := f.Drain(ctx); err != nil {
		t.Fatal(err)
	}
	var nRuns, nDistinct int64
	if err := p.QueryRowForTest(ctx, `SELECT count(*), count(DISTINCT serial) FROM runs`, &nRuns, &nDistinct); err != nil {
		t.Fatal(err)
	}
	if nRuns != runs || nDistinct != runs || resent == 0 {
		t.Fatalf("plant holds %d runs (%d serials), %d sent again; want %d once each, the lost batch sent again", nRuns, nDistinct, resent, runs)
	}
	if o, _ := log.OutboxState(ctx); o.BacklogRuns != 0 || o.Forwarded != runs {
		t.Fatalf("outbox after the restart %+v, want %d forwarded", o, runs)
	}
}
