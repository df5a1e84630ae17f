package screen_test

import (
	"context"
	"fmt"
	"net/http/httptest"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/station/screen"
	"padline/sequences/station/screen/screentest"
)

// demoShift feeds the screen a short simulated shift with every kind of
// verdict and warning (invented demo data).
func demoShift(s *screen.Server) {
	s.Apply(session.Event{Kind: session.KindSessionStarted, Started: &session.Started{Station: "L2-S1", Fixture: "FX-07",
		Variant: "QM-205", Simulated: true, Lot: "LOT-2611-04", Operator: "OP-0417",
		Limits: sequences.Limits{TripLowPF: 27.9, TripHighPF: 35.6}}})
	s.Apply(screen.StationInfo{References: 3})
	s.Apply(screen.Schedule{UnitsLeft: 1977, Due: time.Now().Add(6*time.Hour + 41*time.Minute)})
	trips := []float64{31.2, 30.8, 32.0, 31.5, 29.9, 31.1, 30.4, 32.3, 31.7, 30.9, 31.0, 31.8, 30.2, 31.4, 31.6, 30.7, 32.1, 31.3, 30.6, 31.9, 30.5}
	for i, tp := range trips {
		code, v := sequences.FailCode(""), sequences.Pass
		switch i {
		case 6:
			v, code, tp = sequences.Fail, sequences.CodeTripHigh, 38.2
		case 13:
			v, code = sequences.StationFault, sequences.CodeLidOpen
		}
		s.Apply(verdict(int64(i+1), fmt.Sprintf("QM205-0070%02d", i+1), v, code, tp, 0))
	}
	s.Apply(session.Event{Kind: session.KindRelayWear, Wear: &session.RelayWear{Rung: 5, Operations: 820_000_000, Rated: 1e9, Fraction: 0.82}})
	s.Apply(session.Event{Kind: session.KindDriftAlarm, Drift: &session.DriftAlarm{Rule: "ewma",
		Message: "trip points drifting up: EWMA above its limit since unit QM205-007015"}})
}

type layout struct {
	name string
	w, h int64
}

var layouts = []layout{{"800x480", 800, 480}, {"1920x1080", 1920, 1080}}

// The page in a real browser, at both sizes: the verdict word is at least
// 96 px, nothing spills off the screen, and each state is saved as a
// screenshot to look at.
func TestPageInBrowser(t *testing.T) {
	s, err := screen.NewServer()
	if err != nil {
		t.Fatal(err)
	}
	hs := httptest.NewServer(s)
	t.Cleanup(hs.Close)
	t.Cleanup(s.Close) // ends the page's event stream first
	ctx := screentest.Browser(t)
	demoShift(s)

	states := []struct {
		name  string
		event screen.Event
		word  string
	}{
		{"pass", verdict(100, "QM205-007100", sequences.Pass, "", 31.4, 0), "PASS"},
		{"fail", verdict(101, "QM205-007101", sequences.Fail, sequences.CodeNoTrip, nan(), 0), "FAIL"},
		{"fault", func() session.Event {
			e := verdict(102, "QM205-007102", sequences.StationFault, sequences.CodePinError, nan(), 0)
			e.Verdict.StationError = "pin ladder[3] GPIO19: write failed"
			return e
		}(), "STATION FAULT"},
		{"locked", refused(session.KindCheckDue), "LOCKED"},
		{"checking", progress("load reference unit QM205-REF-36", ""), "CHECKING THE STATION"},
		{"testing", scanned("QM205-007103"), "TESTING"},
	}
	for _, l := range layouts {
		if err := chromedp.Do(ctx, chromedp.EmulateViewport(l.w, l.h), chromedp.Navigate(hs.URL+"/")); err != nil {
			t.Fatal(err)
		}
		for _, st := range states {
			s.Apply(st.event)
			if word, err := waitText(ctx, "#word", st.word); err != nil {
				t.Fatalf("%s %s: %v (word %q)", l.name, st.name, err, word)
			}
			type metrics struct {
				Font                 float64
				ScrollW, ScrollH     float64
				WordBottom, WordLeft float64
			}
			js := `(() => { const w = document.getElementById("word"); const r = w.getBoundingClientRect();
				return {Font: parseFloat(getComputedStyle(w).fontSize), ScrollW: document.documentElement.scrollWidth,
				ScrollH: document.documentElement.scrollHeight, WordBottom: r.bottom, WordLeft: r.left}; })()`
			m, err := chromedp.Run(ctx, chromedp.Evaluate[metrics](js))
			if err != nil {
				t.Fatal(err)
			}
			if st.word == "PASS" || st.word == "FAIL" || st.word == "STATION FAULT" {
				if m.Font < 96 {
					t.Errorf("%s %s: verdict word %.0f px, want at least 96", l.name, st.name, m.Font)
				}
			}
			if m.ScrollW > float64(l.w) || m.ScrollH > float64(l.h) || m.WordBottom > float64(l.h) {
				t.Errorf("%s %s: page %gx%g spills off the screen (word bottom %g)", l.name, st.name, m.ScrollW, m.ScrollH, m.WordBottom)
			}
			if st.name == "locked" {
				// The check's button is a finger's target: at least 44 x 44
				// CSS px, WCAG 2.1 success criterion 2.5.5 (Target Size).
				type box struct{ W, H float64 }
				b, err := chromedp.Run(ctx, chromedp.Evaluate[box](`(() => { const r = document.getElementById("startcheck").getBoundingClientRect(); return {W: r.width, H: r.height}; })()`))
				if err != nil {
					t.Fatal(err)
				}
				if b.W < 44 || b.H < 44 {
					t.Errorf("%s: check button %gx%g px, want at least 44x44", l.name, b.W, b.H)
				}
			}
			screentest.SaveScreenshot(t, ctx, fmt.Sprintf("screen-%s-%s.png", l.name, st.name))
		}
		s.Apply(session.Event{Kind: session.KindCheckResult, Check: &session.CheckInfo{Report: &session.CheckReport{OK: true, Time: time.Now()}}})
	}
}

// waitText waits up to 5 s until the text of the element sel is want, and
// returns the last text read.
func waitText(ctx context.Context, sel, want string) (string, error) {
	ctx, cancel := context.WithTimeout(ctx, 5*time.Second)
	defer cancel()
	for {
		got, err := chromedp.Run(ctx, chromedp.Text(chromedp.CSS(sel)))
		if err != nil || got == want {
			return got, err
		}
		select {
		case <-ctx.Done():
			return got, ctx.Err()
		case <-time.After(10 * time.Millisecond):
		}
	}
}
