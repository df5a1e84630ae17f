package lineboard_test

import (
	"context"
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"net"
	"net/http"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"padline/sequences"
	"padline/store"
	"padline/store/plant"
	"padline/store/plant/lineboard"
	"padline/store/plant/planttest"
)

// station is a simulated station: its shift log and forwarder.
type station struct {
	name string
	log  *store.DB
	fwd  *plant.Forwarder
	hash string
	n    int
}

func newStation(t *testing.T, p *plant.DB, name string, profile plant.Profile) *station {
	t.Helper()
	ctx := context.Background()
	log, err := store.Open(filepath.Join(t.TempDir(), name+".db"))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { log.Close() })
	hash, err := log.PutVariant(ctx, "QM-205", []byte("name: QM-205\n"))
	if err != nil {
		t.Fatal(err)
	}
	prof, _ := json.Marshal(profile)
	return &station{name: name, log: log, hash: hash, fwd: &plant.Forwarder{Log: log, Plant: p, Station: name, Profile: prof}}
}

// unit records one unit finished at, with trip point trip, and forwards.
func (s *station) unit(t *testing.T, at time.Time, trip float64, v sequences.Verdict) string {
	t.Helper()
	s.n++
	serial := fmt.Sprintf("QM205-%s-%05d", s.name, s.n)
	r := &sequences.Run{Serial: serial, Variant: "QM-205", ConfigHash: s.hash, Station: s.name, Fixture: "FX-" + s.name,
		Software: "test", Finished: at, Verdict: v, Measurements: []sequences.Measurement{
			{Step: store.TripStep, Name: store.TripName, Unit: "pF", Value: trip, Low: 25, High: 34, Verdict: v}}}
	if v == sequences.Fail {
		r.FailCode = "trip_high"
	}
	if _, err := s.log.Record(context.Background(), r); err != nil {
		t.Fatal(err)
	}
	return serial
}

func (s *station) forward(t *testing.T) {
	t.Helper()
	if err := s.fwd.Drain(context.Background()); err != nil {
		t.Fatal(err)
	}
}

// The line board in headless Chromium: every station's row, the values it
// must show, and a new unit appearing without a reload within 5 s.
func TestLineBoardInChromium(t *testing.T) {
	url := planttest.URL(t, "plant_board")
	chrome, err := exec.LookPath("chromium")
	if err != nil {
		planttest.Need(t, "no chromium on PATH (apt-get install chromium)")
	}
	ctx := context.Background()
	p, err := plant.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	for _, s := range []string{"L3-S1", "L3-S2"} {
		if err := p.AddStation(ctx, plant.Station{Name: s, Line: "L3"}); err != nil {
			t.Fatal(err)
		}
	}
	now := time.Now().UTC()
	shiftStart := now.Add(-2 * time.Hour)
	a := newStation(t, p, "L3-S1", plant.Profile{CheckEveryUnits: 1000, RatedOperations: 1000, WarnFraction: 0.8})
	b := newStation(t, p, "L3-S2", plant.Profile{RatedOperations: 1e9, WarnFraction: 0.8})
	// L3-S1: 300 units, 3 of them failing, a step of +2 pF over its last
	// 40 (σ 0.1 pF): drift alarms; a passed check; a worn rung.
	rng := rand.New(rand.NewPCG(1, 1))
	for i := range 300 {
		trip := 29.7 + 0.1*rng.NormFloat64()
		if i >= 260 {
			trip += 2
		}
		v := sequences.Pass
		if i%100 == 50 {
			v, trip = sequences.Fail, 36
		}
		a.unit(t, shiftStart.Add(time.Duration(i)*10*time.Second), trip, v)
	}
	if _, err := a.log.RecordCheck(ctx, store.StationCheck{Time: shiftStart.Add(-time.Minute), Station: "L3-S1", Fixture: "FX-L3-S1",
		StationHash: "x", OK: true, Details: json.RawMessage(`{}`)}); err != nil {
		t.Fatal(err)
	}
	if err := a.log.SaveRelayOps(ctx, "FX-L3-S1", []uint64{100, 900}); err != nil {
		t.Fatal(err)
	}
	a.forward(t)
	// L3-S2: 5 units, no check on record; 7 more units still in its outbox.
	for i := range 5 {
		b.unit(t, shiftStart.Add(time.Duration(i)*time.Minute), 29.7, sequences.Pass)
	}
	b.forward(t)
	for i := range 7 {
		b.unit(t, shiftStart.Add(time.Duration(10+i)*time.Minute), 29.7, sequences.Pass)
	}
	b.fwd.BatchSize = 3
	if _, err := b.fwd.Step(ctx); err != nil { // 3 sent, 4 reported waiting
		t.Fatal(err)
	}

	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	srv := &http.Server{Handler: &lineboard.Server{Src: p, Line: "L3", Every: 500 * time.Millisecond,
		Shift: func(time.Time) (string, time.Time) { return "test shift", shiftStart }}}
	go srv.Serve(ln)
	defer srv.Close()

	opts := append(chromedp.DefaultExecAllocatorOptions[:], chromedp.ExecPath(chrome), chromedp.NoSandbox,
		chromedp.DisableGPU, chromedp.NoFirstRun, chromedp.UserDataDir(t.TempDir()),
		chromedp.Flag("disable-background-networking", true), chromedp.Flag("disable-quic", true),
		chromedp.Flag("disable-component-update", true), chromedp.Flag("disable-sync", true))
	actx, cancel := chromedp.NewExecAllocator(ctx, opts...)
	defer cancel()
	bctx, cancel := chromedp.NewContext(actx)
	defer cancel()
	bctx, cancel = context.WithTimeout(bctx, 60*time.Second)
	defer cancel()

	row := func(station string) string {
		return fmt.Sprintf(`Array.from(document.querySelectorAll('tr[data-station="%s"] td')).map(td => td.textContent + (td.className ? '[' + td.className + ']' : '')).join(' | ')`, station)
	}
	if err := chromedp.Do(bctx,
		chromedp.Navigate("http://"+ln.Addr().String()+"/"),
		chromedp.WaitVisible(`tr[data-station="L3-S2"]`),
	); err != nil {
		t.Fatal(err)
	}
	r1, err := chromedp.Run(bctx, chromedp.Evaluate[string](row("L3-S1")))
	if err != nil {
		t.Fatal(err)
	}
	r2, err := chromedp.Run(bctx, chromedp.Evaluate[string](row("L3-S2")))
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("L3-S1: %s", r1)
	t.Logf("L3-S2: %s", r2)
	for _, want := range []string{"QM205-L3-S1-00300", "99.0 % of 300", "current", "90.0 % max, 1 rung(s) worn", "0 waiting"} {
		if !strings.Contains(r1, want) {
			t.Errorf("L3-S1 row lacks %q: %s", want, r1)
		}
	}
	if strings.Contains(r1, "| 0[ok] alarms") || !strings.Contains(r1, "[bad alarms]") {
		t.Errorf("L3-S1 shows no open drift alarm: %s", r1)
	}
	for _, want := range []string{"QM205-L3-S2-00008", "100.0 % of 8", "DUE: no shift-start check on record", "4 waiting"} {
		if !strings.Contains(r2, want) {
			t.Errorf("L3-S2 row lacks %q: %s", want, r2)
		}
	}
	// Live: a unit forwarded now shows within 5 s, with no reload.
	serial := b.unit(t, now, 29.8, sequences.Fail)
	b.fwd.BatchSize = 100
	b.forward(t)
	seen := time.Now()
	if _, err := chromedp.Run(bctx, chromedp.Poll[bool](fmt.Sprintf(`document.querySelector('tr[data-station="L3-S2"] td.last-unit').textContent.startsWith(%q)`, serial),
		chromedp.WithPollingTimeout(5*time.Second))); err != nil {
		t.Fatalf("the board did not show %s within 5 s: %v", serial, err)
	}
	t.Logf("new unit on the board %v after it was forwarded", time.Since(seen).Round(10*time.Millisecond))
	if r2, err = chromedp.Run(bctx, chromedp.Evaluate[string](row("L3-S2"))); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(r2, "fail trip_high") || !strings.Contains(r2, "0 waiting") {
		t.Errorf("L3-S2 after the new unit: %s", r2)
	}
}
