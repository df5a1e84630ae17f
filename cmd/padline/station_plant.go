package main

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"sync"
	"time"

	"padline/store"
	"padline/store/plant"
)

// StationPlant is the station file's optional `plant:` section.
type StationPlant struct {
	// URL is the plant store, postgres://ROLE@HOST/DB; "" forwards nothing.
	URL string
}

func readStationPlant(d *doc) StationPlant {
	var p StationPlant
	if !d.section("plant", false) {
		return p
	}
	p.URL = d.str("plant.url", true)
	if p.URL != "" && !isPlantURL(p.URL) {
		d.fail("plant.url", "want a postgres:// URL, got %q", p.URL)
	}
	return p
}

// plantURL is where this station forwards: --plant-url, else
// $PADLINE_PLANT_URL, else the station file's plant.url; "" for nowhere.
func plantURL(flag string, st *Station) string {
	if flag != "" {
		return flag
	}
	if u := os.Getenv("PADLINE_PLANT_URL"); u != "" {
		return u
	}
	return st.Plant.URL
}

// stationProfile is what the line board needs to know of the station file.
func stationProfile(st *Station) json.RawMessage {
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
func (a *app) startForwarding(ctx context.Context, db *store.DB, st *Station, flag string) *forwarding {
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
