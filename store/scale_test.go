package store_test

import (
	"bufio"
	"context"
	"flag"
	"fmt"
	"iter"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
)

// The scale figures take minutes and half a gigabyte of disk, so they run
// only when asked:
//
//	go test ./store -run TestScale -scale -v -timeout 60m
var (
	scale     = flag.Bool("scale", false, "run TestScale: seed 1,000,000 runs and measure")
	scaleRuns = flag.Int("scale.runs", 1_000_000, "runs TestScale seeds")
	scaleDB   = flag.String("scale.db", "", "TestScale: keep the seeded log at this path and reuse it when it exists (the import figure is then not measured)")
)

// exportEnv switches the test binary into the CSV exporter of TestScale:
// "<db path>|<csv path>".
const exportEnv = "PADLINE_STORE_EXPORT"

func init() {
	// Run before TestMain's writer switch is consulted; exits when set.
	if v := os.Getenv(exportEnv); v != "" {
		os.Exit(exportChild(v))
	}
}

func exportChild(v string) int {
	dbPath, csvPath, _ := strings.Cut(v, "|")
	db, err := store.Open(dbPath)
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 2
	}
	defer db.Close()
	f, err := os.Create(csvPath)
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 2
	}
	bw := bufio.NewWriterSize(f, 64<<10)
	n, err := db.WriteCSV(context.Background(), bw, store.Filter{})
	if err == nil {
		err = bw.Flush()
	}
	if err == nil {
		err = f.Close()
	}
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 3
	}
	fmt.Println(n, peakRSSKiB())
	return 0
}

// peakRSSKiB returns this process's peak resident set (VmHWM in
// /proc/self/status, Linux proc(5)), 0 when unknown. Unlike the child's
// ru_maxrss seen by the parent, it does not include the parent's resident
// set inherited through vfork before exec.
func peakRSSKiB() int64 {
	b, err := os.ReadFile("/proc/self/status")
	if err != nil {
		return 0
	}
	for _, line := range strings.Split(string(b), "\n") {
		if v, ok := strings.CutPrefix(line, "VmHWM:"); ok {
			n, _ := strconv.ParseInt(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(v), "kB")), 10, 64)
			return n
		}
	}
	return 0
}

// scaleVariants spreads the seeded runs: QM-205 on 6 of 10, QM-212 on 3,
// QM-230 on 1, so one variant's points are interleaved with others'.
var scaleVariants = []string{"QM-205", "QM-205", "QM-212", "QM-205", "QM-212", "QM-205", "QM-230", "QM-205", "QM-212", "QM-205"}

// scaleRunsSeq yields n demo runs over 4 stations and fixtures.
func scaleRunsSeq(n int, hashes map[string]string) iter.Seq[*sequences.Run] {
	return func(yield func(*sequences.Run) bool) {
		for i := range n {
			v := scaleVariants[i%len(scaleVariants)]
			r := demoRun(i, hashes[v])
			r.Variant = v
			r.Station = fmt.Sprintf("L%d-S%d", 1+i%2, 1+(i/2)%2)
			r.Fixture = fmt.Sprintf("FX-%02d", 7+i%4)
			r.Lot = fmt.Sprintf("LOT-%d", i/5000)
			if !yield(r) {
				return
			}
		}
	}
}

func TestScale(t *testing.T) {
	if !*scale {
		t.Skip("scale figures: go test ./store -run TestScale -scale -v -timeout 60m")
	}
	ctx := context.Background()
	dir := t.TempDir()
	path := filepath.Join(dir, "scale.db")
	reuse := false
	if *scaleDB != "" {
		path = *scaleDB
		_, err := os.Stat(path)
		reuse = err == nil
	}
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	hashes := putScaleVariants(t, db)
	n := *scaleRuns

	// 1. Batch import.
	var start time.Time
	var el time.Duration
	if !reuse {
		start = time.Now()
		done, err := db.Import(ctx, scaleRunsSeq(n, hashes), 10_000)
		if err != nil || done != int64(n) {
			t.Fatalf("import: %d runs, %v", done, err)
		}
		el = time.Since(start)
		rows := float64(n * (1 + measPerRun))
		t.Logf("import: %d runs x %d measurements in %v: %.0f runs/s, %.0f rows/s (run + measurement rows)",
			n, measPerRun, el.Round(time.Millisecond), float64(n)/el.Seconds(), rows/el.Seconds())
	} else if c, err := store.QueryInt(db, "SELECT count(*) FROM runs"); err != nil || c < int64(n) {
		t.Fatalf("reused log %s has %d runs (%v), want ≥ %d", path, c, err, n)
	}

	// 2. Bytes per run on disk, WAL folded in.
	if err := store.Exec(db, "PRAGMA wal_checkpoint(TRUNCATE)"); err != nil {
		t.Fatal(err)
	}
	st, err := os.Stat(path)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("disk: %d bytes for %d runs: %.0f bytes/run", st.Size(), n, float64(st.Size())/float64(n))

	// 3. Last 100,000 trip points of one variant.
	var times []time.Duration
	for range 5 {
		start = time.Now()
		pts, err := db.TripSeries(ctx, store.Filter{Variant: "QM-205"}, 100_000)
		times = append(times, time.Since(start))
		if err != nil {
			t.Fatal(err)
		}
		if len(pts) != min(100_000, n*6/10) {
			t.Fatalf("%d trip points", len(pts))
		}
	}
	t.Logf("trip series, last 100000 points of QM-205: first %v, then %v", times[0].Round(time.Millisecond), roundAll(times[1:]))

	// 4. Export every run as CSV in a child process; its peak RSS.
	csvPath := filepath.Join(dir, "all.csv")
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), exportEnv+"="+path+"|"+csvPath)
	cmd.Stderr = os.Stderr
	start = time.Now()
	out, err := cmd.Output()
	el = time.Since(start)
	if err != nil {
		t.Fatalf("export child: %v", err)
	}
	var runs, hwm int64
	if _, err := fmt.Sscan(string(out), &runs, &hwm); err != nil {
		t.Fatalf("export child said %q: %v", out, err)
	}
	cst, _ := os.Stat(csvPath)
	t.Logf("export CSV: %d runs, %d bytes in %v (child process, incl. start-up); child peak RSS %.1f MiB (VmHWM)",
		runs, cst.Size(), el.Round(time.Millisecond), float64(hwm)/1024)
	os.Remove(csvPath)

	// 5. One run per transaction, synchronous=FULL, on the full log.
	lat := make([]time.Duration, 0, 2000)
	start = time.Now()
	for i := range 2000 {
		r := demoRun(n+i, hashes["QM-205"])
		t1 := time.Now()
		if _, err := db.Record(ctx, r); err != nil {
			t.Fatal(err)
		}
		lat = append(lat, time.Since(t1))
	}
	el = time.Since(start)
	slices.Sort(lat)
	t.Logf("Record, 2000 runs one per transaction (synchronous=FULL) on the %d-run log: %.0f runs/s, p50 %v, p99 %v, max %v",
		n, 2000/el.Seconds(), lat[len(lat)/2].Round(time.Microsecond),
		lat[len(lat)*99/100].Round(time.Microsecond), lat[len(lat)-1].Round(time.Microsecond))
	if err := db.IntegrityCheck(ctx); err != nil {
		t.Fatal(err)
	}
}

// putScaleVariants registers the three variants of the scale log.
func putScaleVariants(tb testing.TB, db *store.DB) map[string]string {
	tb.Helper()
	hashes := map[string]string{}
	for _, v := range []string{"QM-205", "QM-212", "QM-230"} {
		h, err := db.PutVariant(context.Background(), v, []byte("variant: "+v+"\n"))
		if err != nil {
			tb.Fatal(err)
		}
		hashes[v] = h
	}
	return hashes
}

func roundAll(ds []time.Duration) []time.Duration {
	out := make([]time.Duration, len(ds))
	for i, d := range ds {
		out[i] = d.Round(100 * time.Microsecond)
	}
	return out
}

// BenchmarkRecord measures one run (6 measurements) per transaction with
// synchronous=FULL, the station's write path.
func BenchmarkRecord(b *testing.B) {
	ctx := context.Background()
	db, _ := openTemp(b)
	hash := putDemo(b, db)
	i := 0
	for b.Loop() {
		if _, err := db.Record(ctx, demoRun(i, hash)); err != nil {
			b.Fatal(err)
		}
		i++
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "runs/s")
}

// BenchmarkImport measures the batch path, 10,000 runs per transaction.
func BenchmarkImport(b *testing.B) {
	ctx := context.Background()
	db, _ := openTemp(b)
	hashes := putScaleVariants(b, db)
	b.ResetTimer()
	n, err := db.Import(ctx, scaleRunsSeq(b.N, hashes), 10_000)
	if err != nil || n != int64(b.N) {
		b.Fatalf("import %d: %v", n, err)
	}
	b.ReportMetric(float64(b.N*(1+measPerRun))/b.Elapsed().Seconds(), "rows/s")
}

// BenchmarkTripSeries fetches the last 100,000 trip points of QM-205 from a
// log seeded by TestScale:
//
//	go test ./store -run TestScale -scale -scale.db=/tmp/scale.db
//	go test ./store -run '^$' -bench TripSeries -scale.db=/tmp/scale.db
func BenchmarkTripSeries(b *testing.B) {
	if *scaleDB == "" {
		b.Skip("needs -scale.db, a log seeded by TestScale")
	}
	db, err := store.Open(*scaleDB)
	if err != nil {
		b.Fatal(err)
	}
	defer db.Close()
	for b.Loop() {
		pts, err := db.TripSeries(context.Background(), store.Filter{Variant: "QM-205"}, 100_000)
		if err != nil || len(pts) != 100_000 {
			b.Fatalf("%d points, %v", len(pts), err)
		}
	}
}

// BenchmarkCounts counts QM-205's verdicts and first-pass yield over a log
// seeded by TestScale (-scale.db), 600,000 runs.
func BenchmarkCounts(b *testing.B) {
	if *scaleDB == "" {
		b.Skip("needs -scale.db, a log seeded by TestScale")
	}
	db, err := store.Open(*scaleDB)
	if err != nil {
		b.Fatal(err)
	}
	defer db.Close()
	for b.Loop() {
		c, err := db.Counts(context.Background(), store.Filter{Variant: "QM-205"})
		if err != nil || c.Runs < 600_000 {
			b.Fatalf("%+v, %v", c, err)
		}
	}
}
