package plant

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math/rand/v2"
	"slices"
	"sync"
	"time"

	"padline/store"
)

// Forwarder moves a station's committed runs, station checks, studies and
// relay counts from its shift log to the plant store, batch by batch, in
// the order they were committed. The shift log's outbox cursor advances
// only after the plant store has committed a batch; a batch sent twice
// (after a crash or a lost reply) is dropped by the plant store's keys, so
// every run arrives exactly once. It never writes the station's runs and
// never holds the shift log's write lock for longer than advancing the
// cursor, so it does not slow the test of the next unit.
type Forwarder struct {
	Log     *store.DB
	Plant   *DB
	Station string
	// Profile is the station facts the line board shows (JSON object):
	// check intervals and relay ratings from the station file.
	Profile json.RawMessage
	// BatchSize is the most runs per batch (default 5,000). With batches
	// staged by COPY, a catch-up costs about the same CPU per run in
	// batches of 2,000 to 20,000 (BenchmarkCatchUp -catchup.batch N, as the
	// station's role at load 13-16: 9,700-10,400 runs per CPU second of
	// station and server together); 5,000 keeps a batch to a few MB (twice,
	// with the next one read ahead) and bounds what a crash mid-batch
	// sends again.
	BatchSize int
	// Poll is how often an idle forwarder looks for new runs (default
	// 1 s, or stateEvery once runs are offered: each of them wakes it and
	// others are found only when the state is read again); Kick wakes it
	// at once.
	Poll time.Duration
	// Every is the least time between two batches while the forwarder
	// keeps up (default 1 s; negative: a batch per Kick): the runs a line
	// commits meanwhile go in one batch, so forwarding costs the station
	// one batch a second at most instead of one per unit. A backlog goes
	// in full batches back to back.
	Every time.Duration
	// MinBackoff and MaxBackoff bound the wait after a failure (default
	// 1 s and 2 min); see Backoff.
	MinBackoff, MaxBackoff time.Duration
	// Now is the station's clock (default time.Now).
	Now func() time.Time
	// OnBatch, when set, is called after each batch lands.
	OnBatch func(Result)

	kick    chan struct{}
	omu     sync.Mutex
	offered []*store.Entry // runs just committed, handed over by Offer
	// offers is set once Offer is called: the process commits through
	// it. drops counts offered runs dropped past maxOffered, drainedTo
	// the drops a read of the whole backlog has covered since.
	offers           bool
	drops, drainedTo int
	configs          map[[2]string]bool // configurations the plant store has
	pre              *prefetch          // the next batch's runs, read while this one is sent
	relays           []store.RelayCount // the relay counts the plant store has
	// relaysRead is when the relay counts were last read from the log.
	relaysRead time.Time
	// st is the outbox as this forwarder left it after its last batch,
	// valid (stOK) while that batch emptied the backlog; it is read from
	// the log again every stateEvery, after a full batch or an error.
	st     store.Outbox
	stOK   bool
	stRead time.Time
}

// stateEvery is how often the forwarder reads the outbox state (cursors,
// backlog) from the log while it keeps up with the line; in between, a
// committed run needs only the read of the runs after its cursor.
const stateEvery = 5 * time.Second

// state returns the outbox state: the one kept in memory while it is
// valid, else the log's.
func (f *Forwarder) state(ctx context.Context) (store.Outbox, error) {
	if f.stOK && f.now().Sub(f.stRead) < stateEvery {
		return f.st, nil
	}
	st, err := f.Log.OutboxState(ctx)
	if err != nil {
		return st, err
	}
	f.st, f.stOK, f.stRead = st, true, f.now()
	return st, nil
}

// relayEvery is how often the forwarder reads the relay counts.
const relayEvery = 10 * time.Second

// prefetch reads the runs after an id in the background.
type prefetch struct {
	after int64
	runs  []*store.Entry
	err   error
	done  chan struct{}
}

// maxOffered bounds the runs Offer keeps; past it the forwarder reads the
// log (a backlog it catches up in full batches anyway).
const maxOffered = 1000

// Offer hands the forwarder a run just committed to the shift log under
// e.ID, and wakes it. When the offered runs follow the outbox cursor
// without a gap, the forwarder sends them without reading the log again;
// otherwise it reads the log as always. It never blocks.
func (f *Forwarder) Offer(e *store.Entry) {
	f.omu.Lock()
	f.offers = true
	if len(f.offered) < maxOffered {
		f.offered = append(f.offered, e)
	} else {
		f.drops++
	}
	f.omu.Unlock()
	f.Kick()
}

// takeOffered returns the offered runs that follow cursor without a gap
// (up to size), dropping those at or below it; nil if they do not follow.
// none reports that runs are offered, none is left and none was dropped
// unread: the log holds no run of this process past cursor. drops is
// the count of dropped runs for drained.
func (f *Forwarder) takeOffered(cursor int64, size int) (runs []*store.Entry, none bool, drops int) {
	f.omu.Lock()
	defer f.omu.Unlock()
	i := 0
	for i < len(f.offered) && f.offered[i].ID <= cursor {
		i++
	}
	f.offered = f.offered[i:]
	if len(f.offered) == 0 || f.offered[0].ID != cursor+1 {
		none = f.offers && len(f.offered) == 0 && f.drops == f.drainedTo
		f.offered = nil
		return nil, none, f.drops
	}
	n := 1
	for n < len(f.offered) && n < size && f.offered[n].ID == f.offered[n-1].ID+1 {
		n++
	}
	return slices.Clone(f.offered[:n]), false, f.drops
}

// drained notes that a read of the log took every run after the cursor,
// the drops counted before it included.
func (f *Forwarder) drained(drops int) {
	f.omu.Lock()
	f.drainedTo = max(f.drainedTo, drops)
	f.omu.Unlock()
}

// Kick wakes the forwarder (a run was committed). It never blocks.
func (f *Forwarder) Kick() {
	f.init()
	select {
	case f.kick <- struct{}{}:
	default:
	}
}

func (f *Forwarder) init() {
	if f.kick == nil {
		f.kick = make(chan struct{}, 1)
	}
	if f.configs == nil {
		f.configs = map[[2]string]bool{}
	}
}

func (f *Forwarder) now() time.Time {
	if f.Now != nil {
		return f.Now()
	}
	return time.Now()
}

// Heartbeat is how often an idle forwarder still reports to the plant
// store (backlog, relay counts, station facts), so the line board can tell
// an idle station from one that lost the network.
const Heartbeat = 30 * time.Second

// Backoff is the wait before retry attempt n (n ≥ 1) after failures:
// exponential from min, capped at max, with "equal jitter" — half the
// step fixed, half uniformly random (AWS Architecture Blog, M. Brooker,
// "Exponential Backoff And Jitter", 2015) — so stations that lost the
// server together do not return together. u is uniform in [0, 1).
func Backoff(n int, min, max time.Duration, u float64) time.Duration {
	d := min
	for i := 1; i < n && d < max; i++ {
		d *= 2
	}
	if d > max {
		d = max
	}
	return d/2 + time.Duration(u*float64(d/2))
}

// Run forwards until ctx ends, backing off while the plant store is
// unreachable. It returns ctx's error.
func (f *Forwarder) Run(ctx context.Context) error {
	f.init()
	minB, maxB := f.MinBackoff, f.MaxBackoff
	if minB <= 0 {
		minB = time.Second
	}
	if maxB < minB {
		maxB = max(2*time.Minute, minB)
	}
	poll := func() time.Duration {
		switch {
		case f.Poll > 0:
			return f.Poll
		case f.offering():
			// Every run this process commits wakes the forwarder (Offer);
			// a wake-up a second more cost a slow line's station CPU for
			// nothing but the state's read, every stateEvery anyway.
			return stateEvery
		}
		return time.Second
	}
	every := f.Every
	if every == 0 {
		every = time.Second
	}
	// A landed batch's cursor still pending in the log (DeferAdvance) is
	// written as the forwarder stops.
	defer f.Log.FlushOutbox(context.WithoutCancel(ctx))
	// One timer for every wait (a new one per wait showed in the profile
	// of a slow line); since Go 1.23 Reset after Stop delivers no stale
	// tick.
	t := time.NewTimer(time.Hour)
	defer t.Stop()
	wait := func(d time.Duration, kick <-chan struct{}) error {
		t.Reset(d)
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-kick:
			t.Stop()
		case <-t.C:
		}
		return nil
	}
	fails := 0
	for {
		n, err := f.Step(ctx)
		var d time.Duration
		switch {
		case ctx.Err() != nil:
			return ctx.Err()
		case err != nil:
			fails++
			d = Backoff(fails, minB, maxB, rand.Float64())
		case n >= f.batchSize():
			fails = 0
			continue // a backlog: more are waiting
		case n > 0:
			fails = 0
			if every <= 0 {
				continue
			}
			// Let the line commit more before the next batch; a commit
			// meanwhile does not cut the wait short.
			if err := wait(every, nil); err != nil {
				return err
			}
			continue
		default:
			fails = 0
			d = poll()
			// Nothing to send: once the line has committed no run for a
			// while, the last batch's cursor is written on its own.
			if due, _ := f.Log.FlushIdleOutbox(ctx); due > 0 {
				d = min(d, due)
			}
		}
		kick := f.kick
		if err != nil {
			kick = nil // a new run does not cut a back-off short
		}
		if err := wait(d, kick); err != nil {
			return err
		}
	}
}

// offering reports whether runs are handed over by Offer.
func (f *Forwarder) offering() bool {
	f.omu.Lock()
	defer f.omu.Unlock()
	return f.offers
}

// Step sends one batch, if there is anything to send, and returns how many
// rows it held. An error leaves the cursor where it was and is noted in the
// shift log for 'padline plant status'.
func (f *Forwarder) Step(ctx context.Context) (int, error) {
	f.init()
	n, err := f.step(ctx)
	if err != nil {
		f.stOK = false
	}
	if err != nil && ctx.Err() == nil {
		_ = f.Log.NoteOutboxError(context.WithoutCancel(ctx), err.Error(), f.now())
	}
	return n, err
}

// batchSize is BatchSize or its default.
func (f *Forwarder) batchSize() int {
	if f.BatchSize <= 0 {
		return 5000
	}
	return f.BatchSize
}

func (f *Forwarder) step(ctx context.Context) (int, error) {
	size := f.batchSize()
	cached := f.stOK && f.now().Sub(f.stRead) < stateEvery
	st, err := f.state(ctx)
	if err != nil {
		return 0, err
	}
	runs, none, drops := f.takeOffered(st.RunCursor, size)
	if runs != nil {
		// Runs handed over as they were committed: the next ones after
		// the cursor, so the log need not be read for them.
	} else if none && cached {
		// Every run this process committed was handed over and sent, and
		// the kept state knew of no backlog: nothing to read. A read of
		// the log after each batch and each idle poll cost the station
		// about 0.25 ms of CPU (BenchmarkUnitForwarding/every-unit); runs
		// committed otherwise are found when the state is read again
		// (stateEvery).
	} else if pre := f.pre; pre != nil && pre.after == st.RunCursor {
		<-pre.done
		runs, err = pre.runs, pre.err
	} else {
		runs, err = f.Log.PendingRuns(ctx, st.RunCursor, size)
		if err == nil && len(runs) < size {
			f.drained(drops)
		}
	}
	f.pre = nil
	if err != nil {
		return 0, err
	}
	if len(runs) == size && cached {
		// A full batch from the kept state, which knew of no backlog: runs
		// were committed without being offered. Read the true backlog.
		if st, err = f.Log.OutboxState(ctx); err != nil {
			return 0, err
		}
		f.st, f.stRead = st, f.now()
	}
	if len(runs) == size {
		// A full batch: more are waiting (a catch-up). Read the next batch
		// from the shift log while this one goes to the plant store; it is
		// used only if this one lands and the cursor moves to its end.
		pre := &prefetch{after: runs[len(runs)-1].ID, done: make(chan struct{})}
		f.pre = pre
		go func() {
			defer close(pre.done)
			pre.runs, pre.err = f.Log.PendingRuns(context.WithoutCancel(ctx), pre.after, size)
		}()
	}
	var (
		checks  []store.StationCheck
		studies []store.Study
	)
	if st.BacklogChecks > 0 {
		if checks, err = f.Log.PendingChecks(ctx, st.CheckCursor, 100); err != nil {
			return 0, err
		}
	}
	if st.BacklogStudies > 0 {
		if studies, err = f.Log.PendingStudies(ctx, st.StudyCursor, 100); err != nil {
			return 0, err
		}
	}
	if len(runs)+len(checks)+len(studies) == 0 && !st.LastTime.IsZero() && f.now().Sub(st.LastTime) < Heartbeat {
		return 0, nil
	}
	// Relay counts change with every unit; the board needs them to the
	// minute, not to the unit.
	relays := f.relays
	if f.relaysRead.IsZero() || f.now().Sub(f.relaysRead) >= relayEvery {
		if relays, err = f.Log.RelayCounts(ctx); err != nil {
			return 0, err
		}
		f.relaysRead = f.now()
	}
	b := &Batch{Log: st.LogUUID, Station: f.Station, Runs: runs, Checks: checks, Studies: studies,
		Backlog: max(0, st.BacklogRuns-int64(len(runs))), Profile: f.Profile}
	if !slices.Equal(relays, f.relays) {
		b.Relays = relays // only when they changed
	}
	var cfgKeys [][2]string
	for _, r := range runs {
		k := [2]string{r.Variant, r.ConfigHash}
		if f.configs[k] {
			continue
		}
		f.configs[k] = true // only once per batch; confirmed after Put
		cfgKeys = append(cfgKeys, k)
		snap, err := f.Log.Snapshot(ctx, r.Variant, r.ConfigHash)
		if err != nil {
			delete(f.configs, k)
			return 0, err
		}
		c := Config{Variant: r.Variant, Hash: r.ConfigHash, Snapshot: snap}
		if hist, err := f.Log.ConfigHistory(ctx, r.Variant); err == nil {
			for _, h := range hist {
				if h.Hash == r.ConfigHash {
					c.FirstSeen = h.FirstSeen
				}
			}
		}
		b.Configs = append(b.Configs, c)
	}
	b.Sent = f.now()
	res, err := f.put(ctx, b)
	if err != nil {
		for _, k := range cfgKeys {
			delete(f.configs, k)
		}
		return 0, err
	}
	a := store.Advance{Runs: st.RunCursor, Checks: st.CheckCursor, Studies: st.StudyCursor, Refused: res.Refused, At: f.now()}
	for _, r := range runs {
		a.Runs = max(a.Runs, r.ID)
	}
	for _, c := range checks {
		a.Checks = max(a.Checks, c.ID)
	}
	for _, s := range studies {
		a.Studies = max(a.Studies, s.ID)
	}
	refusedRuns := 0
	for _, r := range res.Refused {
		if r.Kind == "run" {
			refusedRuns++
		}
	}
	a.Accepted = int64(len(runs) - refusedRuns)
	// The plant has committed: advance even if this context has just been
	// cancelled, or the batch is sent again for nothing. While the
	// forwarder keeps up, the cursor rides the next run's commit
	// (store.DB.DeferAdvance): its own commit was a third of what a batch
	// per unit cost the station (BenchmarkUnitForwarding every-unit). A
	// catch-up batch, and one with refused rows, is written at once.
	keepsUp := len(runs) < size && len(checks) < 100 && len(studies) < 100 && st.BacklogRuns <= int64(len(runs))
	adv := f.Log.AdvanceOutbox
	if keepsUp {
		adv = f.Log.DeferAdvance
	}
	if err := adv(context.WithoutCancel(ctx), a); err != nil {
		return 0, fmt.Errorf("plant batch landed but the outbox cursor did not advance (it will be resent): %w", err)
	}
	f.relays = relays
	// The state as the log now has it, but for runs committed meanwhile
	// (the next read of the runs after the cursor finds them).
	f.st.RunCursor, f.st.CheckCursor, f.st.StudyCursor = a.Runs, a.Checks, a.Studies
	f.st.Forwarded += a.Accepted
	f.st.LastTime, f.st.LastError = a.At, ""
	f.st.BacklogRuns, f.st.BacklogChecks, f.st.BacklogStudies = 0, 0, 0
	f.st.Refused += int64(len(res.Refused))
	f.stOK = keepsUp
	if f.OnBatch != nil {
		f.OnBatch(res)
	}
	return len(runs) + len(checks) + len(studies), nil
}

// splitAt is the fewest runs a batch needs to be sent in two halves.
const splitAt = 2000

// put sends b. A catch-up batch (splitAt runs or more) goes as two halves,
// each in a transaction of its own, at once on two connections: the plant
// server moves both on two cores, and the station encodes one while the
// server moves the other. The cursor advances only when both have landed:
// a half that landed without the other is sent again with it and skipped
// as stored (the run key), so every run still arrives exactly once.
func (f *Forwarder) put(ctx context.Context, b *Batch) (Result, error) {
	if len(b.Runs) < splitAt {
		return f.Plant.Put(ctx, b)
	}
	h := len(b.Runs) / 2
	first, second := *b, *b
	first.Runs, second.Runs = b.Runs[:h], b.Runs[h:]
	second.Checks, second.Studies, second.Relays = nil, nil, nil
	var (
		r2   Result
		err2 error
		done = make(chan struct{})
	)
	go func() {
		defer close(done)
		r2, err2 = f.Plant.Put(ctx, &second)
	}()
	r1, err1 := f.Plant.Put(ctx, &first)
	<-done
	if err := errors.Join(err1, err2); err != nil {
		return Result{}, err
	}
	res := Result{Landed: r1.Landed + r2.Landed, Duplicates: r1.Duplicates + r2.Duplicates,
		RunsLanded: r1.RunsLanded + r2.RunsLanded, Offset: r1.Offset}
	// Refused runs in run order, then the first half's checks and studies.
	for _, r := range [][]store.Refusal{r1.Refused, r2.Refused} {
		for _, x := range r {
			if x.Kind == "run" {
				res.Refused = append(res.Refused, x)
			}
		}
	}
	for _, x := range r1.Refused {
		if x.Kind != "run" {
			res.Refused = append(res.Refused, x)
		}
	}
	return res, nil
}

// Drain forwards until the outbox is empty or an error occurs, and leaves
// the cursors of what landed written in the log.
func (f *Forwarder) Drain(ctx context.Context) error {
	for {
		n, err := f.Step(ctx)
		if err != nil {
			_ = f.Log.FlushOutbox(context.WithoutCancel(ctx))
			return err
		}
		if n == 0 {
			if err := f.Log.FlushOutbox(context.WithoutCancel(ctx)); err != nil {
				return fmt.Errorf("plant batches landed but the outbox cursor did not advance (they will be resent): %w", err)
			}
			return nil
		}
	}
}
