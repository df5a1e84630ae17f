package session_test

import (
	"context"
	"errors"
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

// checkedDemo opens a demo session over a fresh log and passes its
// shift-start check.
func checkedDemo(t *testing.T, o session.Options) *session.Session {
	t.Helper()
	s := openDemo(t, o)
	if rep, err := s.Check(context.Background()); err != nil || !rep.OK {
		t.Fatalf("check %+v %v", rep, err)
	}
	return s
}

// A shift log deleted or renamed while the station runs halts it: no
// verdict is shown for a run that would not be found at the log's path.
func TestMovedLogHaltsStation(t *testing.T) {
	for name, move := range map[string]func(string) error{
		"deleted": os.Remove,
		"renamed": func(p string) error { return os.Rename(p, p+".old") },
	} {
		t.Run(name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "shift.db")
			s := checkedDemo(t, session.Options{ShiftLog: path})
			ch, _ := s.Subscribe(1024)
			serials := make(chan string)
			done := make(chan error, 1)
			go func() { done <- s.Run(context.Background(), session.ChanScanner(serials)) }()
			serials <- "QM205-000001"
			for e := range ch {
				if e.Kind == session.KindVerdictCommitted {
					break
				}
			}
			if err := move(path); err != nil {
				t.Fatal(err)
			}
			serials <- "QM205-000002"
			err := <-done
			if !errors.Is(err, session.ErrHalted) || !errors.Is(err, store.ErrMoved) {
				t.Fatalf("Run after the log was %s: %v, want ErrHalted and ErrMoved", name, err)
			}
			_ = s.Close()
			for e := range ch {
				if e.Kind == session.KindVerdictCommitted {
					t.Fatalf("verdict shown for %s after the log was %s", e.Verdict.Run.Serial, name)
				}
			}
			if s.Rig().Line.Powered() {
				t.Error("unit power left on after the halt")
			}
		})
	}
}

// A clock set back behind the log's latest event refuses units, and a
// pass check stamped in the future cannot hide a later failed one.
func TestClockBehindLogRefused(t *testing.T) {
	path := filepath.Join(t.TempDir(), "shift.db")
	s := checkedDemo(t, session.Options{ShiftLog: path})
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	back := func() time.Time { return time.Now().Add(-30 * 24 * time.Hour) }
	s2 := openDemo(t, session.Options{ShiftLog: path, Now: back})
	err := s2.Run(context.Background(), session.OneSerial("QM205-000001"))
	if !errors.Is(err, session.ErrClockBehind) {
		t.Fatalf("Run with the clock 30 days behind the log: %v, want ErrClockBehind", err)
	}
	if errors.Is(err, session.ErrNotReady) {
		t.Errorf("a clock set back is not cleared by a check, yet the error says run one: %v", err)
	}
}

// A damaged shift log is refused at start by quick_check.
func TestDamagedLogRefusedAtStart(t *testing.T) {
	path := filepath.Join(t.TempDir(), "shift.db")
	s := checkedDemo(t, session.Options{ShiftLog: path})
	in := make(chan string, 300)
	for i := range 300 {
		in <- fmt.Sprintf("QM205-%06d", i+1)
	}
	close(in)
	if err := s.Run(context.Background(), session.ChanScanner(in)); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	const page = 4096
	if len(b) < 8*page {
		t.Fatalf("log too small to damage: %d bytes", len(b))
	}
	mid := (len(b) / page / 2) * page
	for i := mid + 8; i < mid+page; i++ {
		b[i] = 0xA5
	}
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	_, err = session.Open(context.Background(), session.Options{Variant: "QM-205", Station: "demo-sim", ShiftLog: path})
	if err == nil {
		t.Fatal("a damaged shift log opened")
	}
	if !errors.Is(err, store.ErrCorrupt) && !errors.Is(err, store.ErrNotShiftLog) {
		t.Logf("refused with: %v", err)
	}
}

var _ = sequences.Pass

// A config file over the size cap is refused before it is parsed, and so
// is anything that is not a regular file.
func TestConfigSizeCapAndKind(t *testing.T) {
	dir := t.TempDir()
	big := filepath.Join(dir, "big.yaml")
	raw, err := os.ReadFile("../../testdata/variants/QM-205.yaml")
	if err != nil {
		t.Fatal(err)
	}
	// A valid variant padded past the cap with a long description.
	pad := make([]byte, session.MaxConfigBytes)
	for i := range pad {
		pad[i] = 'x'
	}
	raw = append(raw, []byte("\n# "+string(pad)+"\n")...)
	if err := os.WriteFile(big, raw, 0o644); err != nil {
		t.Fatal(err)
	}
	_, err = session.LoadVariant(big)
	var ce *session.ConfigError
	if !errors.As(err, &ce) || ce.File != big {
		t.Fatalf("LoadVariant of a %d-byte file: %v, want a ConfigError naming it", len(raw), err)
	}
	if _, err := session.LoadStation(dir + "/"); err == nil {
		t.Fatal("a directory was read as a station file")
	}
}

// A barcode scanner may end a read with CR, LF or CR LF; a line over 1 MiB
// is refused and the next line is still read.
func TestLineScannerLineEnds(t *testing.T) {
	long := make([]byte, 1<<20+10)
	for i := range long {
		long[i] = 'A'
	}
	in := "S1\rS2\nS3\r\nS4\r\r\n" + string(long) + "\nS5"
	sc := session.LineScanner(strings.NewReader(in))
	var got []string
	tooLong := 0
	for {
		raw, ok, err := sc.Scan(context.Background())
		if errors.Is(err, session.ErrLineTooLong) {
			tooLong++
			if len(raw) > 100 {
				t.Errorf("over-long line returned with %d bytes", len(raw))
			}
			continue
		}
		if err != nil {
			t.Fatal(err)
		}
		if !ok {
			break
		}
		got = append(got, raw)
	}
	want := []string{"S1", "S2", "S3", "S4", "", "S5"}
	if strings.Join(got, "|") != strings.Join(want, "|") || tooLong != 1 {
		t.Fatalf("lines %q (%d too long), want %q and 1 too long", got, tooLong, want)
	}
}

// In a session an over-long line is a refused scan; the run goes on.
func TestOverLongLineRefusedRunGoesOn(t *testing.T) {
	s := checkedDemo(t, session.Options{})
	ch, _ := s.Subscribe(1024)
	got := collect(ch)
	in := "QM205-000001\r" + strings.Repeat("x", 1<<20+1) + "\rQM205-000002\r"
	if err := s.Run(context.Background(), session.LineScanner(strings.NewReader(in))); err != nil {
		t.Fatal(err)
	}
	_ = s.Close()
	k := kinds(<-got)
	if k[session.KindVerdictCommitted] != 2 || k[session.KindScanRefused] != 1 {
		t.Fatalf("events %v: want 2 verdicts and the long line refused", k)
	}
}

// ESC and newlines in operator and lot names are refused like bad serials,
// and so are they in station, fixture and variant names.
func TestNamesCleaned(t *testing.T) {
	for _, o := range []session.Options{
		{Operator: "ana\x1b[2J"}, {Lot: "L7\nQM205-000009 PASS"}, {Operator: strings.Repeat("o", 65)},
	} {
		o.Variant, o.Station, o.ShiftLog = "QM-205", "demo-sim", filepath.Join(t.TempDir(), "shift.db")
		s, err := session.Open(context.Background(), o)
		if err == nil {
			_ = s.Close()
			t.Fatalf("opened with operator %q lot %q", o.Operator, o.Lot)
		}
		if !errors.Is(err, session.ErrBadName) {
			t.Errorf("operator %q lot %q: %v, want ErrBadName", o.Operator, o.Lot, err)
		}
	}
	if s, err := session.CleanName("operator", "  José  "); err != nil || s != "José" {
		t.Errorf("CleanName(José) = %q, %v", s, err)
	}
}

// The step budget derives from the plan: a 6 s power settle (allowed up to
// 60 s) no longer makes every unit a station fault under a fixed 5 s budget.
func TestStepBudgetFromPlan(t *testing.T) {
	raw, err := os.ReadFile("../../testdata/variants/QM-205.yaml")
	if err != nil {
		t.Fatal(err)
	}
	v := filepath.Join(t.TempDir(), "QM-205.yaml")
	if err := os.WriteFile(v, append(raw, []byte("plan:\n  power_settle_ms: 6000\n")...), 0o644); err != nil {
		t.Fatal(err)
	}
	o := session.Options{Variant: v, Station: "demo-sim", ShiftLog: filepath.Join(t.TempDir(), "shift.db")}
	s, err := session.Open(context.Background(), o)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if rep, err := s.Check(context.Background()); err != nil || !rep.OK {
		t.Fatalf("check %+v %v", rep, err)
	}
	ch, _ := s.Subscribe(1024)
	if err := s.Run(context.Background(), session.OneSerial("QM205-000001")); err != nil {
		t.Fatal(err)
	}
	s.Close()
	for e := range ch {
		if e.Kind == session.KindVerdictCommitted && e.Verdict.Run.Verdict == sequences.StationFault {
			t.Fatalf("station fault with a 6 s settle: %s", e.Verdict.StationError)
		}
	}
}
