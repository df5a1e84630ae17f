package session

import (
	"context"
	"encoding/json"
	"fmt"
	"time"

	"padline/sequences"
	"padline/store"
)

// CheckReport is one reference check of a station: what it found, as
// recorded in the shift log (its details column) and printed with --json.
type CheckReport struct {
	Station     string                  `json:"station"`
	Fixture     string                  `json:"fixture"`
	StationFile string                  `json:"station_file"`
	StationHash string                  `json:"station_hash"`
	Variant     string                  `json:"variant"`
	Time        time.Time               `json:"time"`
	OK          bool                    `json:"ok"`
	Faults      []string                `json:"faults"`
	FixtureS    float64                 `json:"fixture_time_s"`
	References  []sequences.RefCheck    `json:"references"`
	Ladder      []sequences.RungFinding `json:"ladder"`
	CheckID     int64                   `json:"check_id"`
}

// Loader puts a unit into the fixture for a station command: the simulated
// line loads it itself (with the reference's simulator defects); on
// hardware the operator is asked through prompt, and the lid must open and
// close again between units.
type Loader struct {
	Rig *Rig
	// Prompt tells the operator what to do; nil discards.
	Prompt func(msg string)
	loaded bool
}

// Load puts the unit with serial in the fixture; what names it for the
// operator ("reference unit R-1").
func (l *Loader) Load(ctx context.Context, serial string, simDefects []string, what string) error {
	r := l.Rig
	if r.Line != nil {
		if err := r.Line.ForceDefects(serial, simDefects...); err != nil {
			return err
		}
		r.Line.Load(serial)
		return nil
	}
	l.prompt(fmt.Sprintf("load %s into fixture %s and close the lid", what, r.Station.Fixture))
	if l.loaded {
		if err := r.Fixture.WaitLid(ctx, false, lidPoll, 0); err != nil {
			return err
		}
	}
	l.loaded = true
	return waitLid(ctx, r, 0, l.prompt)
}

// Unload takes the unit out of a simulated line (nothing on hardware).
func (l *Loader) Unload() {
	if l.Rig.Line != nil {
		l.Rig.Line.Unload()
	}
}

func (l *Loader) prompt(msg string) {
	if l.Prompt != nil {
		l.Prompt(msg)
	}
}

// lidPoll is how often a wait for the lid reads its switch.
const lidPoll = 50 * time.Millisecond

// waitLid asks for the lid to be closed, once, and waits until it is.
func waitLid(ctx context.Context, r *Rig, timeout time.Duration, prompt func(string)) error {
	if closed, err := r.Fixture.LidClosed(); err != nil || closed {
		return err
	}
	prompt("close the lid to start the test")
	return r.Fixture.WaitLid(ctx, true, lidPoll, timeout)
}

// CheckConfig is the reference check's configuration on this rig.
func (r *Rig) CheckConfig() sequences.CheckConfig {
	l := r.Station.Ladder
	return sequences.CheckConfig{
		RungsPF: l.RungsPF, StrayPF: l.StrayPF, CalPF: l.CalUncertaintyPF,
		PowerSettle: r.PlanConfig.PowerSettle, Period: r.PlanConfig.Period,
	}
}

// RunCheck tests every reference unit of the station file, self-tests the
// ladder on them and records the check in db. progress (nil: none) hears
// each step. A check that finds a fault is returned with OK false and no
// error; an error means no check was recorded.
func RunCheck(ctx context.Context, r *Rig, db *store.DB, progress func(CheckInfo)) (CheckReport, error) {
	st := r.Station
	say := func(ci CheckInfo) {
		if progress != nil {
			progress(ci)
		}
	}
	if len(st.Trust.References) == 0 {
		return CheckReport{}, fmt.Errorf("station file %s registers no reference_units: measure a kept good unit on this station and add {serial, trip_pf, allowed_dev_pf} under reference_units", st.Source.Name)
	}
	lastRun, err := db.LastRunID(ctx)
	if err != nil {
		return CheckReport{}, err
	}
	rep := CheckReport{Station: st.Name, Fixture: st.Fixture, StationFile: st.Source.Name, StationHash: st.Source.Hash,
		Variant: r.Variant.Name, Time: time.Now().UTC()}
	ld := &Loader{Rig: r, Prompt: func(msg string) { say(CheckInfo{Message: msg}) }}
	cfg := r.CheckConfig()
	var total time.Duration
	for _, ref := range st.Trust.References {
		if err := ld.Load(ctx, ref.Serial, ref.SimDefects, "reference unit "+ref.Serial); err != nil {
			return rep, fmt.Errorf("station check: %w", err)
		}
		res, err := sequences.CheckReference(ctx, r.Fixture, r.Clock, ref.Reference, cfg)
		ld.Unload()
		if err != nil {
			return rep, fmt.Errorf("station check: reference unit %s: %w", ref.Serial, err)
		}
		total += res.FixtureTime
		rep.References = append(rep.References, res)
		say(CheckInfo{Serial: ref.Serial, Message: fmt.Sprintf("reference unit %s measured", ref.Serial)})
	}
	rep.Ladder, rep.Faults = sequences.CombineChecks(rep.References)
	rep.OK = len(rep.Faults) == 0
	rep.FixtureS = total.Seconds()
	details, err := json.Marshal(rep)
	if err != nil {
		return rep, err
	}
	rep.CheckID, err = db.RecordCheck(ctx, store.StationCheck{
		Time: rep.Time, Station: st.Name, Fixture: st.Fixture, StationHash: st.Source.Hash,
		OK: rep.OK, LastRunID: lastRun, Details: details,
	})
	if err != nil {
		return rep, fmt.Errorf("station check not recorded: %w", err)
	}
	return rep, nil
}
