package store_test

import (
	"context"
	"testing"
	"time"

	"padline/store"
)

// outboxOf reads the outbox as another process does ('padline plant
// status'): through a handle of its own, which holds no pending advance.
func outboxOf(t *testing.T, path string) store.Outbox {
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

// A deferred advance is kept in memory: this handle's OutboxState shows
// it at once (cursor, the backlog after it, forwarded runs, time), another
// process sees it when the next run's commit carries it; two deferred
// advances merge (the higher cursor, the sum of runs accepted, the later
// time); Close writes what is still pending.
func TestDeferredAdvanceRidesNextRun(t *testing.T) {
	ctx := context.Background()
	db, path := openTemp(t)
	hash := putDemo(t, db)
	for i := range 3 {
		if _, err := db.Record(ctx, demoRun(i, hash)); err != nil {
			t.Fatal(err)
		}
	}
	t1 := time.Date(2026, 12, 2, 10, 0, 0, 0, time.UTC)
	if err := db.DeferAdvance(ctx, store.Advance{Runs: 2, Accepted: 2, At: t1}); err != nil {
		t.Fatal(err)
	}
	o, err := db.OutboxState(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if o.RunCursor != 2 || o.Forwarded != 2 || o.BacklogRuns != 1 || !o.LastTime.Equal(t1) {
		t.Fatalf("this handle's state with an advance pending: %+v", o)
	}
	if o := outboxOf(t, path); o.RunCursor != 0 || o.Forwarded != 0 || o.BacklogRuns != 3 {
		t.Fatalf("another process saw the pending advance before a run's commit: %+v", o)
	}
	if _, err := db.Record(ctx, demoRun(3, hash)); err != nil {
		t.Fatal(err)
	}
	if o := outboxOf(t, path); o.RunCursor != 2 || o.Forwarded != 2 || o.BacklogRuns != 2 || !o.LastTime.Equal(t1) {
		t.Fatalf("after the next run's commit another process sees %+v, want cursor 2, 2 forwarded, 2 behind", o)
	}
	// Committed once: the next run's commit does not add it again.
	if _, err := db.Record(ctx, demoRun(4, hash)); err != nil {
		t.Fatal(err)
	}
	if o, _ := db.OutboxState(ctx); o.Forwarded != 2 || o.RunCursor != 2 {
		t.Fatalf("an advance counted twice: %+v", o)
	}
	t2, t3 := t1.Add(time.Second), t1.Add(2*time.Second)
	for _, a := range []store.Advance{{Runs: 4, Accepted: 2, At: t3}, {Runs: 3, Accepted: 1, At: t2}} {
		if err := db.DeferAdvance(ctx, a); err != nil {
			t.Fatal(err)
		}
	}
	want := func(o store.Outbox, who string) {
		t.Helper()
		if o.RunCursor != 4 || o.Forwarded != 5 || o.BacklogRuns != 1 || !o.LastTime.Equal(t3) {
			t.Fatalf("%s: %+v, want cursor 4, 5 forwarded, 1 behind, last at %v", who, o, t3)
		}
	}
	o, _ = db.OutboxState(ctx)
	want(o, "merged, this handle")
	if err := db.Close(); err != nil {
		t.Fatal(err)
	}
	want(outboxOf(t, path), "after Close")
}

// Refused rows are written at once, with the advance pending before
// them; FlushOutbox writes a pending advance on its own; an error noted
// after a pending advance stays noted when a later run's commit carries
// nothing; a run's commit that fails keeps the advance pending.
func TestDeferredAdvanceFlushes(t *testing.T) {
	ctx := context.Background()
	db, path := openTemp(t)
	hash := putDemo(t, db)
	for i := range 6 {
		if _, err := db.Record(ctx, demoRun(i, hash)); err != nil {
			t.Fatal(err)
		}
	}
	at := time.Date(2026, 12, 2, 10, 0, 0, 0, time.UTC)
	if err := db.DeferAdvance(ctx, store.Advance{Runs: 1, Accepted: 1, At: at}); err != nil {
		t.Fatal(err)
	}
	if err := db.DeferAdvance(ctx, store.Advance{Runs: 2, Accepted: 0, At: at,
		Refused: []store.Refusal{{Kind: "run", LocalID: 2, Reason: "check constraint"}}}); err != nil {
		t.Fatal(err)
	}
	if o := outboxOf(t, path); o.RunCursor != 2 || o.Forwarded != 1 || o.Refused != 1 {
		t.Fatalf("refused rows not written at once with the pending advance: %+v", o)
	}

	if err := db.DeferAdvance(ctx, store.Advance{Runs: 3, Accepted: 1, At: at}); err != nil {
		t.Fatal(err)
	}
	if err := db.FlushOutbox(ctx); err != nil {
		t.Fatal(err)
	}
	if o := outboxOf(t, path); o.RunCursor != 3 || o.Forwarded != 2 {
		t.Fatalf("after FlushOutbox: %+v", o)
	}

	if err := db.DeferAdvance(ctx, store.Advance{Runs: 4, Accepted: 1, At: at}); err != nil {
		t.Fatal(err)
	}
	if err := db.NoteOutboxError(ctx, "plant store unreachable", at.Add(time.Second)); err != nil {
		t.Fatal(err)
	}
	if _, err := db.Record(ctx, demoRun(6, hash)); err != nil {
		t.Fatal(err)
	}
	if o := outboxOf(t, path); o.RunCursor != 4 || o.Forwarded != 3 || o.LastError != "plant store unreachable" {
		t.Fatalf("an error noted after a pending advance: %+v", o)
	}

	if err := db.DeferAdvance(ctx, store.Advance{Runs: 5, Accepted: 1, At: at.Add(2 * time.Second)}); err != nil {
		t.Fatal(err)
	}
	bad := demoRun(7, hash)
	bad.ConfigHash = "0000" // never registered: the run is not saved
	if _, err := db.Record(ctx, bad); err == nil {
		t.Fatal("a run under an unknown configuration was saved")
	}
	if o, _ := db.OutboxState(ctx); o.RunCursor != 5 || o.Forwarded != 4 || o.LastError != "" {
		t.Fatalf("after a failed run's commit this handle shows %+v, want the advance still pending", o)
	}
	if _, err := db.Record(ctx, demoRun(8, hash)); err != nil {
		t.Fatal(err)
	}
	if o := outboxOf(t, path); o.RunCursor != 5 || o.Forwarded != 4 || o.LastError != "" {
		t.Fatalf("the next good run's commit did not carry the advance: %+v", o)
	}
}

// FlushIdleOutbox writes a pending advance once the line has committed no
// run since it for twice its last interval between runs, at least 5 s: a
// line with a 2 s takt after 5 s, one with a 10 s takt after 20 s, never
// before, and says how long it has to go.
func TestDeferredAdvanceIdleFlush(t *testing.T) {
	ctx := context.Background()
	for _, c := range []struct {
		takt, early, due time.Duration
	}{{2 * time.Second, 4 * time.Second, 5 * time.Second}, {10 * time.Second, 19 * time.Second, 20 * time.Second}} {
		db, path := openTemp(t)
		now := time.Date(2026, 12, 2, 10, 0, 0, 0, time.UTC)
		store.SetNow(db, func() time.Time { return now })
		hash := putDemo(t, db)
		for i := range 3 {
			if i > 0 {
				now = now.Add(c.takt)
			}
			if _, err := db.Record(ctx, demoRun(i, hash)); err != nil {
				t.Fatal(err)
			}
		}
		landed := now.Add(10 * time.Millisecond) // the batch lands after the last run
		now = landed
		if err := db.DeferAdvance(ctx, store.Advance{Runs: 3, Accepted: 3, At: now}); err != nil {
			t.Fatal(err)
		}
		now = landed.Add(c.early)
		if left, err := db.FlushIdleOutbox(ctx); err != nil || left != c.due-c.early {
			t.Fatalf("takt %v, %v after the batch: due in %v (%v), want %v", c.takt, c.early, left, err, c.due-c.early)
		}
		if o := outboxOf(t, path); o.RunCursor != 0 {
			t.Fatalf("takt %v: written on its own %v after the batch", c.takt, c.early)
		}
		now = landed.Add(c.due)
		if left, err := db.FlushIdleOutbox(ctx); err != nil || left != 0 {
			t.Fatalf("takt %v: due in %v (%v), want written now", c.takt, left, err)
		}
		if o := outboxOf(t, path); o.RunCursor != 3 || o.Forwarded != 3 {
			t.Fatalf("takt %v: not written %v after the batch: %+v", c.takt, c.due, o)
		}
	}
}
