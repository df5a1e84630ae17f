package session_test

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
)

// BenchmarkUnitsSinceCheck measures the station's throughput (units per
// second, shift log commits included) when 60,000 runs have been tested
// since the last shift-start check: the gate before every unit must not
// count them all again (it keeps a running count).
//
//	go test ./sequences/session -run '^$' -bench UnitsSinceCheck -benchtime 2000x
func BenchmarkUnitsSinceCheck(b *testing.B) {
	const since = 60000
	ctx := context.Background()
	dir := b.TempDir()
	raw, err := os.ReadFile("../../testdata/stations/demo-sim.yaml")
	if err != nil {
		b.Fatal(err)
	}
	station := filepath.Join(dir, "station.yaml")
	// A check every 1,000,000 units: the gate counts, but does not refuse.
	if err := os.WriteFile(station, []byte(strings.Replace(string(raw), "check_every_units: 2000", "check_every_units: 1000000", 1)), 0o644); err != nil {
		b.Fatal(err)
	}
	path := filepath.Join(dir, "shift.db")
	o := session.Options{Variant: "QM-205", Station: station, ShiftLog: path}
	s, err := session.Open(ctx, o)
	if err != nil {
		b.Fatal(err)
	}
	if rep, err := s.Check(ctx); err != nil || !rep.OK {
		b.Fatalf("check %+v %v", rep, err)
	}
	ch, _ := s.Subscribe(64)
	got := make(chan sequences.Run, 1)
	go func() {
		for e := range ch {
			if e.Kind == session.KindVerdictCommitted {
				got <- e.Verdict.Run
			}
		}
	}()
	if err := s.Run(ctx, session.OneSerial("QM205-999999")); err != nil {
		b.Fatal(err)
	}
	if err := s.Close(); err != nil {
		b.Fatal(err)
	}
	tmpl := <-got
	db, err := store.Open(path)
	if err != nil {
		b.Fatal(err)
	}
	n, err := db.Import(ctx, func(yield func(*sequences.Run) bool) {
		for i := range since - 1 {
			r := tmpl
			r.Serial = fmt.Sprintf("QM205-%06d", 100000+i)
			if !yield(&r) {
				return
			}
		}
	}, 5000)
	db.Close()
	if err != nil || n != since-1 {
		b.Fatalf("import: %d, %v", n, err)
	}
	s, err = session.Open(ctx, o)
	if err != nil {
		b.Fatal(err)
	}
	defer s.Close()
	in := make(chan string, b.N)
	for i := range b.N {
		in <- fmt.Sprintf("QM205-%06d", 200000+i%700000)
	}
	close(in)
	b.ResetTimer()
	t0 := time.Now()
	if err := s.Run(ctx, session.ChanScanner(in)); err != nil {
		b.Fatal(err)
	}
	b.ReportMetric(float64(b.N)/time.Since(t0).Seconds(), "units/s")
}
