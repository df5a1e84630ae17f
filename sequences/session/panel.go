package session

import (
	"context"
	"errors"
	"fmt"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"time"

	"padline/fixture"
	"padline/fixture/sim"
	"padline/sequences"
	"padline/sequences/timing"
	"padline/store"
)

// Panels: a station that tests every board of a panel in one fixture
// closure (README "Panels"). Its station file has a `sites:` section; each
// site is its own unit with its own serial and run.

// StationSites is a panel station's `sites:` section.
type StationSites struct {
	// Ganged: one relay driver per rung (pins.ladder) switches a
	// multi-pole relay with one calibrated capacitor per site; otherwise
	// each site has its own rung lines (sites.list[i].ladder).
	Ganged bool
	// SharedPower: one supply switch (pins.power) feeds every site;
	// otherwise each site names its own (sites.list[i].power).
	SharedPower bool
	// ScanEach: every site's label is scanned; otherwise the panel label
	// is scanned and each site's serial follows the variant's
	// panel_serial.
	ScanEach bool
	// CouplingPF is the simulated adjacent-pad coupling (driver: sim).
	CouplingPF float64
	// List holds the sites, site 1 first.
	List []StationSite
}

// StationSite is one site of a panel station.
type StationSite struct {
	Latch, Clock, Power string
	// Ladder holds the site's own rung pins (own ladders only).
	Ladder []string
	// RungsPF and StrayPF are this site's calibrated capacitors and stray
	// (on a ganged ladder: its poles' capacitors).
	RungsPF []float64
	StrayPF float64
}

// readStationSites reads the optional `sites:` section.
func readStationSites(d *doc, st *Station) *StationSites {
	if !d.section("sites", false) {
		return nil
	}
	ss := &StationSites{CouplingPF: sim.DefaultCouplingPF}
	switch l := d.str("sites.ladder", true); l {
	case "ganged":
		ss.Ganged = true
	case "own", "":
	default:
		d.fail("sites.ladder", "must be ganged or own, got %q", l)
	}
	switch p := d.str("sites.power", false); p {
	case "", "shared":
		ss.SharedPower = true
	case "per_site":
	default:
		d.fail("sites.power", "must be shared or per_site, got %q", p)
	}
	switch p := d.str("sites.serials", false); p {
	case "", "pattern":
	case "scan":
		ss.ScanEach = true
	default:
		d.fail("sites.serials", "must be pattern or scan, got %q", p)
	}
	ss.CouplingPF = d.nonNegative("sites.sim_coupling_pf", false, ss.CouplingPF)
	if ss.SharedPower && st.Pins.Power == "" {
		d.fail("pins.power", "a panel with sites.power: shared needs pins.power")
	}
	v, ok := d.lookup("sites.list")
	items, isList := v.([]any)
	if !ok || !isList || len(items) == 0 || len(items) > fixture.MaxSites {
		d.fail("sites.list", "want a list of 1 to %d sites {latch, clock, power, ladder, rungs_pf, stray_pf}, got %s", fixture.MaxSites, describeValue(v))
		return ss
	}
	used := map[string]string{}
	for _, p := range append([]string{st.Pins.Latch, st.Pins.Power, st.Pins.Clock, st.Pins.Lid, st.Pins.PassLamp, st.Pins.FailLamp}, st.Pins.Ladder...) {
		if p != "" {
			used[p] = "pins"
		}
	}
	claim := func(key, pin string) {
		if pin == "" {
			return
		}
		if other, dup := used[pin]; dup {
			d.fail(key, "pin %s is already used by %s", pin, other)
		}
		used[pin] = key
	}
	for i, it := range items {
		key := fmtIndex("sites.list", i)
		m, isMap := it.(map[string]any)
		if !isMap {
			d.fail(key, "want {latch, clock, power, ladder, rungs_pf, stray_pf}, got %s", describeValue(it))
			continue
		}
		for _, k := range slices.Sorted(mapsKeys(m)) {
			if !slices.Contains([]string{"latch", "clock", "power", "ladder", "rungs_pf", "stray_pf"}, k) {
				d.fail(key, "unknown key %s (want latch, clock, power, ladder, rungs_pf, stray_pf)", k)
			}
		}
		var site StationSite
		str := func(k string, required bool) string {
			x, present := m[k]
			s, isStr := x.(string)
			switch {
			case !present || x == nil:
				if required {
					d.fail(key, "missing key %s", k)
				}
			case !isStr || strings.TrimSpace(s) == "":
				d.fail(key+"."+k, "want a pin name, got %s", describeValue(x))
			}
			return s
		}
		site.Latch = str("latch", true)
		site.Clock = str("clock", false)
		site.Power = str("power", !ss.SharedPower)
		claim(key+".latch", site.Latch)
		claim(key+".clock", site.Clock)
		claim(key+".power", site.Power)
		if lad, present := m["ladder"]; present {
			if ss.Ganged {
				d.fail(key+".ladder", "a ganged ladder is pins.ladder; sites name their own only with sites.ladder: own")
			}
			xs, _ := lad.([]any)
			for j, x := range xs {
				s, isStr := x.(string)
				if !isStr {
					d.fail(fmtIndex(key+".ladder", j), "want a pin name, got %s", describeValue(x))
				}
				claim(fmtIndex(key+".ladder", j), s)
				site.Ladder = append(site.Ladder, s)
			}
		}
		rungs, _ := m["rungs_pf"].([]any)
		for j, x := range rungs {
			f, isNum := asNumber(x)
			if !isNum || !(f > 0) {
				d.fail(fmtIndex(key+".rungs_pf", j), "must be > 0, got %s", describeValue(x))
			} else {
				d.plausible(fmtIndex(key+".rungs_pf", j), f)
			}
			site.RungsPF = append(site.RungsPF, f)
		}
		switch {
		case len(site.RungsPF) != len(st.Ladder.RungsPF):
			d.fail(key+".rungs_pf", "has %d rungs, ladder.rungs_pf %d: enter this site's calibrated value of every rung", len(site.RungsPF), len(st.Ladder.RungsPF))
		case !ss.Ganged && len(site.Ladder) != len(site.RungsPF):
			d.fail(key+".ladder", "has %d pins for %d rungs", len(site.Ladder), len(site.RungsPF))
		}
		stray, present := m["stray_pf"]
		f, isNum := asNumber(stray)
		if !present || !isNum || f < 0 {
			d.fail(key+".stray_pf", "want this site's calibrated stray in pF (≥ 0), got %s", describeValue(stray))
		} else if f > 0 {
			d.plausible(key+".stray_pf", f)
		}
		site.StrayPF = f
		ss.List = append(ss.List, site)
	}
	return ss
}

func mapsKeys(m map[string]any) func(func(string) bool) {
	return func(yield func(string) bool) {
		for k := range m {
			if !yield(k) {
				return
			}
		}
	}
}

// DefaultPanelSerial makes a site's serial from its panel label and site
// number when the variant does not say.
const DefaultPanelSerial = "{panel}-{site:02}"

// readPanelSerial reads the variant's optional panel_serial.
func readPanelSerial(d *doc) string {
	p := d.str("panel_serial", false)
	if p == "" {
		return DefaultPanelSerial
	}
	if !strings.Contains(p, "{panel}") || !siteField.MatchString(p) {
		d.fail("panel_serial", "must hold {panel} and {site} (or {site:02}), got %q", p)
	}
	return p
}

var siteField = regexp.MustCompile(`\{site(?::0([1-9]))?\}`)

// SiteSerial expands a panel_serial pattern for one site (1-based):
// {panel} is the label, {site} the number, {site:0N} the number in N digits.
func SiteSerial(pattern, panel string, site int) string {
	out := strings.ReplaceAll(pattern, "{panel}", panel)
	return siteField.ReplaceAllStringFunc(out, func(f string) string {
		m := siteField.FindStringSubmatch(f)
		if m[1] == "" {
			return strconv.Itoa(site)
		}
		w, _ := strconv.Atoi(m[1])
		return fmt.Sprintf("%0*d", w, site)
	})
}

// PanelRig is a panel station made ready to test one variant (see Rig).
type PanelRig struct {
	Variant         *Variant
	Station         *Station
	Limits          timing.Report
	UncertaintyPF   float64
	UncertaintyFrom string
	PlanConfig      sequences.PlanConfig
	Plan            *sequences.PanelPlan
	Panel           *fixture.Panel
	Clock           fixture.Clock
	// Sim is the simulated panel (driver: sim), nil on GPIO.
	Sim *sim.Panel
	// Ladders are each site's ladder arithmetic.
	Ladders []*fixture.Ladder
}

// ErrPanelGPIO is returned for a panel station on real GPIO lines when the
// program cannot open them (no RigOptions.PanelGPIO).
var ErrPanelGPIO = errors.New("this program cannot open a panel station's GPIO lines")

// PanelGPIOOpener opens a panel station's real lines by name (see
// GPIOOpener: the program on a station passes one built on
// hostpins.OpenPanel).
type PanelGPIOOpener func(st *Station) (fixture.PanelPins, error)

// PanelModel is the simulated panel fixture a panel station describes.
func PanelModel(st *Station) sim.PanelModel {
	ss := st.Sites
	m := sim.PanelModel{Ganged: ss.Ganged, SharedPower: ss.SharedPower, CouplingPF: ss.CouplingPF}
	base := fixtureModel(st)
	for _, site := range ss.List {
		fm := base
		fm.RungsPF, fm.StrayPF = site.RungsPF, site.StrayPF
		fm.Faults = sim.FixtureFaults{}
		m.Sites = append(m.Sites, fm)
	}
	// The sim section's fixture faults are the ganged drivers' (every
	// site), or every site's own on own ladders.
	m.GangFaults = st.Sim.Faults
	return m
}

// NewPanelRig computes the limits, builds the simulated panel, the panel
// fixture and the panel plan for a station with a `sites:` section.
func NewPanelRig(v *Variant, st *Station, o RigOptions) (*PanelRig, error) {
	if st.Sites == nil {
		return nil, fmt.Errorf("station %s has no sites: section: it tests one unit per closure", st.Source.Name)
	}
	if st.Driver != DriverSim && o.PanelGPIO == nil {
		return nil, fmt.Errorf("station %s: %w", st.Source.Name, ErrPanelGPIO)
	}
	r := &PanelRig{Variant: v, Station: st}
	r.UncertaintyPF, r.UncertaintyFrom = o.guardBand(st)
	rep, err := v.StationLimits(r.UncertaintyPF)
	if err != nil {
		return nil, err
	}
	r.Limits = rep
	clocks := true
	for _, s := range st.Sites.List {
		clocks = clocks && s.Clock != ""
	}
	if r.PlanConfig, err = PlanConfig(v, rep, clocks, o.Strategy); err != nil {
		return nil, err
	}
	var fp fixture.PanelPins
	if st.Driver == DriverSim {
		if r.Sim, err = sim.NewPanel(PanelModel(st), UnitModel(v, st.Sim), st.Sim.Seed); err != nil {
			return nil, fmt.Errorf("station %s: simulated panel: %w", st.Source.Name, err)
		}
		r.Clock = r.Sim.Clock()
		pins := r.Sim.Pins()
		fp = fixture.PanelPins{Latch: pins.Latch, LatchGroup: pins.LatchGroup, Power: pins.Power,
			Lid: pins.Lid, PassLamp: pins.PassLamp, FailLamp: pins.FailLamp}
		if clocks {
			fp.Clock, fp.ClockGroup = pins.Clock, pins.ClockGroup
		}
		if st.Sites.Ganged {
			fp.Ladder, fp.LadderGroup = pins.Ladder, pins.LadderGroup
		} else {
			fp.SiteLadders = pins.SiteLadders
			for _, g := range pins.SiteLadderGroups {
				fp.SiteLadderGroups = append(fp.SiteLadderGroups, g)
			}
		}
	} else {
		if fp, err = o.PanelGPIO(st); err != nil {
			return nil, fmt.Errorf("station %s: %w", st.Source.Name, err)
		}
		r.Clock = fixture.WallClock{}
	}
	var levels [][]fixture.Level
	for i, s := range st.Sites.List {
		l, err := fixture.NewLadder(s.RungsPF, s.StrayPF)
		if err != nil {
			return nil, fmt.Errorf("station %s: site %d: %w", st.Source.Name, i+1, err)
		}
		r.Ladders = append(r.Ladders, l)
		levels = append(levels, l.Distinct())
	}
	if st.Sites.Ganged {
		levels = fixture.GangedLevels(r.Ladders)
	}
	cfg := fixture.Config{Operate: st.Ladder.Operate, Bounce: st.Ladder.Bounce, LatchDelay: LatchDelay}
	if r.Panel, err = fixture.NewPanel(fp, r.Ladders, cfg, r.Clock); err != nil {
		return nil, fmt.Errorf("station %s: panel fixture: %w", st.Source.Name, err)
	}
	if r.Plan, err = sequences.NewPanelPlan(r.PlanConfig, levels, st.Sites.Ganged); err != nil {
		_ = r.Panel.Halt()
		return nil, err
	}
	return r, nil
}

// Halt opens every rung and removes power from every site.
func (r *PanelRig) Halt() error {
	if err := r.Panel.Halt(); err != nil {
		return fmt.Errorf("halt panel fixture: %w", err)
	}
	return nil
}

// Sites returns the number of sites.
func (r *PanelRig) Sites() int { return len(r.Station.Sites.List) }

// SiteRig is site i (0-based) of the panel as a single-unit rig: its
// fixture, its calibrated ladder, the panel's clock. The station check and
// a single-unit plan run on it unchanged.
func (r *PanelRig) SiteRig(i int) (*Rig, error) {
	st := *r.Station
	site := st.Sites.List[i]
	st.Ladder.RungsPF, st.Ladder.StrayPF = site.RungsPF, site.StrayPF
	fx := r.Panel.Site(i)
	plan, err := sequences.NewPlan(r.PlanConfig, fx.Ladder().Distinct())
	if err != nil {
		return nil, err
	}
	sr := &Rig{Variant: r.Variant, Station: &st, Limits: r.Limits, UncertaintyPF: r.UncertaintyPF,
		UncertaintyFrom: r.UncertaintyFrom, PlanConfig: r.PlanConfig, Plan: plan, Fixture: fx, Clock: r.Clock}
	if r.Sim != nil {
		sr.Line = r.Sim.Site(i)
	}
	return sr, nil
}

// PanelRecorder commits a panel's runs and x-outs; *store.DB satisfies it.
type PanelRecorder interface {
	sequences.Recorder
	RecordXOut(ctx context.Context, x store.XOut) error
}

var _ PanelRecorder = (*store.DB)(nil)

// PanelOutcome is one tested panel: each site's committed run (nil for an
// x-out) and shift-log id, and the trial's details.
type PanelOutcome struct {
	Panel   string
	Serials []string
	XOut    []bool
	Runs    []*sequences.Run
	IDs     []int64
	Trial   *sequences.PanelTrial
}

// ErrPanelSerials is wrapped when a panel's serials do not fit the station
// or the variant.
var ErrPanelSerials = errors.New("panel serials refused")

// PanelSerials makes the serials of a panel: from the label and the
// variant's panel_serial, or (scanned) as given; each checked against the
// variant's serial_pattern unless its site is an x-out.
func PanelSerials(v *Variant, sites int, label string, scanned []string, xout []bool) ([]string, error) {
	out := make([]string, sites)
	for i := range out {
		if scanned != nil {
			if len(scanned) != sites {
				return nil, fmt.Errorf("%w: %d serials scanned for %d sites", ErrPanelSerials, len(scanned), sites)
			}
			out[i] = scanned[i]
		} else {
			out[i] = SiteSerial(v.PanelSerial, label, i+1)
		}
		if xout != nil && xout[i] {
			continue
		}
		if err := v.CheckSerial(out[i]); err != nil {
			return nil, fmt.Errorf("%w: site %d: %w (the variant's panel_serial is %q)", ErrPanelSerials, i+1, err, v.PanelSerial)
		}
	}
	return out, nil
}

// TestPanel tests one panel: every site not marked x-out gets its own run
// (the template's fields, the panel label and its site number) committed
// to rec before its verdict is known; each x-out is logged as not tested.
// When ctx ends mid-panel nothing is logged (sequences.ErrAborted). A
// panel-wide station fault is committed on every site tested and
// returned.
func (r *PanelRig) TestPanel(ctx context.Context, rec PanelRecorder, tmpl sequences.Run, label string,
	serials []string, xout []bool, wall func() time.Time) (*PanelOutcome, error) {
	n := r.Sites()
	if len(serials) != n || (xout != nil && len(xout) != n) {
		return nil, fmt.Errorf("%w: %d serials, %d x-out marks for %d sites", ErrPanelSerials, len(serials), len(xout), n)
	}
	oc := &PanelOutcome{Panel: label, Serials: serials, XOut: make([]bool, n), Runs: make([]*sequences.Run, n), IDs: make([]int64, n)}
	var mask uint32
	for i := range n {
		if xout != nil && xout[i] {
			oc.XOut[i] = true
			continue
		}
		mask |= 1 << i
		run := tmpl
		run.Serial, run.Panel, run.Site, run.Measurements = serials[i], label, i+1, nil
		oc.Runs[i] = &run
	}
	trial, runErr := r.Plan.Execute(ctx, r.Panel, r.Clock, oc.Runs, mask)
	if errors.Is(runErr, sequences.ErrAborted) {
		return nil, runErr
	}
	if trial == nil {
		return nil, runErr
	}
	oc.Trial = trial
	now := time.Now
	if wall != nil {
		now = wall
	}
	stamp := now()
	ctx = context.WithoutCancel(ctx) // tested to the end: record even if a stop arrives now
	for i := range n {
		if oc.XOut[i] {
			if err := rec.RecordXOut(ctx, store.XOut{Time: stamp, Panel: label, Site: i + 1, Serial: serials[i],
				Variant: tmpl.Variant, Station: tmpl.Station, Fixture: tmpl.Fixture, Operator: tmpl.Operator}); err != nil {
				return oc, fmt.Errorf("%w: x-out site %d: %w", sequences.ErrNotSaved, i+1, err)
			}
			continue
		}
		run := oc.Runs[i]
		if wall != nil {
			d := run.Finished.Sub(run.Started)
			run.Finished, run.Started = stamp, stamp.Add(-d)
		}
		id, err := rec.Record(ctx, run)
		if err != nil {
			return oc, fmt.Errorf("%w: site %d serial %s: %w", sequences.ErrNotSaved, i+1, run.Serial, err)
		}
		oc.IDs[i] = id
	}
	pass := true
	for i := range n {
		if oc.Runs[i] != nil && oc.Runs[i].Verdict != sequences.Pass {
			pass = false
		}
	}
	if err := r.Panel.Lamps(pass, !pass); err != nil && runErr == nil {
		runErr = fmt.Errorf("lamps: %w", err)
	}
	return oc, runErr
}

// mapRow is how many sites one line of the panel map holds: four cells
// fit an 80-column terminal.
const mapRow = 4

// PanelMap is the compact terminal panel map: one cell per site, in rows
// of up to four: site number, verdict mark (P pass, F fail, S station
// fault, X x-out) and the trip point or the fail code.
func PanelMap(oc *PanelOutcome) string {
	var b strings.Builder
	n := len(oc.Serials)
	for row := 0; row < n; row += mapRow {
		for i := row; i < min(row+mapRow, n); i++ {
			cell := fmt.Sprintf("%02d X  x-out", i+1)
			if r := oc.Runs[i]; r != nil {
				mark := map[sequences.Verdict]string{sequences.Pass: "P", sequences.Fail: "F", sequences.StationFault: "S"}[r.Verdict]
				what := string(r.FailCode)
				if r.Verdict == sequences.Pass {
					what = "?"
					for _, m := range r.Measurements {
						if m.Step == sequences.StepTripSearch && m.Name == sequences.MeasTripPF {
							what = strconv.FormatFloat(m.Value, 'f', 2, 64)
						}
					}
				}
				cell = fmt.Sprintf("%02d %s %6s", i+1, mark, what)
			}
			if i > row {
				b.WriteString(" │ ")
			}
			fmt.Fprintf(&b, "%-16s", cell)
		}
		b.WriteString("\n")
	}
	return b.String()
}

// ParseXOuts reads an x-out list such as "2,5" (1-based sites) for n sites.
func ParseXOuts(s string, n int) ([]bool, error) {
	out := make([]bool, n)
	if strings.TrimSpace(s) == "" {
		return out, nil
	}
	for _, f := range strings.Split(s, ",") {
		i, err := strconv.Atoi(strings.TrimSpace(f))
		if err != nil || i < 1 || i > n {
			return nil, fmt.Errorf("x-out %q: want site numbers 1..%d separated by commas", f, n)
		}
		out[i-1] = true
	}
	return out, nil
}

// wearNames are the fixture names a panel station's relay counts are kept
// under: the fixture's own for a ganged ladder (one set of relays), one per
// site ("PX-08/site 02") for own ladders.
func (r *PanelRig) wearNames() []string {
	if r.Station.Sites.Ganged {
		return []string{r.Station.Fixture}
	}
	out := make([]string, r.Sites())
	for i := range out {
		out[i] = fmt.Sprintf("%s/site %02d", r.Station.Fixture, i+1)
	}
	return out
}

// LoadRelayWear seeds the panel's relay counters from db.
func (r *PanelRig) LoadRelayWear(ctx context.Context, db *store.DB) error {
	for i, name := range r.wearNames() {
		ops, err := db.LoadRelayOps(ctx, name)
		if err != nil {
			return fmt.Errorf("relay wear of fixture %s: %w", name, err)
		}
		if len(ops) == 0 {
			continue
		}
		if len(ops) != len(r.Station.Ladder.RungsPF) {
			return fmt.Errorf("relay wear of fixture %s: the shift log counts %d rungs, station file %s has %d",
				name, len(ops), r.Station.Source.Name, len(r.Station.Ladder.RungsPF))
		}
		if err := r.Panel.Site(i).SetRelayOps(ops); err != nil {
			return err
		}
	}
	return nil
}

// SaveRelayWear stores the panel's relay counts in db. On a ganged ladder
// every site's fixture view drove the same relays (the panel through site
// 1's, a station check through each site's): their counts add up.
func (r *PanelRig) SaveRelayWear(ctx context.Context, db *store.DB) error {
	ctx = context.WithoutCancel(ctx)
	names := r.wearNames()
	for i, name := range names {
		ops := r.Panel.Site(i).RelayOps()
		if len(names) == 1 {
			for j := 1; j < r.Sites(); j++ {
				for k, n := range r.Panel.Site(j).RelayOps() {
					ops[k] += n
				}
			}
		}
		if err := db.SaveRelayOps(ctx, name, ops); err != nil {
			return fmt.Errorf("relay wear of fixture %s: %w", name, err)
		}
	}
	return nil
}
