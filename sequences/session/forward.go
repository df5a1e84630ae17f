package session

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"sync"
	"time"

	"padline/sequences"
	"padline/store"
	"padline/store/plant"
)

// PlantURL is where a station forwards its runs: flag (--plant-url), else
// $PADLINE_PLANT_URL, else the station file's plant.url; "" for nowhere.
func PlantURL(flag string, st *Station) string {
	if flag != "" {
		return flag
	}
	if u := os.Getenv("PADLINE_PLANT_URL"); u != "" {
		return u
	}
	if st == nil {
		return ""
	}
	return st.Plant.URL
}

// PlantProfile is what the line board needs to know of the station file.
func PlantProfile(st *Station) json.RawMessage {
	b, _ := json.Marshal(plant.Profile{Fixture: st.Fixture, CheckEveryUnits: st.Trust.CheckEveryUnits,
		CheckEveryHours: st.Trust.CheckEveryHours, RatedOperations: st.Ladder.RatedOperations,
		WarnFraction: st.Trust.RelayWarnFraction})
	return b
}

// Forwarding is a forwarder running in the background: it sends the shift
// log's committed runs to the plant store. Testing never waits for it: a
// commit only wakes it (Kick), and while the plant store is unreachable the
// backlog stays in the shift log. A nil *Forwarding forwards nothing.
type Forwarding struct {
	f      *plant.Forwarder
	p      *plant.DB
	cancel context.CancelFunc
	wg     sync.WaitGroup
}

// ForwardOptions tune StartForwarding.
type ForwardOptions struct {
	// Every is the least time between two batches while the forwarder
	// keeps up (0: 1 s; negative: a batch per committed run; see
	// plant.Forwarder.Every).
	Every time.Duration
	// OnBatch, when set, is called on the forwarder's goroutine after each
	// batch lands (benchmarks wait on it).
	OnBatch func(plant.Result)
}

// StartForwarding starts forwarding db, station st's shift log, to the
// plant store at url ("": nil, nil).
func StartForwarding(ctx context.Context, db *store.DB, st *Station, url string, o ForwardOptions) (*Forwarding, error) {
	if url == "" {
		return nil, nil
	}
	p, err := plant.Open(ctx, url)
	if err != nil {
		return nil, fmt.Errorf("plant forwarding off: %w", err)
	}
	fctx, cancel := context.WithCancel(context.WithoutCancel(ctx))
	fw := &Forwarding{p: p, cancel: cancel,
		f: &plant.Forwarder{Log: db, Plant: p, Station: st.Name, Profile: PlantProfile(st), Every: o.Every, OnBatch: o.OnBatch}}
	fw.wg.Add(1)
	go func() {
		defer fw.wg.Done()
		_ = fw.f.Run(fctx)
	}()
	return fw, nil
}

// forwardLog starts forwarding station st's shift log db to
// PlantURL(flag, st); a plant store that cannot be opened is reported on
// warn (nil: not at all) and never stops the station. nil: no forwarding.
func forwardLog(ctx context.Context, db *store.DB, st *Station, flag string, warn io.Writer) *Forwarding {
	fw, err := StartForwarding(ctx, db, st, PlantURL(flag, st), ForwardOptions{})
	if err != nil && warn != nil {
		fmt.Fprintln(warn, err)
	}
	return fw
}

// Kick wakes the forwarder: a run was committed. It never blocks.
func (fw *Forwarding) Kick() {
	if fw != nil {
		fw.f.Kick()
	}
}

// Committed hands the forwarder the run just committed under id (so it
// need not read it back from the shift log) and wakes it. It never blocks.
func (fw *Forwarding) Committed(id int64, run sequences.Run) {
	if fw != nil {
		fw.f.Offer(store.EntryOf(id, run))
	}
}

// forwardOnExit bounds the last attempt to send the backlog on Stop.
const forwardOnExit = 2 * time.Second

// Stop ends forwarding after one last attempt (at most 2 s) to send what is
// left; what is not sent stays in the outbox for next time.
func (fw *Forwarding) Stop() {
	if fw == nil {
		return
	}
	fw.cancel()
	fw.wg.Wait()
	ctx, cancel := context.WithTimeout(context.Background(), forwardOnExit)
	defer cancel()
	_ = fw.f.Drain(ctx)
	fw.p.Close()
}

// Forward starts forwarding the session's shift log to the plant store
// (PlantURL(flag, station)), woken by every committed verdict, and returns
// the function that stops it. A plant store that cannot be opened is
// reported on warn and never stops the station. Call it before Run.
func (s *Session) Forward(ctx context.Context, flag string, warn io.Writer) (stop func()) {
	fw := forwardLog(ctx, s.db, s.rig.Station, flag, warn)
	if fw == nil {
		return func() {}
	}
	s.plant = plant.Redact(PlantURL(flag, s.rig.Station))
	s.fwd.Store(fw)
	return func() {
		s.fwd.Store(nil)
		fw.Stop()
	}
}
