package session_test

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"padline/sequences/session"
)

// badgeStation writes the demo station with badge prefixes to a file.
func badgeStation(t *testing.T, extra string) string {
	t.Helper()
	raw, err := os.ReadFile("defaults/stations/demo-sim.yaml")
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), "station.yaml")
	if err := os.WriteFile(p, append(raw, []byte(extra)...), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

func TestStationBadgesParsed(t *testing.T) {
	st, err := session.LoadStation(badgeStation(t, "badges:\n  lot_prefix: \"LOT:\"\n  operator_prefix: \"OP:\"\n"))
	if err != nil {
		t.Fatal(err)
	}
	b := st.Badges
	for _, c := range []struct {
		raw   string
		kind  session.BadgeKind
		value string
		ok    bool
		bad   bool
	}{
		{"LOT:2611-04\r\n", session.BadgeLot, "2611-04", true, false},
		{"OP:0417", session.BadgeOperator, "0417", true, false},
		{"OP:", session.BadgeOperator, "", true, true},
		{"QM205-000001", "", "", false, false},
	} {
		kind, value, ok, err := b.Badge(c.raw)
		if kind != c.kind || value != c.value || ok != c.ok || (err != nil) != c.bad {
			t.Errorf("Badge(%q) = %q %q %v %v", c.raw, kind, value, ok, err)
		}
	}
	for _, c := range []struct{ extra, key string }{
		{"badges:\n  lot_prefix: \"L\"\n  operator_prefix: \"LO\"\n", "badges.operator_prefix"},
		{"badges:\n  lot_prefix: \"LOT \"\n", "badges.lot_prefix"},
		{"badges:\n  lot_prefx: \"LOT:\"\n", "badges.lot_prefx"},
	} {
		_, err := session.LoadStation(badgeStation(t, c.extra))
		if err == nil || !strings.Contains(err.Error(), c.key) {
			t.Errorf("%q: error %v, want one naming %s", c.extra, err, c.key)
		}
	}
}

// A badge scanned between units changes what the following runs record,
// and is announced; it is never tested as a unit.
func TestBadgeScanSetsLotAndOperator(t *testing.T) {
	st := badgeStation(t, "badges:\n  lot_prefix: \"LOT:\"\n  operator_prefix: \"OP:\"\n")
	s, err := session.Open(context.Background(), session.Options{Variant: "QM-205", Station: st,
		ShiftLog: filepath.Join(t.TempDir(), "shift.db"), Lot: "L0", Operator: "op0"})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if rep, err := s.Check(context.Background()); err != nil || !rep.OK {
		t.Fatalf("check %+v %v", rep, err)
	}
	ch, _ := s.Subscribe(1024)
	got := collect(ch)
	scans := make(chan string, 8)
	for _, x := range []string{"QM205-000001", "LOT:2611-04", "OP:0417", "OP:", "QM205-000002"} {
		scans <- x
	}
	close(scans)
	if err := s.Run(context.Background(), session.ChanScanner(scans)); err != nil {
		t.Fatal(err)
	}
	s.Close()
	var lots, ops []string
	badges, refused := 0, 0
	for _, e := range <-got {
		switch e.Kind {
		case session.KindVerdictCommitted:
			lots = append(lots, e.Verdict.Run.Lot)
			ops = append(ops, e.Verdict.Run.Operator)
		case session.KindBadgeScanned:
			badges++
		case session.KindScanRefused:
			refused++
		}
	}
	if strings.Join(lots, ",") != "L0,2611-04" || strings.Join(ops, ",") != "op0,0417" {
		t.Errorf("runs recorded lots %v operators %v", lots, ops)
	}
	if badges != 2 || refused != 1 {
		t.Errorf("%d badge events, %d refused scans; want 2 and 1 (the empty operator badge)", badges, refused)
	}
}

func TestNextCheck(t *testing.T) {
	s := openDemo(t, session.Options{})
	ctx := context.Background()
	st := s.Rig().Station
	now := time.Now()
	sc, err := session.NextCheck(ctx, s.DB(), st, now)
	if err != nil {
		t.Fatal(err)
	}
	// No check yet: both limits are used up.
	if sc.UnitsLeft != 0 || !sc.Due.Equal(now) || !sc.Checked.IsZero() {
		t.Errorf("without a check: %+v", sc)
	}
	rep, err := s.Check(ctx)
	if err != nil || !rep.OK {
		t.Fatalf("check %+v %v", rep, err)
	}
	scans := make(chan string, 3)
	scans <- "QM205-000001"
	scans <- "QM205-000002"
	close(scans)
	if err := s.Run(ctx, session.ChanScanner(scans)); err != nil {
		t.Fatal(err)
	}
	sc, err = session.NextCheck(ctx, s.DB(), st, time.Now())
	if err != nil {
		t.Fatal(err)
	}
	// The demo station wants a check every 2000 units and 8 h.
	if sc.UnitsLeft != int64(st.Trust.CheckEveryUnits)-2 || st.Trust.CheckEveryUnits != 2000 {
		t.Errorf("units left %d, want %d", sc.UnitsLeft, st.Trust.CheckEveryUnits-2)
	}
	if want := sc.Checked.Add(8 * time.Hour); !sc.Due.Equal(want) || sc.Checked.IsZero() {
		t.Errorf("due %v, want %v (checked %v)", sc.Due, want, sc.Checked)
	}
}
