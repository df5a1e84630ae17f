package plant_test

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"path/filepath"
	"reflect"
	"strings"
	"sync"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
	"padline/store/plant"
)

func forwarder(log *store.DB, p *plant.DB, station string) *plant.Forwarder {
	return &plant.Forwarder{Log: log, Plant: p, Station: station, BatchSize: 200,
		MinBackoff: 20 * time.Millisecond, MaxBackoff: 200 * time.Millisecond, Poll: 20 * time.Millisecond}
}

func register(t testing.TB, p *plant.DB, stations ...plant.Station) {
	t.Helper()
	for _, s := range stations {
		if err := p.AddStation(context.Background(), s); err != nil {
			t.Fatal(err)
		}
	}
}

func entries(t testing.TB, seq func(func(*store.Entry, error) bool)) []*store.Entry {
	t.Helper()
	var out []*store.Entry
	for e, err := range seq {
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, e)
	}
	return out
}

// sameFloat treats NaN as equal to NaN.
func sameEntries(a, b []*store.Entry) string {
	if len(a) != len(b) {
		return fmt.Sprintf("%d runs vs %d", len(a), len(b))
	}
	norm := func(e *store.Entry) string {
		j, _ := json.Marshal(e.JSON())
		return string(j)
	}
	for i := range a {
		if norm(a[i]) != norm(b[i]) {
			return fmt.Sprintf("run %d:\n%s\n%s", i, norm(a[i]), norm(b[i]))
		}
	}
	return ""
}

// The plant store answers for a station's runs exactly what the station's
// shift log answers: runs with measurements, trip series, verdict counts
// and first-pass yield, configuration history.
func TestForwardSameNumbers(t *testing.T) {
	url, _ := newSchema(t, baseURL())
	ctx := context.Background()
	p := openPlant(t, url)
	register(t, p, plant.Station{Name: "L1-S1", Line: "L1"}, plant.Station{Name: "L1-S2", Line: "L1"})
	start := time.Date(2026, 11, 30, 21, 0, 0, 0, time.UTC) // crosses a month boundary
	logs := map[string]*store.DB{}
	for i, st := range []string{"L1-S1", "L1-S2"} {
		log := stationLog(t, tempLog(t, st), st, 1200, start, uint64(i+1))
		logs[st] = log
		if _, err := log.RecordCheck(ctx, store.StationCheck{Time: start, Station: st, Fixture: "FX-" + st, StationHash: "abc", OK: true, Details: json.RawMessage(`{"faults":[]}`)}); err != nil {
			t.Fatal(err)
		}
		if _, err := log.RecordStudy(ctx, store.Study{Kind: store.StudyType1, Time: start, Station: st, Fixture: "FX-" + st, Results: json.RawMessage(`{"n":50}`)}); err != nil {
			t.Fatal(err)
		}
		if err := log.SaveRelayOps(ctx, "FX-"+st, []uint64{10, 20, 30}); err != nil {
			t.Fatal(err)
		}
		if err := forwarder(log, p, st).Drain(ctx); err != nil {
			t.Fatal(err)
		}
		o, err := log.OutboxState(ctx)
		if err != nil {
			t.Fatal(err)
		}
		if o.BacklogRuns != 0 || o.BacklogChecks != 0 || o.BacklogStudies != 0 || o.Forwarded != 1200 || o.LastError != "" {
			t.Fatalf("%s outbox after drain: %+v", st, o)
		}
	}
	for st, log := range logs {
		filters := []store.Filter{
			{Station: st},
			{Station: st, Variant: "QM-205", Verdict: sequences.Pass},
			{Station: st, Since: start.Add(time.Hour), Until: start.Add(2 * time.Hour)},
			{Serial: fmt.Sprintf("QM205-%s-%06d", st, 42)},
		}
		for _, f := range filters {
			if d := sameEntries(entries(t, log.Runs(ctx, f)), entries(t, p.Runs(ctx, f))); d != "" {
				t.Fatalf("%s runs %+v differ: %s", st, f, d)
			}
			a, err := log.TripSeries(ctx, f, 0)
			if err != nil {
				t.Fatal(err)
			}
			b, err := p.TripSeries(ctx, f, 0)
			if err != nil {
				t.Fatal(err)
			}
			for i := range b {
				b[i].Line = "" // the shift log knows no lines
			}
			if !reflect.DeepEqual(a, b) {
				t.Fatalf("%s trip series %+v differ: %d vs %d points", st, f, len(a), len(b))
			}
			last, err := p.TripValues(ctx, f, 100)
			if err != nil {
				t.Fatal(err)
			}
			want, _ := log.TripValues(ctx, f, 100)
			if !reflect.DeepEqual(last, want) {
				t.Fatalf("%s last 100 trip values differ", st)
			}
			ca, err := log.Counts(ctx, f)
			if err != nil {
				t.Fatal(err)
			}
			cb, err := p.Counts(ctx, f)
			if err != nil {
				t.Fatal(err)
			}
			if ca != cb || ca.Runs == 0 && f.Serial == "" {
				t.Fatalf("%s counts %+v: log %+v plant %+v", st, f, ca, cb)
			}
		}
		ha, _ := log.ConfigHistory(ctx, "QM-205")
		hb, err := p.ConfigHistory(ctx, "QM-205")
		// The plant keeps the first sighting anywhere in the plant: the
		// configurations and their order are the station's.
		for i := range hb {
			if i < len(ha) && hb[i].FirstSeen.After(ha[i].FirstSeen) {
				t.Fatalf("plant first sighting %v after the station's %v", hb[i].FirstSeen, ha[i].FirstSeen)
			}
			hb[i].FirstSeen = ha[min(i, len(ha)-1)].FirstSeen
		}
		if err != nil || !reflect.DeepEqual(ha, hb) {
			t.Fatalf("config history: %v\n%+v\n%+v", err, ha, hb)
		}
	}
	// Line grouping and the trust rows arrived.
	pts, err := p.TripSeries(ctx, store.Filter{Line: "L1"}, 0)
	if err != nil || len(pts) == 0 || pts[0].Line != "L1" {
		t.Fatalf("line L1: %d points, err %v", len(pts), err)
	}
	board, err := p.Board(ctx, "L1", start, start.Add(5*time.Hour))
	if err != nil {
		t.Fatal(err)
	}
	if len(board) != 2 || board[0].LastCheck == nil || !board[0].LastCheck.OK || len(board[0].Relays) != 3 || board[0].Relays[2].Count != 30 {
		t.Fatalf("board: %+v", board)
	}
}

// A batch sent again (a lost reply, a crash before the cursor advanced)
// changes nothing in the plant store.
func TestReplayIsIdempotent(t *testing.T) {
	url, _ := newSchema(t, baseURL())
	ctx := context.Background()
	p := openPlant(t, url)
	register(t, p, plant.Station{Name: "S1"})
	log := stationLog(t, tempLog(t, "s1"), "S1", 300, time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC), 3)
	o, _ := log.OutboxState(ctx)
	runs, err := log.PendingRuns(ctx, 0, 300)
	if err != nil {
		t.Fatal(err)
	}
	snap, _ := log.Snapshot(ctx, "QM-205", runs[0].ConfigHash)
	b := &plant.Batch{Log: o.LogUUID, Station: "S1", Sent: time.Now(), Runs: runs,
		Configs: []plant.Config{{Variant: "QM-205", Hash: runs[0].ConfigHash, Snapshot: snap}}}
	for i, want := range []int{300, 0, 0} {
		res, err := p.Put(ctx, b)
		if err != nil {
			t.Fatal(err)
		}
		if res.RunsLanded != want || res.Landed+res.Duplicates != 300 {
			t.Fatalf("put %d: %+v, want %d landed", i, res, want)
		}
	}
	n := countRuns(t, p, store.Filter{})
	if n != 300 {
		t.Fatalf("%d runs in the plant, want 300", n)
	}
}

func countRuns(t testing.TB, p *plant.DB, f store.Filter) int64 {
	t.Helper()
	c, err := p.Counts(context.Background(), f)
	if err != nil {
		t.Fatal(err)
	}
	return c.Runs
}

// A station logs in as its own role: rows under another station's id, and
// a measurement whose limits are inverted, are refused by the database and
// reported; the rest of the batch lands.
func TestBadRowsRefusedRestLands(t *testing.T) {
	url, schema := newSchema(t, baseURL())
	ctx := context.Background()
	admin := openPlant(t, url)
	roleA, roleB := schema+"_a", schema+"_b"
	register(t, admin, plant.Station{Name: "L2-S1", Line: "L2", Role: roleA}, plant.Station{Name: "L2-S2", Line: "L2", Role: roleB})

	path := tempLog(t, "a")
	log := stationLog(t, path, "L2-S1", 100, time.Date(2026, 12, 1, 7, 0, 0, 0, time.UTC), 4)
	hash := store.HashConfig([]byte("name: QM-205\n# demo variant of the tests\n"))
	forged := simRun("L2-S2", "QM205-FORGED-1", hash, time.Date(2026, 12, 1, 8, 0, 0, 0, time.UTC), 30, false, false)
	badLimit := simRun("L2-S1", "QM205-BADLIM-1", hash, time.Date(2026, 12, 1, 8, 0, 1, 0, time.UTC), 30, false, false)
	badLimit.Measurements[2].Low, badLimit.Measurements[2].High = 34, 25 // low above high
	var forgedID, badID int64
	var err error
	if forgedID, err = log.Record(ctx, forged); err != nil {
		t.Fatal(err)
	}
	if badID, err = log.Record(ctx, badLimit); err != nil {
		t.Fatal(err)
	}
	for i := range 20 {
		if _, err := log.Record(ctx, simRun("L2-S1", fmt.Sprintf("QM205-AFTER-%d", i), hash, time.Date(2026, 12, 1, 8, 1, i, 0, time.UTC), 30, false, false)); err != nil {
			t.Fatal(err)
		}
	}
	pa := openPlant(t, asRole(url, roleA))
	var refused []store.Refusal
	f := forwarder(log, pa, "L2-S1")
	f.OnBatch = func(r plant.Result) { refused = append(refused, r.Refused...) }
	if err := f.Drain(ctx); err != nil {
		t.Fatal(err)
	}
	if len(refused) != 2 || refused[0].LocalID != forgedID || refused[1].LocalID != badID {
		t.Fatalf("refused %+v, want runs %d and %d", refused, forgedID, badID)
	}
	if !strings.Contains(refused[0].Reason, "row-level security") || !strings.Contains(refused[1].Reason, "check constraint") {
		t.Fatalf("reasons: %q / %q", refused[0].Reason, refused[1].Reason)
	}
	o, _ := log.OutboxState(ctx)
	if o.Refused != 2 || o.BacklogRuns != 0 || o.Forwarded != 120 {
		t.Fatalf("outbox %+v", o)
	}
	if n := countRuns(t, admin, store.Filter{}); n != 120 {
		t.Fatalf("plant holds %d runs, want 120", n)
	}
	if n := countRuns(t, admin, store.Filter{Station: "L2-S2"}); n != 0 {
		t.Fatalf("a forged run landed under L2-S2")
	}
	// Station A cannot pose as station B for a whole batch either, nor
	// read B's rows.
	other := stationLog(t, tempLog(t, "b"), "L2-S2", 10, time.Date(2026, 12, 1, 7, 0, 0, 0, time.UTC), 5)
	if err := forwarder(other, pa, "L2-S2").Drain(ctx); err == nil {
		t.Fatal("station A's role forwarded station B's log")
	}
	pb := openPlant(t, asRole(url, roleB))
	if err := forwarder(other, pb, "L2-S2").Drain(ctx); err != nil {
		t.Fatal(err)
	}
	if n := countRuns(t, pa, store.Filter{}); n != 120 {
		t.Fatalf("station A's role sees %d runs, want its own 120", n)
	}
}

// 20 simulated stations forward a shift each into one database at once.
func TestTwentyStationsConcurrently(t *testing.T) {
	url, _ := newSchema(t, baseURL())
	ctx := context.Background()
	p := openPlant(t, url)
	const stations, perShift = 20, 600
	start := time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC)
	logs := make([]*store.DB, stations)
	for i := range stations {
		name := fmt.Sprintf("L%d-S%d", i/5+1, i%5+1)
		register(t, p, plant.Station{Name: name, Line: fmt.Sprintf("L%d", i/5+1)})
		logs[i] = stationLog(t, tempLog(t, name), name, perShift, start, uint64(100+i))
	}
	var wg sync.WaitGroup
	errs := make([]error, stations)
	for i := range stations {
		wg.Add(1)
		go func() {
			defer wg.Done()
			name := fmt.Sprintf("L%d-S%d", i/5+1, i%5+1)
			f := forwarder(logs[i], p, name)
			f.BatchSize = 50
			errs[i] = f.Drain(ctx)
		}()
	}
	wg.Wait()
	for i, err := range errs {
		if err != nil {
			t.Fatalf("station %d: %v", i, err)
		}
	}
	if n := countRuns(t, p, store.Filter{}); n != stations*perShift {
		t.Fatalf("plant holds %d runs, want %d", n, stations*perShift)
	}
	for i := range stations {
		name := fmt.Sprintf("L%d-S%d", i/5+1, i%5+1)
		a, _ := logs[i].Counts(ctx, store.Filter{Station: name})
		b, _ := p.Counts(ctx, store.Filter{Station: name})
		if a != b {
			t.Fatalf("%s: log %+v plant %+v", name, a, b)
		}
	}
}

// A station whose clock is 5 hours slow: its runs are placed by the
// server's measure of its clock, so they interleave correctly with a good
// station's and fall in the right shift; both times are kept.
//
// The server measures a station's offset as its own clock when a batch
// arrives minus the batch's Sent stamp, so the measure exceeds the true
// offset by the batch's time in transit (the station reading its log,
// the round trip, the server starting the transaction): on a loaded
// machine that is more than a second. Both clocks here are this machine's
// (the slow one shifted by skew), so the test brackets each measure by the
// wall time around its forwarding, [skew, skew + that time], instead of a
// fixed tolerance, and checks every run's placement against the offset
// the server reports.
func TestClockWrongByHours(t *testing.T) {
	url, _ := newSchema(t, baseURL())
	ctx := context.Background()
	p := openPlant(t, url)
	register(t, p, plant.Station{Name: "GOOD"}, plant.Station{Name: "SLOW"})
	const skew = 5 * time.Hour
	const n = 200
	start := time.Now().UTC().Add(-time.Hour).Truncate(time.Second)
	slowStart := start.Add(2*time.Second - skew) // true times interleave: 2 s after the good one's
	good := stationLog(t, tempLog(t, "good"), "GOOD", n, start, 1)
	slow := stationLog(t, tempLog(t, "slow"), "SLOW", n, slowStart, 2)
	// drain forwards a log and returns the offset the server used for it
	// and the wall time the forwarding took (the bound on its transit).
	drain := func(f *plant.Forwarder) (off, took time.Duration) {
		t.Helper()
		f.OnBatch = func(r plant.Result) { off = r.Offset }
		t0 := time.Now()
		if err := f.Drain(ctx); err != nil {
			t.Fatal(err)
		}
		return off, time.Since(t0)
	}
	// PostgreSQL's clock has microseconds: the server's reading may be
	// up to 1 µs before the Go nanosecond stamp taken earlier.
	const pgTick = time.Microsecond
	offG, tookG := drain(forwarder(good, p, "GOOD"))
	fs := forwarder(slow, p, "SLOW")
	fs.Now = func() time.Time { return time.Now().Add(-skew) }
	offS, tookS := drain(fs)
	// A measure within a second of the one in use (none yet: 0) is not
	// taken up (hysteresis), so the good station's offset is 0 or its
	// measure.
	if offG < -pgTick || offG > tookG {
		t.Fatalf("good station: offset %v, want 0 or its measure within [0, %v]", offG, tookG)
	}
	if d := offS - skew; d < -pgTick || d > tookS {
		t.Fatalf("measured offset %v, want %v plus at most the %v its forwarding took", offS, skew, tookS)
	}
	pts, err := p.TripSeries(ctx, store.Filter{}, 0)
	if err != nil {
		t.Fatal(err)
	}
	// stationLog's runs with a trip point: all but its station faults.
	var withTrip []int
	for i := range n {
		if i%101 != 7 {
			withTrip = append(withTrip, i)
		}
	}
	if len(pts) != 2*len(withTrip) {
		t.Fatalf("%d points, want %d", len(pts), 2*len(withTrip))
	}
	// Every run is placed at its station's finish plus the station's
	// offset: the good station's at its true time plus at most its
	// transit, the slow one's at its true time (finish + skew) plus at most
	// its own, so the slow station's runs sit 2 s after the good one's
	// (not 5 h before them: within the good one's shift), and, once the
	// transits are under 2 s apart, the stations alternate in true order.
	seen := map[string]int{}
	for i, pt := range pts {
		if seen[pt.Station] >= len(withTrip) {
			t.Fatalf("more than %d points from %s", len(withTrip), pt.Station)
		}
		k := withTrip[seen[pt.Station]]
		seen[pt.Station]++
		var want, truth time.Time
		var took time.Duration
		switch pt.Station {
		case "GOOD":
			truth = start.Add(time.Duration(k) * 4 * time.Second)
			want, took = truth.Add(offG), tookG
		case "SLOW":
			truth = slowStart.Add(time.Duration(k)*4*time.Second + skew)
			want, took = truth.Add(offS-skew), tookS
		default:
			t.Fatalf("point %d from station %q", i, pt.Station)
		}
		if d := pt.Finished.Sub(want); d < -pgTick || d > pgTick {
			t.Fatalf("%s run %d placed at %v, want its finish plus the station's offset, %v", pt.Station, k, pt.Finished, want)
		}
		if d := pt.Finished.Sub(truth); d < -pgTick || d > took {
			t.Fatalf("%s run %d placed %v from its true time, want within [0, %v]", pt.Station, k, d, took)
		}
		if i > 0 && pt.Finished.Before(pts[i-1].Finished) {
			t.Fatalf("points %d and %d out of order", i-1, i)
		}
		if i > 0 && pt.Station == pts[i-1].Station && max(tookG, tookS) < 2*time.Second {
			t.Fatalf("points %d and %d both from %s: order follows the wrong clock", i-1, i, pt.Station)
		}
	}
	// The station's own time is kept beside the server's receive time.
	ent := entries(t, p.Runs(ctx, store.Filter{Station: "SLOW", Serial: "QM205-SLOW-000000"}))
	if len(ent) != 1 || !ent[0].Finished.Equal(slowStart) {
		t.Fatalf("slow station's own finish time not kept: %+v", ent)
	}
	times, err := p.RunTimes(ctx, "SLOW", ent[0].ID)
	if err != nil {
		t.Fatal(err)
	}
	if d := times.Received.Sub(time.Now()); d > time.Minute || d < -time.Minute || times.At.Sub(times.Finished) != offS {
		t.Fatalf("times %+v, offset %v", times, offS)
	}
}

func TestBackoff(t *testing.T) {
	// Equal jitter: attempt n waits between half and all of min·2^(n−1),
	// capped at max.
	for _, c := range []struct {
		n      int
		u      float64
		want   time.Duration
		reason string
	}{
		{1, 0, 500 * time.Millisecond, "first retry, no jitter: half of min"},
		{1, 0.999999999, time.Second, "first retry, full jitter: min"},
		{4, 0, 4 * time.Second, "fourth: half of 8 s"},
		{20, 0.5, 90 * time.Second, "capped at 2 min: 60 s + 30 s"},
	} {
		got := plant.Backoff(c.n, time.Second, 2*time.Minute, c.u)
		if d := got - c.want; d < -time.Millisecond || d > time.Millisecond {
			t.Errorf("%s: Backoff(%d, u=%g) = %v, want %v", c.reason, c.n, c.u, got, c.want)
		}
	}
	_ = math.Inf
}

// A catch-up batch goes as two halves in two transactions at once; as the
// station's role, a forged run in the first half and a run with inverted
// limits in the second are refused and reported in order, the rest lands
// once with its measurements and first verdicts, whether a half landed
// before (a half that committed without the other) or the whole batch is
// sent again.
func TestCatchUpHalvesExactlyOnce(t *testing.T) {
	url, schema := newSchema(t, baseURL())
	ctx := context.Background()
	admin := openPlant(t, url)
	role := schema + "_h"
	register(t, admin, plant.Station{Name: "H1", Role: role}, plant.Station{Name: "H2"})
	const n = 4200 // one default batch, sent as two halves of 2,100
	path := tempLog(t, "halves")
	start := time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC)
	log := stationLog(t, path, "H1", 1000, start, 11)
	hash := store.HashConfig([]byte("name: QM-205\n# demo variant of the tests\n"))
	// Run 1,001 (first half) is forged under H2, run 4,200 (second half)
	// has inverted limits.
	forged := simRun("H2", "QM205-FORGED-H", hash, start.Add(time.Hour), 30, false, false)
	bad := simRun("H1", "QM205-BADLIM-H", hash, start.Add(5*time.Hour), 30, false, false)
	bad.Measurements[2].Low, bad.Measurements[2].High = 34, 25
	forgedID, err := log.Record(ctx, forged)
	if err != nil {
		t.Fatal(err)
	}
	more := func(yield func(*sequences.Run) bool) {
		for i := range n - 1002 {
			fin := start.Add(time.Hour + time.Duration(i+1)*4*time.Second)
			if !yield(simRun("H1", fmt.Sprintf("QM205-H1B-%06d", i), hash, fin, 29.5, i%37 == 5, i%101 == 7)) {
				return
			}
		}
	}
	if _, err := log.Import(ctx, more, 500); err != nil {
		t.Fatal(err)
	}
	badID, err := log.Record(ctx, bad)
	if err != nil {
		t.Fatal(err)
	}
	if forgedID != 1001 || badID != n {
		t.Fatalf("forged run %d, bad run %d: want 1001 and %d", forgedID, badID, n)
	}
	// A copy of the log as it is now, before anything is sent, to send it
	// all again afterwards (a crash before the cursor moved).
	log.Close()
	replay := filepath.Join(t.TempDir(), "replay.db")
	copyFile(t, path, replay)
	if log, err = store.Open(path); err != nil {
		t.Fatal(err)
	}
	defer log.Close()
	p := openPlant(t, asRole(url, role))
	// The second half of the log's runs lands on its own first, as when
	// the other half's transaction failed.
	o, _ := log.OutboxState(ctx)
	all, err := log.PendingRuns(ctx, 0, n)
	if err != nil || len(all) != n {
		t.Fatalf("%d runs read: %v", len(all), err)
	}
	snap, _ := log.Snapshot(ctx, "QM-205", hash)
	half := &plant.Batch{Log: o.LogUUID, Station: "H1", Sent: time.Now(), Runs: all[n/2:],
		Configs: []plant.Config{{Variant: "QM-205", Hash: hash, Snapshot: snap}}}
	if res, err := p.Put(ctx, half); err != nil || res.RunsLanded != n/2-1 || len(res.Refused) != 1 {
		t.Fatalf("second half alone: %+v, %v", res, err)
	}
	var refused []store.Refusal
	var landed, dups int
	f := &plant.Forwarder{Log: log, Plant: p, Station: "H1"}
	f.OnBatch = func(r plant.Result) {
		refused = append(refused, r.Refused...)
		landed, dups = landed+r.RunsLanded, dups+r.Duplicates
	}
	if err := f.Drain(ctx); err != nil {
		t.Fatal(err)
	}
	if landed != n/2-1 || dups != n/2-1 {
		t.Fatalf("catch-up landed %d runs with %d already stored, want %d and %d", landed, dups, n/2-1, n/2-1)
	}
	if len(refused) != 2 || refused[0].LocalID != forgedID || refused[1].LocalID != badID ||
		!strings.Contains(refused[0].Reason, "row-level security") || !strings.Contains(refused[1].Reason, "check constraint") {
		t.Fatalf("refused %+v, want runs %d (forged) and %d (limits)", refused, forgedID, badID)
	}
	check := func(when string) {
		t.Helper()
		var runs, serials, meas, firsts, wantMeas int64
		if err := admin.QueryRowForTest(ctx, `SELECT count(*), count(DISTINCT serial) FROM runs`, &runs, &serials); err != nil {
			t.Fatal(err)
		}
		if err := admin.QueryRowForTest(ctx, `SELECT count(*) FROM measurements`, &meas); err != nil {
			t.Fatal(err)
		}
		if err := admin.QueryRowForTest(ctx, `SELECT count(*) FROM serial_first`, &firsts); err != nil {
			t.Fatal(err)
		}
		var faults int64
		for _, e := range all {
			if e.ID == forgedID || e.ID == badID {
				continue
			}
			wantMeas += int64(len(e.Measurements))
			if e.Verdict == sequences.StationFault {
				faults++
			}
		}
		if runs != n-2 || serials != n-2 || meas != wantMeas || firsts != n-2-faults {
			t.Fatalf("%s: %d runs (%d serials), %d measurements, %d first verdicts; want %d, %d, %d",
				when, runs, serials, meas, firsts, n-2, wantMeas, n-2-faults)
		}
	}
	check("after the catch-up")
	good := store.Filter{Station: "H1", Until: start.Add(5*time.Hour - time.Minute)} // all but the refused run
	ca, _ := log.Counts(ctx, good)
	cb, _ := admin.Counts(ctx, good)
	if ca != cb {
		t.Fatalf("counts: log %+v plant %+v", ca, cb)
	}
	// The whole backlog sent again.
	again, err := store.Open(replay)
	if err != nil {
		t.Fatal(err)
	}
	defer again.Close()
	landed, dups, refused = 0, 0, nil
	f = &plant.Forwarder{Log: again, Plant: p, Station: "H1", OnBatch: f.OnBatch}
	if err := f.Drain(ctx); err != nil {
		t.Fatal(err)
	}
	if landed != 0 || dups != n-2 || len(refused) != 2 {
		t.Fatalf("replay landed %d, %d already stored, %d refused; want 0, %d, 2", landed, dups, len(refused), n-2)
	}
	check("after the replay")
}
