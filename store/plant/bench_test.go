package plant_test

import (
	"context"
	"io"
	"os"
	"path/filepath"
	"testing"
	"time"

	"padline/store"
	"padline/store/plant"
)

// BenchmarkCatchUp measures catching up after an outage: one station's
// backlog of 20,000 runs (4 measurements each) forwarded to a fresh plant
// schema. Target: ≥ 5,000 runs/s.
//
//	go test ./store/plant -run '^$' -bench CatchUp -benchtime 3x
func BenchmarkCatchUp(b *testing.B) {
	const backlog = 20_000
	src := tempLog(b, "backlog")
	log := stationLog(b, src, "S1", backlog, time.Date(2026, 11, 20, 6, 0, 0, 0, time.UTC), 1)
	log.Close()
	ctx := context.Background()
	var total time.Duration
	for i := range b.N {
		b.StopTimer()
		url, _ := newSchema(b, baseURL())
		p := openPlant(b, url)
		register(b, p, plant.Station{Name: "S1"})
		path := filepath.Join(b.TempDir(), "copy.db")
		copyFile(b, src, path)
		db, err := store.Open(path)
		if err != nil {
			b.Fatal(err)
		}
		f := &plant.Forwarder{Log: db, Plant: p, Station: "S1"} // default batches
		b.StartTimer()
		start := time.Now()
		if err := f.Drain(ctx); err != nil {
			b.Fatal(err)
		}
		total += time.Since(start)
		b.StopTimer()
		if n := countRuns(b, p, store.Filter{}); n != backlog {
			b.Fatalf("iteration %d: %d runs landed", i, n)
		}
		db.Close()
		b.StartTimer()
	}
	b.ReportMetric(float64(backlog*b.N)/total.Seconds(), "runs/s")
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
