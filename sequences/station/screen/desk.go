package screen

import (
	"context"
	"strings"
	"sync"
	"time"

	"padline/sequences/session"
)

// Desk connects a station session to the screen: the session's events
// become the screen's state, and what the technician does on the page (or
// scans on the station's scanner) goes to the session.
//
// Scans reach the session through Scanner, from the page and from the
// barcode scanner on stdin alike. A serial that already has a unit verdict
// in the shift log is held back and announced as a repeat; it goes to test
// only when the technician acknowledges it, by the page's button or by
// scanning it again at once. A request to run the shift-start check goes
// to the session only while the session waits for one.
type Desk struct {
	srv  *Server
	sess *session.Session
	now  func() time.Time

	scans chan Input // page scans and acknowledgements, for Scanner

	mu sync.Mutex
	// waitingCheck is true while the session waits for a check.
	waitingCheck bool
}

// NewDesk connects srv and sess. Call Start before the session's Run, and
// give Run the desk's Scanner.
func NewDesk(srv *Server, sess *session.Session) *Desk {
	return &Desk{srv: srv, sess: sess, now: time.Now, scans: make(chan Input, 64)}
}

// Start subscribes to the session's events and handles the page's inputs
// until ctx ends or the session closes. The returned func waits for the
// event consumer to finish (after the session is closed).
func (d *Desk) Start(ctx context.Context) (wait func()) {
	// A unit emits about ten events; this covers hundreds of units of a
	// stalled consumer. Dropped events show as a gap in Seq.
	events, _ := d.sess.Subscribe(4096)
	d.srv.Apply(StationInfo{References: len(d.sess.Rig().Station.Trust.References)})
	d.schedule(ctx)
	done := make(chan struct{})
	go func() {
		defer close(done)
		for e := range events {
			d.event(ctx, e)
		}
	}()
	go d.inputs(ctx)
	return func() { <-done }
}

// event applies one session event to the screen.
func (d *Desk) event(ctx context.Context, e session.Event) {
	switch e.Kind {
	case session.KindCheckDue:
		d.mu.Lock()
		d.waitingCheck = true
		d.mu.Unlock()
	case session.KindCheckProgress, session.KindCheckResult:
		d.mu.Lock()
		d.waitingCheck = false
		d.mu.Unlock()
	}
	d.srv.Apply(e)
	switch e.Kind {
	case session.KindVerdictCommitted, session.KindCheckResult, session.KindSessionStarted:
		d.schedule(ctx)
	}
}

// schedule shows when the next shift-start check falls due.
func (d *Desk) schedule(ctx context.Context) {
	sc, err := session.NextCheck(context.WithoutCancel(ctx), d.sess.DB(), d.sess.Rig().Station, d.now())
	if err == nil {
		d.srv.Apply(Schedule(sc))
	}
}

// inputs hands the page's inputs on: a check request to the session, scans
// and acknowledgements to Scanner.
func (d *Desk) inputs(ctx context.Context) {
	for {
		select {
		case <-ctx.Done():
			return
		case in := <-d.srv.Inputs():
			if in.Kind == InputStartCheck {
				d.mu.Lock()
				waiting := d.waitingCheck
				d.mu.Unlock()
				if waiting {
					d.sess.RequestCheck()
				}
				continue
			}
			select {
			case d.scans <- in:
			case <-ctx.Done():
				return
			}
		}
	}
}

// Scanner is the session's source of scans: the page's, and stdin's when
// stdin is not nil. The end of stdin does not end the session (the page
// can still scan); the session ends when its context does.
func (d *Desk) Scanner(stdin session.Scanner) session.Scanner {
	var lines chan string
	var once sync.Once
	startStdin := func(ctx context.Context) {
		if stdin == nil {
			return
		}
		lines = make(chan string)
		go func() {
			for {
				raw, ok, err := stdin.Scan(ctx)
				if !ok || err != nil {
					return
				}
				select {
				case lines <- raw:
				case <-ctx.Done():
					return
				}
			}
		}()
	}
	pending := "" // a repeat serial waiting for its acknowledgement
	return session.ScannerFunc(func(ctx context.Context) (string, bool, error) {
		once.Do(func() { startStdin(ctx) })
		for {
			var in Input
			select {
			case <-ctx.Done():
				return "", false, nil
			case in = <-d.scans:
			case raw := <-lines:
				in = Input{Kind: InputScan, Text: raw}
			}
			text := strings.Trim(in.Text, " \t\r\n")
			if in.Kind == InputAckRepeat || (pending != "" && text == pending) {
				if pending == "" || (text != "" && text != pending) {
					continue // a stale acknowledgement
				}
				s := pending
				pending = ""
				d.srv.Apply(RepeatCleared{})
				return s, true, nil
			}
			if pending != "" {
				pending = ""
				d.srv.Apply(RepeatCleared{})
			}
			if _, _, badge, _ := d.sess.Rig().Station.Badges.Badge(text); badge || text == "" {
				return in.Text, true, nil
			}
			tested, failed, err := d.sess.DB().PriorRuns(ctx, text)
			if err == nil && tested > 0 {
				pending = text
				d.srv.Apply(RepeatScanned{Serial: text, Tested: tested, Failed: failed})
				continue
			}
			return in.Text, true, nil
		}
	})
}
