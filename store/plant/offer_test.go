package plant_test

import (
	"context"
	"fmt"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
	"padline/store/plant"
)

// A forwarder handed every committed run (Offer, as the station session
// does) sends them without reading the log and reads nothing while none
// waits; a run committed without being offered (another process) goes
// when the kept outbox state is read again; runs offered past the cap are
// read from the log at once. Every run lands once.
func TestOfferedRuns(t *testing.T) {
	ctx := context.Background()
	url, _ := newSchema(t, baseURL())
	p := openPlant(t, url)
	register(t, p, plant.Station{Name: "S1"})
	log := stationLog(t, tempLog(t, "s1"), "S1", 0, time.Now(), 1)
	hash, err := log.PutVariant(ctx, "QM-205", []byte("name: QM-205\n# demo variant of the tests\n"))
	if err != nil {
		t.Fatal(err)
	}
	now := time.Date(2026, 12, 2, 12, 0, 0, 0, time.UTC)
	f := forwarder(log, p, "S1")
	f.BatchSize, f.Now = 5000, func() time.Time { return now }
	serial := 0
	newRuns := func(n int) []*sequences.Run {
		var out []*sequences.Run
		for range n {
			serial++
			out = append(out, simRun("S1", fmt.Sprintf("QM205-S1-%06d", serial), hash, now.Add(time.Duration(serial)*time.Second), 29.7, false, false))
		}
		return out
	}
	step := func(what string, want int) {
		t.Helper()
		n, err := f.Step(ctx)
		if err != nil || n != want {
			t.Fatalf("%s: step sent %d (%v), want %d", what, n, err, want)
		}
	}
	step("empty log", 0)
	for _, r := range newRuns(3) {
		id, err := log.Record(ctx, r)
		if err != nil {
			t.Fatal(err)
		}
		f.Offer(store.EntryOf(id, *r))
	}
	step("3 offered runs", 3)
	if _, err := log.Record(ctx, newRuns(1)[0]); err != nil {
		t.Fatal(err)
	}
	step("a run not offered, state kept", 0)
	now = now.Add(6 * time.Second) // past stateEvery (5 s)
	step("a run not offered, state read again", 1)

	// 1,001 runs offered: the forwarder keeps 1,000 (maxOffered) and reads
	// the one it dropped from the log on the next step.
	rs := newRuns(1001)
	cur, err := log.OutboxState(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := log.Import(ctx, func(yield func(*sequences.Run) bool) {
		for _, r := range rs {
			if !yield(r) {
				return
			}
		}
	}, 500); err != nil {
		t.Fatal(err)
	}
	pending, err := log.PendingRuns(ctx, cur.RunCursor, 2000)
	if err != nil || len(pending) != 1001 {
		t.Fatalf("%d pending runs (%v)", len(pending), err)
	}
	for _, e := range pending {
		f.Offer(e)
	}
	step("1,000 offered runs kept", 1000)
	step("the dropped one, from the log", 1)
	step("nothing left", 0)

	got := entries(t, p.Runs(ctx, store.Filter{Station: "S1"}))
	ids := map[int64]int{}
	for _, e := range got {
		ids[e.ID]++
	}
	if len(got) != 1005 || len(ids) != 1005 {
		t.Errorf("plant holds %d runs of S1 (%d distinct), want 1005 once each", len(got), len(ids))
	}
}
