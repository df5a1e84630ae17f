package session_test

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"padline/fixture"
	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
)

func panelRig(t *testing.T, stationRef string) (*session.PanelRig, *store.DB, string) {
	t.Helper()
	v, st, err := session.Load("QM-205", stationRef)
	if err != nil {
		t.Fatal(err)
	}
	r, err := session.NewPanelRig(v, st, session.RigOptions{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = r.Halt() })
	db, err := store.Open(filepath.Join(t.TempDir(), "shift.db"))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	hash, err := db.PutVariant(context.Background(), v.Name, v.Source.Raw)
	if err != nil {
		t.Fatal(err)
	}
	return r, db, hash
}

func TestSiteSerial(t *testing.T) {
	for _, c := range []struct {
		pattern, panel string
		site           int
		want           string
	}{
		{session.DefaultPanelSerial, "P0001", 3, "P0001-03"},
		{"{panel}{site:02}", "QM205-0001", 12, "QM205-000112"},
		{"{panel}/{site}", "A", 7, "A/7"},
	} {
		if got := session.SiteSerial(c.pattern, c.panel, c.site); got != c.want {
			t.Errorf("SiteSerial(%q, %q, %d) = %q, want %q", c.pattern, c.panel, c.site, got, c.want)
		}
	}
}

// The demo panel station passes its own shift-start check, then a panel
// with an x-out logs one run per tested site, with panel and site, and the
// x-out as not tested.
func TestPanelCheckThenPanelWithXOut(t *testing.T) {
	ctx := context.Background()
	r, db, hash := panelRig(t, "demo-panel")
	rep, err := session.RunPanelCheck(ctx, r, db, nil)
	if err != nil {
		t.Fatal(err)
	}
	if !rep.OK {
		t.Fatalf("healthy demo panel refused: %q", rep.Faults)
	}
	if err := session.Ready(ctx, db, r.Station, time.Now()); err != nil {
		t.Fatalf("gate after a passing panel check: %v", err)
	}
	xout, err := session.ParseXOuts("3", r.Sites())
	if err != nil {
		t.Fatal(err)
	}
	// The variant's serials are QM205- and six digits: panel QM205-0001
	// with its panel_serial {panel}{site:02} gives QM205-000101 …
	serials, err := session.PanelSerials(r.Variant, r.Sites(), "QM205-0001", nil, xout)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := r.Sim.Load(serials); err != nil {
		t.Fatal(err)
	}
	tmpl := sequences.Run{Variant: "QM-205", ConfigHash: hash, Station: r.Station.Name, Fixture: r.Station.Fixture, Operator: "t"}
	oc, err := r.TestPanel(ctx, db, tmpl, "QM205-0001", serials, xout, nil)
	r.Sim.Unload()
	if err != nil {
		t.Fatal(err)
	}
	var sites []int
	for e, err := range db.Runs(ctx, store.Filter{Panel: "QM205-0001"}) {
		if err != nil {
			t.Fatal(err)
		}
		if e.Serial != serials[e.Site-1] {
			t.Fatalf("site %d logged serial %s, want %s", e.Site, e.Serial, serials[e.Site-1])
		}
		sites = append(sites, e.Site)
	}
	if len(sites) != 7 {
		t.Fatalf("runs logged for sites %v, want every site but 3", sites)
	}
	xs, err := db.XOuts(ctx, "QM205-0001")
	if err != nil || len(xs) != 1 || xs[0].Site != 3 {
		t.Fatalf("x-outs %+v, %v; want site 3", xs, err)
	}
	// A serial the variant does not accept is refused before the test.
	if _, err := session.PanelSerials(r.Variant, r.Sites(), "QM205-01", nil, nil); !errors.Is(err, session.ErrPanelSerials) {
		t.Fatalf("panel QM205-01: %v, want ErrPanelSerials", err)
	}
	m := session.PanelMap(oc)
	if !strings.Contains(m, "03 X  x-out") || strings.Count(m, "\n") != 2 {
		t.Fatalf("panel map:\n%s", m)
	}
}

// A rung stuck open on the ganged ladder is seen by every site: the panel
// check refuses the station and names the rung on each.
func TestPanelCheckNamesGangedStuckRung(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join("..", "..", "testdata", "stations", "demo-panel.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	file := filepath.Join(t.TempDir(), "stuck.yaml")
	if err := os.WriteFile(file, append(raw, []byte("sim:\n  faults:\n    rung_stuck_open: [5]\n")...), 0o644); err != nil {
		t.Fatal(err)
	}
	r, db, _ := panelRig(t, file)
	rep, err := session.RunPanelCheck(context.Background(), r, db, nil)
	if err != nil {
		t.Fatal(err)
	}
	if rep.OK {
		t.Fatal("a stuck ganged rung passed the check")
	}
	for site := 1; site <= r.Sites(); site++ {
		found := false
		for _, f := range rep.Faults {
			if strings.HasPrefix(f, "site "+strconv.Itoa(site)+": ") && strings.Contains(f, "rung 5") {
				found = true
			}
		}
		if !found {
			t.Errorf("site %d: no fault names rung 5: %q", site, rep.Faults)
		}
	}
}

// A panel stopped before its verdicts logs nothing.
func TestPanelStoppedLogsNothing(t *testing.T) {
	r, db, hash := panelRig(t, "demo-panel")
	serials, err := session.PanelSerials(r.Variant, r.Sites(), "QM205-0002", nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := r.Sim.Load(serials); err != nil {
		t.Fatal(err)
	}
	defer r.Sim.Unload()
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	tmpl := sequences.Run{Variant: "QM-205", ConfigHash: hash, Station: r.Station.Name, Fixture: r.Station.Fixture, Operator: "t"}
	if _, err := r.TestPanel(ctx, db, tmpl, "QM205-0002", serials, nil, nil); !errors.Is(err, sequences.ErrAborted) {
		t.Fatalf("err %v, want ErrAborted", err)
	}
	n := 0
	for _, err := range db.Runs(context.Background(), store.Filter{}) {
		if err != nil {
			t.Fatal(err)
		}
		n++
	}
	if n != 0 {
		t.Fatalf("%d runs logged for a stopped panel", n)
	}
}

// A gpio panel station opens its lines through the program's opener; a
// program without one refuses it.
func TestPanelRigGPIOOpener(t *testing.T) {
	v, st, err := session.Load("QM-205", "demo-panel")
	if err != nil {
		t.Fatal(err)
	}
	st.Driver = session.DriverGPIO
	if _, err := session.NewPanelRig(v, st, session.RigOptions{}); !errors.Is(err, session.ErrPanelGPIO) {
		t.Fatalf("no opener: %v, want ErrPanelGPIO", err)
	}
	var asked int
	opener := func(s *session.Station) (fixture.PanelPins, error) {
		asked = len(s.Sites.List)
		return fixture.PanelPins{}, errors.New("GPIO40: no such line")
	}
	_, err = session.NewPanelRig(v, st, session.RigOptions{PanelGPIO: opener})
	if asked != 8 || err == nil || !strings.Contains(err.Error(), "demo-panel") || !strings.Contains(err.Error(), "GPIO40") {
		t.Fatalf("opener asked for %d sites, err %v", asked, err)
	}
}

// A single-unit rig on a panel station is refused, naming the file.
func TestSingleRigRefusesPanelStation(t *testing.T) {
	v, st, err := session.Load("QM-205", "demo-panel")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := session.NewRig(v, st, session.RigOptions{}); err == nil || !strings.Contains(err.Error(), "demo-panel") {
		t.Fatalf("single rig on a panel station: %v", err)
	}
}
