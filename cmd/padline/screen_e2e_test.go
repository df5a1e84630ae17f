package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"padline/sequences"
	"padline/sequences/station/screen/screentest"
	"padline/store"
)

// syncBuffer is a bytes.Buffer safe for a writer and a reader at once.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// screenStation is the demo station with lot and operator badges and a
// shift-start check due every 12 units, so that the check falls due twice
// during the test.
func screenStation(t *testing.T) string {
	t.Helper()
	raw, err := os.ReadFile("../../sequences/session/defaults/stations/demo-sim.yaml")
	if err != nil {
		t.Fatal(err)
	}
	s := strings.Replace(string(raw), "check_every_units: 2000", "check_every_units: 12", 1)
	if s == string(raw) {
		t.Fatal("demo-sim.yaml no longer says check_every_units: 2000")
	}
	s += "badges:\n  lot_prefix: \"LOT:\"\n  operator_prefix: \"OP:\"\n"
	p := filepath.Join(t.TempDir(), "screen-station.yaml")
	if err := os.WriteFile(p, []byte(s), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// failingSerial is the first serial from QM205-100000 on that fails on the
// simulated demo line: units are drawn from the station's seed and the
// serial, so it fails in the browser test too.
func failingSerial(t *testing.T) string {
	t.Helper()
	db := filepath.Join(t.TempDir(), "probe.db")
	checkStation(t, db)
	var in strings.Builder
	for i := 100000; i < 100400; i++ {
		fmt.Fprintf(&in, "QM205-%06d\n", i)
	}
	out, errs, code := runPadline(t, context.Background(), in.String(),
		"run", "--variant", "QM-205", "--station", "demo-sim", "--db", db, "--json")
	if code != 0 {
		t.Fatalf("probe run: exit %d: %s", code, errs)
	}
	for _, line := range strings.Split(out, "\n") {
		var u struct{ Serial, Verdict string }
		if json.Unmarshal([]byte(line), &u) == nil && u.Verdict == "fail" {
			return u.Serial
		}
	}
	t.Fatal("no unit of 400 failed on the simulated line")
	return ""
}

// pageState is what the test reads of the page's state.
type pageState struct {
	Phase string `json:"phase"`
	Last  *struct {
		RunID       int64  `json:"run_id"`
		Serial      string `json:"serial"`
		Verdict     string `json:"verdict"`
		CommittedMs int64  `json:"committed_ms"`
	} `json:"last"`
	Refusal *struct {
		Why      string `json:"why"`
		CanCheck bool   `json:"can_check"`
	} `json:"refusal"`
	Repeat *struct {
		Serial string `json:"serial"`
	} `json:"repeat"`
	ScanRefused *struct {
		Scan   string `json:"scan"`
		Reason string `json:"reason"`
	} `json:"scan_refused"`
}

// shown is one verdict as the page showed it.
type shown struct {
	runID          int64
	serial, word   string
	latencyMs      float64
	firstOfSerial  bool
	verdictOfState string
}

// The station screen end to end in a real headless Chromium: padline run
// --screen on the simulated station, 31 scans typed into the page (a bad
// one, a repeat, one that fails), badges, and the shift-start check run from
// the page whenever it falls due. Every verdict shown must be the shift
// log's run, the counters the log's counts; the verdict must be on screen
// within 100 ms of its commit (median).
func TestStationScreenInBrowser(t *testing.T) {
	ctx := screentest.Browser(t)
	failing := failingSerial(t)
	dir := t.TempDir()
	db := filepath.Join(dir, "shift.db")
	station := screenStation(t)
	runCtx, stopRun := context.WithCancel(context.Background())
	defer stopRun()
	var stdout, stderr syncBuffer
	exited := make(chan int, 1)
	go func() {
		exited <- run(runCtx, []string{"run", "--variant", "QM-205", "--station", station, "--db", db,
			"--screen=127.0.0.1:0", "--lot", "LOT-START"}, strings.NewReader(""), &stdout, &stderr)
	}()
	addr := regexp.MustCompile(`station screen: (http://127\.0\.0\.1:\d+/) \(this computer only\)`)
	var url string
	for deadline := time.Now().Add(20 * time.Second); url == ""; {
		if m := addr.FindStringSubmatch(stderr.String()); m != nil {
			url = m[1]
			break
		}
		select {
		case code := <-exited:
			t.Fatalf("padline run exited %d before serving the screen\nstderr:\n%s", code, stderr.String())
		case <-time.After(20 * time.Millisecond):
		}
		if time.Now().After(deadline) {
			t.Fatalf("no screen address logged:\n%s", stderr.String())
		}
	}
	if err := chromedp.Do(ctx, chromedp.EmulateViewport(1920, 1080), chromedp.Navigate(url)); err != nil {
		t.Fatal(err)
	}
	state := func() pageState {
		t.Helper()
		st, err := chromedp.Run(ctx, chromedp.Evaluate[pageState](`state || {}`))
		if err != nil {
			t.Fatal(err)
		}
		return st
	}
	text := func(sel string) string {
		t.Helper()
		s, err := chromedp.Run(ctx, chromedp.Text(chromedp.CSS(sel)))
		if err != nil {
			t.Fatalf("%s: %v", sel, err)
		}
		return s
	}
	// waitFor polls the page's state until ok, failing after 30 s.
	waitFor := func(what string, ok func(pageState) bool) pageState {
		t.Helper()
		for deadline := time.Now().Add(30 * time.Second); ; {
			st := state()
			if ok(st) {
				return st
			}
			if time.Now().After(deadline) {
				t.Fatalf("waiting for %s: page state %+v\nstdout:\n%s\nstderr:\n%s", what, st, stdout.String(), stderr.String())
			}
			time.Sleep(5 * time.Millisecond)
		}
	}
	shot := func(name string) {
		t.Helper()
		for _, size := range []struct{ w, h int64 }{{800, 480}, {1920, 1080}} {
			if err := chromedp.Do(ctx, chromedp.EmulateViewport(size.w, size.h)); err != nil {
				t.Fatal(err)
			}
			time.Sleep(100 * time.Millisecond) // let the layout settle
			screentest.SaveScreenshot(t, ctx, fmt.Sprintf("station-%dx%d-%s.png", size.w, size.h, name))
		}
	}
	checksFromPage := 0
	runCheck := func() {
		t.Helper()
		if err := chromedp.Do(ctx, chromedp.Click(chromedp.CSS("#startcheck"))); err != nil {
			t.Fatal(err)
		}
		checksFromPage++
		waitFor("the check to pass", func(st pageState) bool { return st.Phase != "refused" && st.Phase != "checking" })
	}
	scan := func(s string) {
		t.Helper()
		if err := chromedp.Do(ctx, chromedp.SendKeys(chromedp.CSS("#scan"), s+"\r")); err != nil {
			t.Fatal(err)
		}
	}

	// A fresh shift log has no check: the station is locked, and says why.
	st := waitFor("the locked station", func(st pageState) bool { return st.Refusal != nil && st.Refusal.CanCheck })
	if !strings.Contains(st.Refusal.Why, "no reference check") || text("#word") != "LOCKED" {
		t.Errorf("locked station shows %q: %q", text("#word"), st.Refusal.Why)
	}
	shot("locked")
	runCheck()

	// Badges set the lot and operator every following run records.
	scan("LOT:2611-04")
	scan("OP:0417")
	waitFor("the badges", func(pageState) bool { return text("#lot") == "2611-04" && text("#operator") == "0417" })

	// 31 scans: 28 units, one that fails on the simulated line, one bad
	// serial, one repeat.
	var scans []string
	for i := 20; i < 48; i++ {
		scans = append(scans, fmt.Sprintf("QM205-%06d", i))
	}
	scans = slices.Insert(scans, 11, failing)
	scans = slices.Insert(scans, 5, "QM205-12AB")   // bad: not the variant's pattern
	scans = slices.Insert(scans, 9, "QM205-000022") // a repeat of an earlier unit
	var got []shown
	seen := map[string]bool{}
	lastID := int64(0)
	for _, s := range scans {
		scan(s)
		if s == "QM205-12AB" {
			st := waitFor("the bad scan's refusal", func(st pageState) bool { return st.ScanRefused != nil })
			if st.ScanRefused.Scan != s || !strings.Contains(st.ScanRefused.Reason, "serial pattern") ||
				!strings.Contains(text("#scanrefused"), "NOT TESTED") {
				t.Errorf("bad scan refused as %+v, shown %q", st.ScanRefused, text("#scanrefused"))
			}
			continue
		}
		for {
			st := waitFor("a verdict for "+s, func(st pageState) bool {
				return (st.Last != nil && st.Last.RunID > lastID && st.Phase == "ready") ||
					(st.Refusal != nil && st.Refusal.CanCheck) || (st.Repeat != nil && st.Repeat.Serial == s)
			})
			switch {
			case st.Refusal != nil && st.Refusal.CanCheck:
				if !strings.Contains(st.Refusal.Why, "units tested since the reference check") {
					t.Errorf("check due for %q", st.Refusal.Why)
				}
				if checksFromPage == 1 {
					shot("check-due")
				}
				runCheck()
				continue
			case st.Repeat != nil && st.Repeat.Serial == s:
				if !strings.Contains(text("#repeattext"), "already has 1 verdict") {
					t.Errorf("repeat shown as %q", text("#repeattext"))
				}
				if err := chromedp.Do(ctx, chromedp.Click(chromedp.CSS("#ackrepeat"))); err != nil {
					t.Fatal(err)
				}
				waitFor("the repeat to go to test", func(st pageState) bool { return st.Repeat == nil })
				continue
			}
			if st.Last.Serial != s {
				t.Fatalf("scanned %s, the screen shows %s", s, st.Last.Serial)
			}
			// The page notes when each verdict was painted.
			var at float64
			for deadline := time.Now().Add(5 * time.Second); ; {
				v, err := chromedp.Run(ctx, chromedp.Evaluate[float64](fmt.Sprintf(`window.padlineShownAt[%d] || 0`, st.Last.RunID)))
				if err != nil {
					t.Fatal(err)
				}
				if at = v; at > 0 || time.Now().After(deadline) {
					break
				}
				time.Sleep(2 * time.Millisecond)
			}
			got = append(got, shown{runID: st.Last.RunID, serial: s, word: text("#word"),
				latencyMs: at - float64(st.Last.CommittedMs), firstOfSerial: !seen[s], verdictOfState: st.Last.Verdict})
			seen[s] = true
			lastID = st.Last.RunID
			if st.Last.Verdict == "fail" && text("#do") == "" {
				t.Errorf("fail of %s shows no action", s)
			}
			if s == failing {
				shot("fail")
			}
			break
		}
	}
	counters := [3]string{text("#n-pass"), text("#n-fail"), text("#n-fault")}
	fpyShown := text("#fpy")
	shot("end")
	stopRun()
	if code := <-exited; code != 0 {
		t.Fatalf("padline run exited %d\nstderr:\n%s", code, stderr.String())
	}

	// Every verdict shown is the shift log's run; the counters are the
	// log's counts.
	log, err := store.Open(db)
	if err != nil {
		t.Fatal(err)
	}
	defer log.Close()
	words := map[sequences.Verdict]string{sequences.Pass: "PASS", sequences.Fail: "FAIL", sequences.StationFault: "STATION FAULT"}
	byID := map[int64]*store.Entry{}
	counts := map[sequences.Verdict]int{}
	firstRuns := map[string]sequences.Verdict{}
	for e, err := range log.Runs(context.Background(), store.Filter{}) {
		if err != nil {
			t.Fatal(err)
		}
		byID[e.ID] = e
		counts[e.Verdict]++
		if _, ok := firstRuns[e.Serial]; !ok && e.Verdict != sequences.StationFault {
			firstRuns[e.Serial] = e.Verdict
		}
		if e.Lot != "2611-04" || e.Operator != "0417" {
			t.Errorf("run %d of %s records lot %q operator %q, want the badges'", e.ID, e.Serial, e.Lot, e.Operator)
		}
	}
	if len(got) != 30 || len(byID) != 30 {
		t.Errorf("%d verdicts shown, %d runs in the log; want 30 each", len(got), len(byID))
	}
	fails := 0
	var lat []float64
	for _, g := range got {
		e := byID[g.runID]
		if e == nil {
			t.Errorf("run %d (%s) shown but not in the shift log", g.runID, g.serial)
			continue
		}
		if e.Serial != g.serial || words[e.Verdict] != g.word || string(e.Verdict) != g.verdictOfState {
			t.Errorf("run %d: screen showed %s %q, the log has %s %s", g.runID, g.serial, g.word, e.Serial, e.Verdict)
		}
		if e.Verdict == sequences.Fail {
			fails++
		}
		lat = append(lat, g.latencyMs)
	}
	if fails == 0 {
		t.Error("no unit failed: the test needs one that does")
	}
	want := [3]string{strconv.Itoa(counts[sequences.Pass]), strconv.Itoa(counts[sequences.Fail]), strconv.Itoa(counts[sequences.StationFault])}
	if counters != want {
		t.Errorf("counters pass/fail/fault %v, the log has %v", counters, want)
	}
	firstPass := 0
	for _, v := range firstRuns {
		if v == sequences.Pass {
			firstPass++
		}
	}
	if w := fmt.Sprintf("%.1f %%", 100*float64(firstPass)/float64(len(firstRuns))); fpyShown != w {
		t.Errorf("first-pass yield shown %q, the log gives %q", fpyShown, w)
	}
	if checksFromPage < 3 {
		t.Errorf("%d checks run from the page, want 3 (at start, after 12 and after 24 units)", checksFromPage)
	}

	slices.Sort(lat)
	med := lat[len(lat)/2]
	if len(lat)%2 == 0 {
		med = (lat[len(lat)/2-1] + lat[len(lat)/2]) / 2
	}
	figure := fmt.Sprintf("verdict on screen after commit: median %.1f ms, max %.1f ms over %d units (Chromium, headless)", med, lat[len(lat)-1], len(lat))
	t.Log(figure)
	_ = os.WriteFile(filepath.Join(screentest.ArtifactDir(t), "station-latency.txt"), []byte(figure+"\n"), 0o644)
	if med > 100 || math.IsNaN(med) || lat[0] < 0 {
		t.Errorf("%s: want a median of at most 100 ms (and no negative delay)", figure)
	}
}
