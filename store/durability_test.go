package store_test

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"

	"padline/sequences"
	"padline/store"
)

// writerEnv switches the test binary into the crash-test writer: it records
// demo runs into the shift log named by the variable's value and prints
// "committed <id> <serial>" after each commit, until it is killed.
const writerEnv = "PADLINE_STORE_CRASH_WRITER"

func TestMain(m *testing.M) {
	if path := os.Getenv(writerEnv); path != "" {
		os.Exit(crashWriter(path))
	}
	os.Exit(m.Run())
}

// importBatch is the number of runs per transaction of the import writer.
const importBatch = 50

func crashWriter(arg string) int {
	ctx := context.Background()
	path, mode, _ := strings.Cut(arg, "|")
	db, err := store.Open(path)
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 2
	}
	snap, err := os.ReadFile(filepath.Join("..", "testdata", "variants", "QM-205.yaml"))
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 2
	}
	hash, err := db.PutVariant(ctx, "QM-205", snap)
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 2
	}
	if mode == "import" {
		// Batches of importBatch runs, each batch its own lot; a line
		// after each committed batch.
		for b := 0; b < 100_000; b++ {
			batch := func(yield func(*sequences.Run) bool) {
				for i := range importBatch {
					r := demoRun(b*importBatch+i, hash)
					r.Lot = fmt.Sprintf("B%d", b)
					if !yield(r) {
						return
					}
				}
			}
			if _, err := db.Import(ctx, batch, importBatch); err != nil {
				fmt.Fprintln(os.Stderr, err)
				return 3
			}
			fmt.Printf("committed B%d\n", b)
		}
		return 0
	}
	for i := 0; i < 1_000_000; i++ {
		id, err := db.Record(ctx, demoRun(i, hash))
		if err != nil {
			fmt.Fprintln(os.Stderr, err)
			return 3
		}
		// os.Stdout is unbuffered: the line is in the pipe before the next
		// run starts.
		fmt.Printf("committed %d %s\n", id, demoRun(i, hash).Serial)
	}
	return 0
}

func TestCrashSafety(t *testing.T) {
	ctx := context.Background()
	for round := range 3 {
		t.Run(fmt.Sprintf("kill after %d runs", 100+round*150), func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "shift.db")
			cmd := exec.Command(os.Args[0], "-test.run=^$")
			cmd.Env = append(os.Environ(), writerEnv+"="+path)
			var stderr bytes.Buffer
			cmd.Stderr = &stderr
			out, err := cmd.StdoutPipe()
			if err != nil {
				t.Fatal(err)
			}
			if err := cmd.Start(); err != nil {
				t.Fatal(err)
			}
			committed := map[int64]string{}
			sc := bufio.NewScanner(out)
			killAt := 100 + round*150
			killed := false
			for sc.Scan() {
				var id int64
				var serial string
				if _, err := fmt.Sscanf(sc.Text(), "committed %d %s", &id, &serial); err != nil {
					t.Fatalf("writer said %q: %v", sc.Text(), err)
				}
				committed[id] = serial
				if len(committed) == killAt && !killed {
					// The writer is already inside its next Record.
					if err := cmd.Process.Signal(syscall.SIGKILL); err != nil {
						t.Fatal(err)
					}
					killed = true
				}
			}
			err = cmd.Wait()
			var ee *exec.ExitError
			if !errors.As(err, &ee) || ee.Sys().(syscall.WaitStatus).Signal() != syscall.SIGKILL {
				t.Fatalf("writer ended with %v, want SIGKILL; stderr: %s", err, stderr.String())
			}

			db, err := store.Open(path)
			if err != nil {
				t.Fatal(err)
			}
			defer db.Close()
			if err := db.IntegrityCheck(ctx); err != nil {
				t.Fatal(err)
			}
			torn, err := store.QueryInt(db, `SELECT count(*) FROM runs r
				WHERE (SELECT count(*) FROM measurements m WHERE m.run_id = r.id) != ?`, measPerRun)
			if err != nil || torn != 0 {
				t.Errorf("%d runs without exactly %d measurements (%v)", torn, measPerRun, err)
			}
			orphans, err := store.QueryInt(db,
				`SELECT count(*) FROM measurements WHERE run_id NOT IN (SELECT id FROM runs)`)
			if err != nil || orphans != 0 {
				t.Errorf("%d measurements without a run (%v)", orphans, err)
			}
			present := 0
			for e, err := range db.Runs(ctx, store.Filter{}) {
				if err != nil {
					t.Fatal(err)
				}
				if s, ok := committed[e.ID]; ok {
					if s != e.Serial {
						t.Errorf("run %d is %s, writer committed %s", e.ID, e.Serial, s)
					}
					present++
				}
			}
			if present != len(committed) {
				t.Errorf("%d of %d committed runs present after the kill", present, len(committed))
			}
			t.Logf("writer reported %d commits; log holds them all, integrity ok", len(committed))
		})
	}
}

// TestCrashSafetyImport kills the batch importer: every batch (one
// transaction, one lot) is in the log whole or not at all.
func TestCrashSafetyImport(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "shift.db")
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), writerEnv+"="+path+"|import")
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	committed := map[string]bool{}
	sc := bufio.NewScanner(out)
	for sc.Scan() {
		lot, ok := strings.CutPrefix(sc.Text(), "committed ")
		if !ok {
			t.Fatalf("writer said %q", sc.Text())
		}
		committed[lot] = true
		if len(committed) == 20 {
			if err := cmd.Process.Signal(syscall.SIGKILL); err != nil {
				t.Fatal(err)
			}
		}
	}
	if err := cmd.Wait(); err == nil {
		t.Fatalf("writer was not killed; stderr: %s", stderr.String())
	}
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if err := db.IntegrityCheck(ctx); err != nil {
		t.Fatal(err)
	}
	partial, err := store.QueryInt(db, `SELECT count(*) FROM (SELECT lot FROM runs GROUP BY lot HAVING count(*) != ?)`, importBatch)
	if err != nil || partial != 0 {
		t.Errorf("%d batches in the log partly (%v)", partial, err)
	}
	torn, err := store.QueryInt(db, `SELECT count(*) FROM runs r
		WHERE (SELECT count(*) FROM measurements m WHERE m.run_id = r.id) != ?`, measPerRun)
	if err != nil || torn != 0 {
		t.Errorf("%d runs without exactly %d measurements (%v)", torn, measPerRun, err)
	}
	for lot := range committed {
		if c, err := db.Counts(ctx, store.Filter{Lot: lot}); err != nil || c.Runs != importBatch {
			t.Errorf("committed batch %s has %d runs (%v)", lot, c.Runs, err)
		}
	}
}

func TestReaderWhileWriting(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "shift.db")
	writer, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer writer.Close()
	hash := putDemo(t, writer)
	// A second handle on the file plays the 'padline history' process.
	reader, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer reader.Close()

	const runs = 400
	var wg sync.WaitGroup
	done := make(chan struct{})
	var werr error
	wg.Go(func() {
		defer close(done)
		for i := range runs {
			if _, err := writer.Record(ctx, demoRun(i, hash)); err != nil {
				werr = err
				return
			}
		}
	})
	exports, last := 0, int64(0)
	for finished := false; !finished; {
		select {
		case <-done:
			finished = true // one more export after the writer is done
		default:
		}
		var buf bytes.Buffer
		n, err := reader.WriteJSONL(ctx, &buf, store.Filter{Variant: "QM-205"})
		if err != nil {
			t.Fatalf("export %d: %v", exports, err)
		}
		if n < last {
			t.Fatalf("export %d saw %d runs, an earlier one %d", exports, n, last)
		}
		last = n
		dec := json.NewDecoder(&buf)
		prev := int64(0)
		for {
			var j store.JSONRun
			if err := dec.Decode(&j); err != nil {
				if errors.Is(err, io.EOF) {
					break
				}
				t.Fatalf("export %d: %v", exports, err)
			}
			if len(j.Measurements) != measPerRun {
				t.Fatalf("export %d: run %d has %d measurements, want %d", exports, j.ID, len(j.Measurements), measPerRun)
			}
			if j.ID <= prev {
				t.Fatalf("export %d: run %d after %d", exports, j.ID, prev)
			}
			prev = j.ID
		}
		exports++
	}
	wg.Wait()
	if werr != nil {
		t.Fatal(werr)
	}
	if last != runs {
		t.Errorf("final export saw %d runs, want %d", last, runs)
	}
	t.Logf("%d exports ran while %d runs were written", exports, runs)
}

func TestDiskFull(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	hash := putDemo(t, db)
	for i := range 20 {
		if _, err := db.Record(ctx, demoRun(i, hash)); err != nil {
			t.Fatal(err)
		}
	}
	if err := store.LimitPages(db, 3); err != nil {
		t.Fatal(err)
	}
	saved := 20
	var err error
	var failed string
	for i := 20; i < 5000; i++ {
		r := demoRun(i, hash)
		if _, err = db.Record(ctx, r); err != nil {
			failed = r.Serial
			break
		}
		saved++
	}
	if err == nil {
		t.Fatal("no error with the log capped at 3 more pages")
	}
	if !errors.Is(err, store.ErrNotSaved) || !errors.Is(err, store.ErrDiskFull) {
		t.Fatalf("Record: %v, want ErrNotSaved and ErrDiskFull", err)
	}
	if !strings.Contains(err.Error(), failed) || !strings.Contains(err.Error(), "not saved") {
		t.Errorf("error %q does not say which run was not saved", err)
	}
	if err := db.IntegrityCheck(ctx); err != nil {
		t.Fatal(err)
	}
	n, qerr := store.QueryInt(db, "SELECT count(*) FROM runs")
	if qerr != nil || n != int64(saved) {
		t.Errorf("%d runs in the log, %d saved (%v)", n, saved, qerr)
	}
	m, qerr := store.QueryInt(db, "SELECT count(*) FROM measurements")
	if qerr != nil || m != int64(saved*measPerRun) {
		t.Errorf("%d measurements, want %d (%v)", m, saved*measPerRun, qerr)
	}
	if got, _ := db.RunsBySerial(ctx, failed); len(got) != 0 {
		t.Errorf("the unsaved run %s is in the log", failed)
	}
	t.Logf("saved %d runs, then: %v", saved, err)
}
