package screen_test

import (
	"context"
	"net/http"
	"net/http/httptest"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"padline/sequences/session"
	"padline/sequences/station/screen"
)

// openDesk opens a session on the demo station over a fresh shift log, and
// a screen and desk over it.
func openDesk(t *testing.T) (*session.Session, *screen.Server, *screen.Desk) {
	t.Helper()
	sess, err := session.Open(context.Background(), session.Options{Variant: "QM-205", Station: "demo-sim",
		ShiftLog: filepath.Join(t.TempDir(), "shift.db"), WaitForCheck: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = sess.Close() })
	srv, err := screen.NewServer()
	if err != nil {
		t.Fatal(err)
	}
	return sess, srv, screen.NewDesk(srv, sess)
}

// waitState polls the screen's state until ok, failing after 20 s.
func waitState(t *testing.T, srv *screen.Server, what string, ok func(screen.State) bool) screen.State {
	t.Helper()
	for deadline := time.Now().Add(20 * time.Second); ; {
		st := srv.State()
		if ok(st) {
			return st
		}
		if time.Now().After(deadline) {
			t.Fatalf("waiting for %s: state %+v", what, st)
		}
		time.Sleep(5 * time.Millisecond)
	}
}

// A serial scanned again on the station's scanner is held back as a repeat
// until it is scanned once more; a different scan drops the question. The
// second test of a serial is no first test for the yield.
func TestDeskRepeatByRescan(t *testing.T) {
	sess, srv, desk := openDesk(t)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	if rep, err := sess.Check(ctx); err != nil || !rep.OK {
		t.Fatalf("check %+v %v", rep, err)
	}
	wait := desk.Start(ctx)
	lines := make(chan string)
	done := make(chan error, 1)
	go func() { done <- sess.Run(ctx, desk.Scanner(session.ChanScanner(lines))) }()

	lines <- "QM205-000001"
	waitState(t, srv, "the first verdict", func(s screen.State) bool { return s.Counts.Pass+s.Counts.Fail == 1 })
	lines <- "QM205-000001"
	st := waitState(t, srv, "the repeat question", func(s screen.State) bool { return s.Repeat != nil })
	if st.Repeat.Serial != "QM205-000001" || st.Repeat.Tested != 1 {
		t.Errorf("repeat %+v", st.Repeat)
	}
	lines <- "QM205-000002" // another unit: the repeat is dropped, this one tested
	waitState(t, srv, "the second unit", func(s screen.State) bool { return s.Counts.Pass+s.Counts.Fail == 2 && s.Repeat == nil })
	lines <- "QM205-000001"
	waitState(t, srv, "the repeat question again", func(s screen.State) bool { return s.Repeat != nil })
	lines <- " QM205-000001\r" // scanned once more: acknowledged
	st = waitState(t, srv, "the repeat's verdict", func(s screen.State) bool { return s.Counts.Pass+s.Counts.Fail == 3 })
	if st.Last.Serial != "QM205-000001" || st.Counts.FirstTests != 2 || st.Repeat != nil {
		t.Errorf("last %+v counts %+v repeat %+v", st.Last, st.Counts, st.Repeat)
	}
	// The desk shows the check schedule after it has shown the verdict (it
	// asks the shift log once the commit's event is on the screen), so
	// the state with three verdicts may still hold the schedule after two:
	// wait for the schedule the third commit leaves, 2000 - 3 units.
	st = waitState(t, srv, "the schedule after the third unit", func(s screen.State) bool {
		return s.Check.UnitsLeft != nil && *s.Check.UnitsLeft <= 2000-3
	})
	if *st.Check.UnitsLeft != 2000-3 || st.Check.Total != 3 || st.Counts.Pass+st.Counts.Fail != 3 {
		t.Errorf("check schedule %+v counts %+v", st.Check, st.Counts)
	}
	cancel()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	_ = sess.Close()
	wait()
}

// The page's check button runs the check the session waits for; then
// testing goes on.
func TestDeskCheckFromPage(t *testing.T) {
	sess, srv, desk := openDesk(t)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	wait := desk.Start(ctx)
	page := make(chan string)
	done := make(chan error, 1)
	go func() { done <- sess.Run(ctx, desk.Scanner(session.ChanScanner(page))) }()

	st := waitState(t, srv, "the locked station", func(s screen.State) bool { return s.Refusal != nil && s.Refusal.CanCheck })
	if st.Phase != screen.PhaseRefused || !strings.Contains(st.Refusal.Why, "no reference check") || !st.Check.Due {
		t.Errorf("state %+v refusal %+v", st, st.Refusal)
	}
	postInput(t, srv, "/check")
	st = waitState(t, srv, "the passed check", func(s screen.State) bool { return s.Phase == screen.PhaseReady && s.Check.Result != "" })
	if !strings.HasPrefix(st.Check.Result, "passed") || st.Check.Done != 3 || st.Refusal != nil {
		t.Errorf("after the check: %+v refusal %+v", st.Check, st.Refusal)
	}
	page <- "QM205-000007"
	st = waitState(t, srv, "a verdict", func(s screen.State) bool { return s.Last != nil })
	if st.Last.Serial != "QM205-000007" {
		t.Errorf("last %+v", st.Last)
	}
	cancel()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	_ = sess.Close()
	wait()
}

// postInput sends a POST with the server's token, as the page does.
func postInput(t *testing.T, srv *screen.Server, path string) {
	t.Helper()
	hs := httptest.NewServer(srv)
	defer hs.Close()
	if code := post(t, hs.URL+path, srv.Token(), `{}`); code != http.StatusAccepted {
		t.Fatalf("POST %s: %d", path, code)
	}
}
