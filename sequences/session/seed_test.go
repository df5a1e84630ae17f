package session_test

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"testing"

	"padline/sequences"
	"padline/sequences/session"
)

// runUnits tests serials on s and returns the committed runs.
func runUnits(t *testing.T, s *session.Session, serials []string) []sequences.Run {
	t.Helper()
	ch, stop := s.Subscribe(4096)
	defer stop()
	in := make(chan string, len(serials))
	for _, sn := range serials {
		in <- sn
	}
	close(in)
	if err := s.Run(context.Background(), session.ChanScanner(in)); err != nil {
		t.Fatal(err)
	}
	var runs []sequences.Run
	for len(ch) > 0 {
		if e := <-ch; e.Kind == session.KindVerdictCommitted {
			runs = append(runs, e.Verdict.Run)
		}
	}
	return runs
}

func measured(r sequences.Run, name sequences.Quantity) (float64, bool) {
	for _, m := range r.Measurements {
		if m.Name == name {
			return m.Value, true
		}
	}
	return 0, false
}

// TestSessionSeedsFromLog: a passing check with lab trip points gives the
// plan the fixture offset (every trip corrected by it and recorded with
// it); a session opened later on the same shift log takes the offset of
// that check and the prior on σ from the variant's last passing units,
// and each run says so.
func TestSessionSeedsFromLog(t *testing.T) {
	if testing.Short() {
		t.Skip("a reference check and 25 units")
	}
	log := filepath.Join(t.TempDir(), "shift.db")
	s := openDemo(t, session.Options{ShiftLog: log})
	rep, err := s.Check(context.Background())
	if err != nil || !rep.OK || rep.Offset == nil || rep.OffsetU == nil {
		t.Fatalf("check: %v ok %v offset %v faults %v", err, rep.OK, rep.Offset, rep.Faults)
	}
	if u := *rep.OffsetU; !(u > 0 && u < 0.15) {
		t.Errorf("offset uncertainty %.3f pF at the nominal trip", u)
	}
	var serials []string
	for i := 1; i <= 25; i++ {
		serials = append(serials, fmt.Sprintf("QM205-%06d", i))
	}
	passes := 0
	for _, r := range runUnits(t, s, serials) {
		if r.Verdict != sequences.Pass {
			continue
		}
		passes++
		trip, _ := measured(r, sequences.MeasTripPF)
		ladder, ok1 := measured(r, sequences.MeasTripLadderPF)
		off, ok2 := measured(r, sequences.MeasFixtureOffPF)
		if !ok1 || !ok2 || math.Abs(ladder+off-trip) > 1e-9 {
			t.Errorf("%s: trip %.3f, ladder %.3f + offset %.3f", r.Serial, trip, ladder, off)
		}
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	s2 := openDemo(t, session.Options{ShiftLog: log})
	if s2.Rig().Plan.Offset() == nil {
		t.Fatal("reopened session: no fixture offset from the last check")
	}
	runs := runUnits(t, s2, []string{"QM205-000026"})
	if len(runs) != 1 {
		t.Fatalf("%d runs", len(runs))
	}
	units, _ := measured(runs[0], sequences.MeasPriorSigmaUnits)
	logUnits, _ := measured(runs[0], sequences.MeasPriorSigmaLogUnits)
	if int(logUnits) != passes || units != logUnits {
		t.Errorf("prior from %g units, %g from the log; the log holds %d passes", units, logUnits, passes)
	}
	if _, ok := measured(runs[0], sequences.MeasFixtureOffPF); !ok && runs[0].Verdict == sequences.Pass {
		t.Error("reopened session: run without the fixture offset")
	}
}
