package main

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"sync"
	"time"

	"github.com/spf13/pflag"

	"padline/sequences/session"
	"padline/store"
	"padline/store/plant"
)

// plantURL is where this station forwards: --plant-url, else
// $PADLINE_PLANT_URL, else the station file's plant.url; "" for nowhere.
func plantURL(flag string, st *session.Station) string {
	if flag != "" {
		return flag
	}
	if u := os.Getenv("PADLINE_PLANT_URL"); u != "" {
		return u
	}
	return st.Plant.URL
}

// stationProfile is what the line board needs to know of the station file.
func stationProfile(st *session.Station) json.RawMessage {
	b, _ := json.Marshal(plant.Profile{Fixture: st.Fixture, CheckEveryUnits: st.Trust.CheckEveryUnits,
		CheckEveryHours: st.Trust.CheckEveryHours, RatedOperations: st.Ladder.RatedOperations,
		WarnFraction: st.Trust.RelayWarnFraction})
	return b
}

// forwarding is a running forwarder goroutine (or none, when the station
// forwards nowhere: then kick and stop do nothing).
type forwarding struct {
	f      *plant.Forwarder
	p      *plant.DB
	cancel context.CancelFunc
	wg     sync.WaitGroup
}

// startForwarding starts forwarding the shift log to the plant store in the
// background. Testing never waits for it: a commit only kicks it, and
// while the plant store is unreachable the backlog stays in the shift log.
func (a *app) startForwarding(ctx context.Context, db *store.DB, st *session.Station, flag string) *forwarding {
	url := plantURL(flag, st)
	if url == "" {
		return nil
	}
	p, err := plant.Open(ctx, url)
	if err != nil {
		fmt.Fprintf(a.stderr, "plant forwarding off: %v\n", err)
		return nil
	}
	fctx, cancel := context.WithCancel(context.WithoutCancel(ctx))
	fw := &forwarding{p: p, cancel: cancel,
		f: &plant.Forwarder{Log: db, Plant: p, Station: st.Name, Profile: stationProfile(st)}}
	fw.wg.Add(1)
	go func() {
		defer fw.wg.Done()
		_ = fw.f.Run(fctx)
	}()
	return fw
}

func (fw *forwarding) kick() {
	if fw != nil {
		fw.f.Kick()
	}
}

// forwardOnExit bounds the last attempt to send the backlog when run ends.
const forwardOnExit = 2 * time.Second

// stop ends forwarding after one last attempt (at most forwardOnExit) to
// send what is left; what is not sent stays in the outbox for next time.
func (fw *forwarding) stop() {
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

// addPlantURLFlag adds 'padline run --plant-url'.
func addPlantURLFlag(f *pflag.FlagSet, dst *string) {
	f.StringVar(dst, "plant-url", "", "forward every committed run to this plant store, postgres://… (default: $PADLINE_PLANT_URL, else the station file's plant.url)")
}

// forwardSession starts forwarding sess's shift log when a plant store is
// configured, kicked by every committed verdict, and returns the function
// that stops it.
func (a *app) forwardSession(ctx context.Context, sess *session.Session, flag string) (stop func()) {
	fw := a.startForwarding(ctx, sess.DB(), sess.Rig().Station, flag)
	if fw == nil {
		return func() {}
	}
	events, unsubscribe := sess.Subscribe(64)
	done := make(chan struct{})
	go func() {
		defer close(done)
		for e := range events {
			if e.Kind == session.KindVerdictCommitted {
				fw.kick()
			}
		}
	}()
	return func() {
		unsubscribe()
		<-done
		fw.stop()
	}
}
