package plant_test

import (
	"context"
	"slices"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
	"padline/store/plant"
)

// firstPassRun is one hand-made run of the first-pass tests.
type firstPassRun struct {
	station, serial string
	min             int // minutes after the start
	v               sequences.Verdict
}

// The plant's first-verdict rule (DEVELOPERS.md "Plant-wide first-pass
// yield"), on serials retested on the same station and on another:
// per station (a station filter, CountsBy by station, the line board) the
// numbers are each station's shift log's, counted by the log itself and
// by hand; plant-wide (and by line) a serial counts once, by its first
// verdict anywhere, counted by hand in the comments.
func TestFirstPassAcrossStations(t *testing.T) {
	ctx := context.Background()
	url, _ := newSchema(t, baseURL())
	p := openPlant(t, url)
	start := time.Date(2026, 11, 24, 6, 0, 0, 0, time.UTC)
	P, F, SF := sequences.Pass, sequences.Fail, sequences.StationFault
	runs := []firstPassRun{
		{"A", "S-1", 1, F}, {"A", "S-1", 2, P}, // retested on A
		{"A", "S-2", 3, F}, {"B", "S-2", 10, P}, // failed on A, retested on B
		{"A", "S-3", 4, P},
		{"A", "S-4", 5, SF}, {"A", "S-4", 6, F}, // a station fault judges no unit
		{"B", "S-6", 11, P}, {"B", "S-6", 12, P}, // tested twice on B
		{"B", "S-7", 13, F}, {"A", "S-7", 14, P}, // failed on B, retested on A
		{"C", "S-8", 20, F}, {"C", "S-8", 21, P}, {"C", "S-9", 22, P}, // C's serials stay on C
		{"C", "S-10", 23, SF}, {"C", "S-10", 24, P}, {"C", "S-11", 25, F}, {"C", "S-11", 26, F},
	}
	driver := map[string]string{"A": "gpio", "B": "sim", "C": "gpio"}
	logs := map[string]*store.DB{}
	for _, st := range []plant.Station{{Name: "A", Line: "L1"}, {Name: "B", Line: "L2"}, {Name: "C", Line: "L1"}} {
		register(t, p, st)
		log, err := store.Open(tempLog(t, st.Name))
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { log.Close() })
		hash, err := log.PutVariant(ctx, "QM-205", []byte("name: QM-205\n"))
		if err != nil {
			t.Fatal(err)
		}
		var mine []*sequences.Run
		for _, r := range runs {
			if r.station == st.Name {
				sr := simRun(st.Name, r.serial, hash, start.Add(time.Duration(r.min)*time.Minute), 29.7, r.v == F, r.v == SF)
				sr.Driver = driver[st.Name]
				mine = append(mine, sr)
			}
		}
		if _, err := log.Import(ctx, slices.Values(mine), 100); err != nil {
			t.Fatal(err)
		}
		if err := (&plant.Forwarder{Log: log, Plant: p, Station: st.Name}).Drain(ctx); err != nil {
			t.Fatal(err)
		}
		logs[st.Name] = log
	}
	counts := func(f store.Filter) store.Counts {
		t.Helper()
		c, err := p.Counts(ctx, f)
		if err != nil {
			t.Fatalf("counts %+v: %v", f, err)
		}
		return c
	}

	// Per station: each log's own numbers, over all runs, since a time,
	// and of passes only.
	for st, log := range logs {
		for _, f := range []store.Filter{
			{Station: st, FirstInGroup: true},
			{Station: st},
			{Station: st, FirstInGroup: true, Since: start.Add(5*time.Minute + 30*time.Second)},
			{Station: st, FirstInGroup: true, Verdict: P},
			{Station: st, FirstInGroup: true, Variant: "QM-205", Lot: "LOT-1124"},
		} {
			want, err := log.Counts(ctx, f)
			if err != nil {
				t.Fatal(err)
			}
			if got := counts(f); got != want || want.Runs == 0 {
				t.Errorf("station %s %+v: plant %+v, shift log %+v", st, f, got, want)
			}
		}
	}
	// The same by hand: A's log holds S-1 f p, S-2 f, S-3 p, S-4 sf f,
	// S-7 p: first verdicts S-1 f, S-2 f, S-3 p, S-4 f, S-7 p (2 of 5
	// pass). B's holds S-2 p, S-6 p p, S-7 f: first S-2 p, S-6 p, S-7 f.
	hand := map[string]store.Counts{
		"A": {Runs: 7, Pass: 3, Fail: 3, StationFault: 1, FirstUnits: 5, FirstPass: 2},
		"B": {Runs: 4, Pass: 3, Fail: 1, FirstUnits: 3, FirstPass: 2},
		"C": {Runs: 7, Pass: 3, Fail: 3, StationFault: 1, FirstUnits: 4, FirstPass: 2},
	}
	by, err := p.CountsBy(ctx, store.Filter{Variant: "QM-205", FirstInGroup: true}, "station")
	if err != nil {
		t.Fatal(err)
	}
	for st, want := range hand {
		if got := counts(store.Filter{Station: st, FirstInGroup: true}); got != want {
			t.Errorf("station %s, first in group: %+v, counted by hand %+v", st, got, want)
		}
		if by[st] != want {
			t.Errorf("CountsBy station %s: %+v, counted by hand %+v", st, by[st], want)
		}
	}

	// Plant-wide, a serial is one unit: first verdicts S-1 f (A), S-2 f
	// (A), S-3 p (A), S-4 f (A), S-6 p (B), S-7 f (B), S-8 f, S-9 p,
	// S-10 p, S-11 f (C): 10 units, 4 passed first time.
	if got, want := counts(store.Filter{}), (store.Counts{Runs: 18, Pass: 9, Fail: 7, StationFault: 2, FirstUnits: 10, FirstPass: 4}); got != want {
		t.Errorf("plant-wide: %+v, counted by hand %+v", got, want)
	}
	// A station's filter takes first verdicts on that station with or
	// without FirstInGroup, as the station's log does over the whole log:
	// S-7 counts as a first test on A and on B.
	for st, want := range hand {
		if got := counts(store.Filter{Station: st}); got != want {
			t.Errorf("station %s: %+v, counted by hand %+v", st, got, want)
		}
	}
	// By line (L1 = A and C, L2 = B), first verdicts plant-wide: L1 has
	// S-1, S-2, S-3, S-4 and C's four (3 of 8 pass), L2 S-6 p and S-7 f.
	byLine, err := p.CountsBy(ctx, store.Filter{FirstInGroup: true}, "line")
	if err != nil {
		t.Fatal(err)
	}
	if c := byLine["L1"]; c.FirstUnits != 8 || c.FirstPass != 3 || c.Runs != 14 {
		t.Errorf("line L1: %+v, want 8 first tests, 3 passed, 14 runs", c)
	}
	if c := byLine["L2"]; c.FirstUnits != 2 || c.FirstPass != 1 || c.Runs != 4 {
		t.Errorf("line L2: %+v, want 2 first tests, 1 passed, 4 runs", c)
	}
	// A driver filter reads the first verdict's own run: the gpio stations
	// A and C hold 8 of the plant-wide first verdicts (S-6 and S-7 are
	// B's, sim), 3 of them passes.
	if c := counts(store.Filter{Driver: "gpio"}); c.Runs != 14 || c.FirstUnits != 8 || c.FirstPass != 3 {
		t.Errorf("driver gpio: %+v, want 14 runs, 8 first tests, 3 passed", c)
	}
	if c := counts(store.Filter{Driver: "sim", Station: "B", FirstInGroup: true}); c != hand["B"] {
		t.Errorf("driver sim on B: %+v, want %+v", c, hand["B"])
	}

	// The line board's first-pass yield this shift is the station's: from
	// 5.5 min on, A's first tests are S-4 f and S-7 p (S-7 failed on B
	// first); B's S-2 p, S-6 p, S-7 f.
	board, err := p.Board(ctx, "", start.Add(5*time.Minute+30*time.Second), start.Add(time.Hour))
	if err != nil {
		t.Fatal(err)
	}
	want := map[string][4]int64{"A": {2, 1, 2, 1}, "B": {4, 3, 3, 2}, "C": {6, 3, 4, 2}}
	for _, b := range board {
		w := want[b.Name]
		if b.ShiftRuns != w[0] || b.ShiftPass != w[1] || b.ShiftFirst != w[2] || b.ShiftFirstPass != w[3] ||
			b.Yield == nil || *b.Yield != float64(w[3])/float64(w[2]) {
			t.Errorf("board %s: %d units, %d pass, %d first tests, %d passed first, yield %v; want %v", b.Name,
				b.ShiftRuns, b.ShiftPass, b.ShiftFirst, b.ShiftFirstPass, b.Yield, w)
		}
	}
	if len(board) != 3 {
		t.Errorf("board has %d stations, want 3", len(board))
	}
}
