package session

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"slices"
	"strings"
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
	// Offset is the fixture's offset from the reference units with a lab
	// trip point (nil when none has one, or the check did not pass): the
	// session adds it to every trip point until the next check.
	Offset   *sequences.FixtureOffset `json:"offset,omitempty"`
	OffsetPF *float64                 `json:"offset_pf,omitempty"`   // at the variant's nominal trip
	OffsetU  *float64                 `json:"offset_u_pf,omitempty"` // its standard uncertainty
	// Sites holds a panel station's check site by site, site 1 first (nil
	// for a single-unit station): each site's offset is its own, and
	// Offset above stays nil. References and Faults above hold every
	// site's; Ladder is site 1's.
	Sites   []SiteCheck `json:"sites,omitempty"`
	CheckID int64       `json:"check_id"`
}

// SiteCheck is one site's part of a panel station's reference check.
type SiteCheck struct {
	Site       int                      `json:"site"` // 1-based
	References []sequences.RefCheck     `json:"references"`
	Ladder     []sequences.RungFinding  `json:"ladder"`
	Faults     []string                 `json:"faults"`
	Offset     *sequences.FixtureOffset `json:"offset,omitempty"`
	OffsetPF   *float64                 `json:"offset_pf,omitempty"`
	OffsetU    *float64                 `json:"offset_u_pf,omitempty"`
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
// error; an error means no check was recorded. A passing check puts its
// fixture offset on the rig's plan.
func RunCheck(ctx context.Context, r *Rig, db *store.DB, progress func(CheckInfo)) (CheckReport, error) {
	rep, err := recordCheck(ctx, db, []*Rig{r}, false, progress)
	if err == nil && rep.OK {
		r.Plan.SetOffset(rep.Offset)
	}
	return rep, err
}

// RunPanelCheck is the shift-start check of a panel station: every
// reference unit on every site (each site alone in the fixture, with its
// own calibrated ladder: PanelRig.SiteRig), the ladder self-test on each,
// one check recorded for the station. A fault found on a site is named
// with the site; a ganged rung fault shows on every site. A passing check
// puts each site's own fixture offset on the panel plan.
func RunPanelCheck(ctx context.Context, r *PanelRig, db *store.DB, progress func(CheckInfo)) (CheckReport, error) {
	sites := make([]*Rig, r.Sites())
	for i := range sites {
		var err error
		if sites[i], err = r.SiteRig(i); err != nil {
			return CheckReport{}, err
		}
	}
	rep, err := recordCheck(ctx, db, sites, true, progress)
	if err == nil && rep.OK {
		err = r.Plan.SetOffsets(rep.SiteOffsets())
	}
	return rep, err
}

// recordCheck is RunCheck's and RunPanelCheck's common part: the check on
// each of sites (measureSites) recorded in db with the last run before it.
func recordCheck(ctx context.Context, db *store.DB, sites []*Rig, panel bool, progress func(CheckInfo)) (CheckReport, error) {
	st := sites[0].Station
	if len(st.Trust.References) == 0 {
		return CheckReport{}, fmt.Errorf("station file %s registers no reference_units: measure a kept good unit on this station and add {serial, trip_pf, allowed_dev_pf} under reference_units", st.Source.Name)
	}
	lastRun, err := db.LastRunID(ctx)
	if err != nil {
		return CheckReport{}, err
	}
	rep, err := measureSites(ctx, sites, panel, st.Trust.References, progress)
	if err != nil {
		return rep, err
	}
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

// MeasureReferences runs the reference check on refs without recording
// it: each unit's trip and the ladder self-test, and, when the check
// passes, the fixture offset from the units with a lab trip point.
func MeasureReferences(ctx context.Context, r *Rig, refs []StationRef, progress func(CheckInfo)) (CheckReport, error) {
	return measureSites(ctx, []*Rig{r}, false, refs, progress)
}

// measureSites runs the reference check on refs at each site in turn
// (a single-unit station is a panel of one site): each unit alone in the
// fixture, measured on the site's own calibrated ladder, the ladder
// self-test from the site's units, and, when the whole check passes, each
// site's fixture offset from its own units with a lab trip point (its own
// stray and capacitors: DEVELOPERS.md "Panels"). With panel, faults,
// errors and progress name the site, and the report lists the sites
// (CheckReport.Sites); otherwise the one site's findings are the report's.
func measureSites(ctx context.Context, sites []*Rig, panel bool, refs []StationRef, progress func(CheckInfo)) (CheckReport, error) {
	st := sites[0].Station
	say := func(ci CheckInfo) {
		if progress != nil {
			progress(ci)
		}
	}
	rep := CheckReport{Station: st.Name, Fixture: st.Fixture, StationFile: st.Source.Name, StationHash: st.Source.Hash,
		Variant: sites[0].Variant.Name, Time: time.Now().UTC()}
	// One loader for every site: the lid opens between every two units.
	ld := &Loader{Prompt: func(msg string) { say(CheckInfo{Message: msg}) }}
	var total time.Duration
	for i, sr := range sites {
		ld.Rig = sr
		cfg := sr.CheckConfig()
		sc := SiteCheck{Site: i + 1}
		where := ""
		if panel {
			where = fmt.Sprintf("site %d: ", i+1)
		}
		for _, ref := range refs {
			what := "reference unit " + ref.Serial
			if panel {
				what += fmt.Sprintf(" at site %d alone", i+1)
			}
			if err := ld.Load(ctx, ref.Serial, ref.SimDefects, what); err != nil {
				return rep, fmt.Errorf("station check: %w", err)
			}
			res, err := sequences.CheckReference(ctx, sr.Fixture, sr.Clock, ref.Reference, cfg)
			ld.Unload()
			if err != nil {
				return rep, fmt.Errorf("station check: %sreference unit %s: %w", where, ref.Serial, err)
			}
			total += res.FixtureTime
			sc.References = append(sc.References, res)
			say(CheckInfo{Serial: ref.Serial, Message: fmt.Sprintf("%sreference unit %s measured", where, ref.Serial)})
		}
		var faults []string
		sc.Ladder, faults = sequences.CombineChecks(sc.References)
		for _, f := range faults {
			sc.Faults = append(sc.Faults, where+f)
		}
		rep.References = append(rep.References, sc.References...)
		rep.Faults = append(rep.Faults, sc.Faults...)
		rep.Sites = append(rep.Sites, sc)
	}
	rep.Ladder = rep.Sites[0].Ladder
	rep.OK = len(rep.Faults) == 0
	rep.FixtureS = total.Seconds()
	if rep.OK {
		for i, sr := range sites {
			rep.Sites[i].measureOffset(sr)
		}
	}
	if !panel {
		one := rep.Sites[0]
		rep.Offset, rep.OffsetPF, rep.OffsetU = one.Offset, one.OffsetPF, one.OffsetU
		rep.Sites = nil
	}
	return rep, nil
}

// measureOffset sets the site's fixture offset from its reference units
// with a lab trip point, and its value at the variant's nominal trip on
// the site's ladder; none when no unit has one.
func (sc *SiteCheck) measureOffset(sr *Rig) {
	off, err := sequences.OffsetFromChecks(sc.References, 0, sr.CheckConfig().CalPF)
	if err != nil {
		return
	}
	sc.Offset = off
	if pf, u, err := off.At(sr.NominalWeights()); err == nil {
		sc.OffsetPF, sc.OffsetU = &pf, &u
	}
}

// SiteOffsets are a panel check's fixture offsets, site 1 first (nil
// entries where a site has none; nil for a single-unit check).
func (rep CheckReport) SiteOffsets() []*sequences.FixtureOffset {
	if rep.Sites == nil {
		return nil
	}
	out := make([]*sequences.FixtureOffset, len(rep.Sites))
	for i, sc := range rep.Sites {
		out[i] = sc.Offset
	}
	return out
}

// NominalWeights are the rung weights of a trip at the variant's nominal
// trip point on this rig's ladder (sequences.TripRungWeights, σ from the
// variant's expected spread).
func (r *Rig) NominalWeights() []float64 {
	spread := r.PlanConfig.Search.SpreadPriorPF
	if spread == 0 {
		spread = 0.6 // sequences.SearchOptions' default
	}
	return sequences.TripRungWeights(r.Plan.Levels(), len(r.Station.Ladder.RungsPF), r.Limits.Trip.Nominal, spread/(2*1.2815515655446004))
}

// OffsetFromLog puts the fixture offset of the station's last check in
// db on the rig's plan, when that check passed under this station file
// and carries one; it returns the offset (nil: none).
func OffsetFromLog(ctx context.Context, db *store.DB, r *Rig) (*sequences.FixtureOffset, error) {
	rep, err := lastPassedCheck(ctx, db, r.Station)
	if rep == nil || err != nil {
		return nil, err
	}
	r.Plan.SetOffset(rep.Offset)
	return rep.Offset, nil
}

// PanelOffsetsFromLog puts each site's fixture offset of the panel
// station's last check in db on the panel plan, when that check passed
// under this station file; it returns them (nil: none).
func PanelOffsetsFromLog(ctx context.Context, db *store.DB, r *PanelRig) ([]*sequences.FixtureOffset, error) {
	rep, err := lastPassedCheck(ctx, db, r.Station)
	if rep == nil || err != nil {
		return nil, err
	}
	offs := rep.SiteOffsets()
	if offs != nil && len(offs) != r.Sites() {
		return nil, fmt.Errorf("station check %d in the shift log has %d sites, station file %s %d", rep.CheckID, len(offs), r.Station.Source.Name, r.Sites())
	}
	return offs, r.Plan.SetOffsets(offs)
}

// lastPassedCheck is the station's last check in db when it passed under
// this station file (nil: none such).
func lastPassedCheck(ctx context.Context, db *store.DB, st *Station) (*CheckReport, error) {
	c, err := db.LastCheck(ctx, st.Name, st.Fixture)
	if errors.Is(err, store.ErrNotFound) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	if !c.OK || c.StationHash != st.Source.Hash {
		return nil, nil
	}
	var rep CheckReport
	if err := json.Unmarshal(c.Details, &rep); err != nil {
		return nil, fmt.Errorf("station check %d in the shift log: %w", c.ID, err)
	}
	rep.CheckID = c.ID
	return &rep, nil
}

// SeedFromLog prepares the rig's plan from the shift log: the fixture
// offset of the station's last passing check (OffsetFromLog), and the
// trip search's prior on σ from the variant's last passing units on this
// station (their sigma_ref_pf; each run records how many,
// prior_sigma_log_units).
func SeedFromLog(ctx context.Context, db *store.DB, r *Rig) error {
	if _, err := OffsetFromLog(ctx, db, r); err != nil {
		return err
	}
	n := r.Plan.SigmaWindow()
	if n == 0 {
		return nil
	}
	vals, err := db.RecentValues(ctx, r.Variant.Name, r.Station.Name, string(sequences.StepTripSearch), string(sequences.MeasSigmaRefPF), n)
	if err != nil {
		return err
	}
	slices.Reverse(vals)
	r.Plan.SeedSigma(vals)
	return nil
}

// StationCheck opens the station (a single-unit or a panel station) with
// its shift log at dbPath, runs the reference check, records it and closes
// the station again. A refused station is a report with OK false; the
// error then names the faults and wraps ErrNotReady.
func StationCheck(ctx context.Context, variant, station, dbPath string, o RigOptions, progress func(CheckInfo)) (rep CheckReport, st *Station, err error) {
	if IsPanelStation(station) {
		b, err := OpenPanelBench(ctx, variant, station, dbPath, o)
		if err != nil {
			return rep, nil, err
		}
		defer func() { err = errors.Join(err, b.Close(ctx)) }()
		rep, err = RunPanelCheck(ctx, b.PanelRig, b.DB, progress)
		return rep, b.Station, refusedBy(rep, err)
	}
	b, err := OpenBench(ctx, variant, station, dbPath, o)
	if err != nil {
		return rep, nil, err
	}
	defer func() { err = errors.Join(err, b.Close(ctx)) }()
	rep, err = RunCheck(ctx, b.Rig, b.DB, progress)
	return rep, b.Station, refusedBy(rep, err)
}

// refusedBy is err, or for a check that found faults the refusal.
func refusedBy(rep CheckReport, err error) error {
	if err != nil || rep.OK {
		return err
	}
	return fmt.Errorf("%w: the reference check refused station %s fixture %s: %s", ErrNotReady, rep.Station, rep.Fixture, strings.Join(rep.Faults, "; "))
}
