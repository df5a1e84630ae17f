package demo

import (
	"context"
	"errors"
	"fmt"
	"io"
	"maps"
	"math"
	"slices"
	"strings"
	"time"

	"padline/fixture/sim"
	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
)

// demoPanelStation is the station the panel demo runs on: the built-in
// demo-panel for 8 sites; for another count the same station with that
// many sites, each calibrated like the simulator's demo panel (invented
// demo data).
func demoPanelStation(sites int, seed uint64) (*session.Station, error) {
	st, err := session.LoadStation("demo-panel")
	if err != nil {
		return nil, err
	}
	if sites != len(st.Sites.List) {
		ss := *st.Sites
		ss.List = nil
		for i, fm := range sim.DefaultPanelModel(sites).Sites {
			ss.List = append(ss.List, session.StationSite{Latch: fmt.Sprintf("SITE%02d_LATCH", i+1),
				Clock: fmt.Sprintf("SITE%02d_CLOCK", i+1), RungsPF: fm.RungsPF, StrayPF: fm.StrayPF})
		}
		st.Sites = &ss
	}
	st.Sim.Seed = seed
	return st, nil
}

// Site is one site's result in the panel demo, beside its truth.
type Site struct {
	Panel      string   `json:"panel"`
	Site       int      `json:"site"`
	Serial     string   `json:"serial"`
	Verdict    string   `json:"verdict"`
	FailCode   string   `json:"fail_code"`
	TripPF     *float64 `json:"trip_pf"`
	TrueTripPF *float64 `json:"true_trip_in_panel_pf"`
	Defects    []string `json:"defects"`
}

// PanelSummary is the panel demo's summary.
type PanelSummary struct {
	Summary         bool                        `json:"summary"`
	Sites           int                         `json:"sites"`
	Ganged          bool                        `json:"ganged"`
	Panels          int                         `json:"panels"`
	Units           int                         `json:"units"`
	Pass            int                         `json:"pass"`
	Fail            int                         `json:"fail"`
	StationFault    int                         `json:"station_fault"`
	FixtureMSPanel  float64                     `json:"fixture_ms_per_panel"`
	FixtureMSSingle float64                     `json:"fixture_ms_per_single_unit"`
	RatioToSingle   float64                     `json:"panel_to_single_unit_ratio"`
	RMSPerSitePF    []float64                   `json:"trip_rms_error_per_site_pf"`
	RMSPF           float64                     `json:"trip_rms_error_pf"`
	RMSSinglePF     float64                     `json:"single_unit_trip_rms_error_pf"`
	CouplingPF      float64                     `json:"coupling_pf"`
	DefectOutcomes  []map[string]map[string]int `json:"defect_outcomes_per_site"`
	CPUPerSiteMS    float64                     `json:"cpu_ms_per_site"`
}

// PanelResult is a finished panel demo.
type PanelResult struct {
	Variant *session.Variant
	Station *session.Station
	Limits  sequences.Limits
	DBPath  string
	Kept    bool // false: DBPath was a temporary log, removed by now
	Sites   []Site
	Summary PanelSummary
}

// RunPanel is 'padline demo --panel N': a simulated shift of panels, one
// run per site in the shift log, with the same serials tested alone on the
// single-unit demo station for comparison.
func RunPanel(ctx context.Context, o Options) (*PanelResult, error) {
	if o.Compare || o.Drift.At != 0 || o.Drift.RampPF != 0 || o.Station != "demo-sim" {
		return nil, errors.New("demo: --panel runs on the built-in demo panel station; it takes --units, --seed, --db, --search, --own-ladders and --json")
	}
	if o.Panel < 2 || o.Panel > sim.MaxSites {
		return nil, fmt.Errorf("demo: --panel %d: want 2 to %d sites", o.Panel, sim.MaxSites)
	}
	v, err := session.LoadVariant(o.Variant)
	if err != nil {
		return nil, err
	}
	st, err := demoPanelStation(o.Panel, o.Seed)
	if err != nil {
		return nil, err
	}
	if o.OwnLadders {
		st.Sites.Ganged = false
		for i := range st.Sites.List {
			for r := range st.Sites.List[i].RungsPF {
				st.Sites.List[i].Ladder = append(st.Sites.List[i].Ladder, fmt.Sprintf("SITE%02d_RUNG%d", i+1, r))
			}
		}
	}
	u, uFrom := session.StatedUncertainty(st)
	r, err := session.NewPanelRig(v, st, session.RigOptions{UncertaintyPF: u, UncertaintyFrom: uFrom, Strategy: o.Search})
	if err != nil {
		return nil, err
	}
	defer r.Halt()
	res := &PanelResult{Variant: v, Station: st, Limits: r.PlanConfig.Limits, Kept: o.DB != ""}
	var remove func()
	if res.DBPath, remove, err = shiftLogPath(o.DB); err != nil {
		return nil, err
	}
	defer remove()
	panels, fixture, cpu, err := res.panels(ctx, r, o)
	if err != nil {
		return nil, err
	}
	single, singleRMS, err := demoSingleBaseline(ctx, v, o, res.Sites)
	if err != nil {
		return nil, err
	}
	res.Summary = summarisePanel(res.Sites, r.Sites(), panels, fixture, single, singleRMS, cpu)
	res.Summary.Ganged, res.Summary.CouplingPF = st.Sites.Ganged, st.Sites.CouplingPF
	return res, nil
}

// panels tests the shift's panels on r, logging one run per site.
func (res *PanelResult) panels(ctx context.Context, r *session.PanelRig, o Options) (panels int, fixture, cpu time.Duration, err error) {
	v, st := res.Variant, res.Station
	db, err := store.Open(res.DBPath)
	if err != nil {
		return 0, 0, 0, err
	}
	defer db.Close()
	hash, err := db.PutVariant(ctx, v.Name, v.Source.Raw)
	if err != nil {
		return 0, 0, 0, err
	}
	tmpl := sequences.Run{Variant: v.Name, ConfigHash: hash, Station: st.Name, Fixture: st.Fixture,
		Operator: "demo", Lot: "DEMO-" + time.Now().UTC().Format("20060102"), Software: o.Software,
		Driver: string(st.Driver)}
	n := r.Sites()
	panels = max(1, (o.Units+n-1)/n)
	var prog Progress = noProgress{}
	if o.Progress != nil {
		prog = o.Progress("testing panels", panels)
	}
	defer prog.Done()
	c0 := cpuTime()
	for p := range panels {
		label := fmt.Sprintf("%s-%04d", strings.ReplaceAll(v.Name, "-", ""), p+1)
		serials, err := session.PanelSerials(v, n, label, nil, nil)
		if err != nil {
			return 0, 0, 0, fmt.Errorf("demo: %w", err)
		}
		units, err := r.Sim.Load(serials)
		if err != nil {
			return 0, 0, 0, err
		}
		truth := make([]float64, n)
		for i := range truth {
			truth[i] = r.Sim.TripInPanelPF(i)
		}
		oc, err := r.TestPanel(ctx, db, tmpl, label, serials, nil, time.Now)
		r.Sim.Unload()
		if oc == nil {
			return 0, 0, 0, err
		}
		fixture += oc.Runs[0].Finished.Sub(oc.Runs[0].Started)
		for i, run := range oc.Runs {
			ds := Site{Panel: label, Site: i + 1, Serial: run.Serial, Verdict: string(run.Verdict),
				FailCode: string(run.FailCode), Defects: units[i].Truth().Defects}
			if ds.Defects == nil {
				ds.Defects = []string{}
			}
			if !math.IsNaN(truth[i]) {
				ds.TrueTripPF = ptr(truth[i])
			}
			if tr := oc.Trial.Trips[i]; tr != nil && tr.Found && !tr.Below {
				ds.TripPF = ptr(tr.TripPF)
			}
			res.Sites = append(res.Sites, ds)
		}
		prog.Step()
	}
	return panels, fixture, cpuTime() - c0, nil
}

// demoSingleBaseline tests the same serials one at a time on the built-in
// single-unit demo station (at most 200 of them, good units and defective
// alike) and returns the mean fixture time per unit and the trip RMS error
// of its good units.
func demoSingleBaseline(ctx context.Context, v *session.Variant, o Options, sites []Site) (float64, float64, error) {
	st, err := session.LoadStation("demo-sim")
	if err != nil {
		return 0, 0, err
	}
	st.Sim.Seed = o.Seed
	u, uFrom := session.StatedUncertainty(st)
	r, err := session.NewRig(v, st, session.RigOptions{UncertaintyPF: u, UncertaintyFrom: uFrom, Strategy: o.Search})
	if err != nil {
		return 0, 0, err
	}
	defer r.Halt()
	var total time.Duration
	var sq float64
	var n, good int
	for _, s := range sites[:min(len(sites), 200)] {
		unit := r.Line.Load(s.Serial)
		run := &sequences.Run{Serial: s.Serial}
		t, err := r.Plan.Execute(ctx, r.Fixture, r.Clock, run)
		r.Line.Unload()
		if err != nil && t == nil {
			return 0, 0, err
		}
		total += run.Finished.Sub(run.Started)
		n++
		tr := unit.Truth()
		if len(tr.Defects) == 0 && tr.Trip == sim.TripsAt && t.Trip != nil && t.Trip.Found && !t.Trip.Below {
			d := t.Trip.TripPF - tr.TripPF
			sq += d * d
			good++
		}
	}
	return ms(total) / float64(n), math.Sqrt(sq / float64(max(good, 1))), nil
}

func summarisePanel(sites []Site, n, panels int, fixture time.Duration, single, singleRMS float64, cpu time.Duration) PanelSummary {
	s := PanelSummary{Summary: true, Sites: n, Panels: panels, Units: len(sites),
		FixtureMSPanel: ms(fixture) / float64(panels), FixtureMSSingle: single, RMSSinglePF: singleRMS,
		RMSPerSitePF: make([]float64, n), DefectOutcomes: make([]map[string]map[string]int, n),
		CPUPerSiteMS: ms(cpu) / float64(len(sites))}
	s.RatioToSingle = s.FixtureMSPanel / single
	sq := make([]float64, n)
	cnt := make([]int, n)
	var all float64
	var allN int
	for _, d := range sites {
		i := d.Site - 1
		switch d.Verdict {
		case "pass":
			s.Pass++
		case "fail":
			s.Fail++
		default:
			s.StationFault++
		}
		outcome := d.FailCode
		if outcome == "" {
			outcome = "pass"
		}
		for _, def := range d.Defects {
			if s.DefectOutcomes[i] == nil {
				s.DefectOutcomes[i] = map[string]map[string]int{}
			}
			if s.DefectOutcomes[i][def] == nil {
				s.DefectOutcomes[i][def] = map[string]int{}
			}
			s.DefectOutcomes[i][def][outcome]++
		}
		if len(d.Defects) == 0 && d.TripPF != nil && d.TrueTripPF != nil {
			e := *d.TripPF - *d.TrueTripPF
			sq[i] += e * e
			cnt[i]++
			all += e * e
			allN++
		}
	}
	for i := range sq {
		s.RMSPerSitePF[i] = math.NaN()
		if cnt[i] > 0 {
			s.RMSPerSitePF[i] = math.Sqrt(sq[i] / float64(cnt[i]))
		}
	}
	if allN > 0 {
		s.RMSPF = math.Sqrt(all / float64(allN))
	}
	return s
}

// WritePanelText prints the panel demo's summary for people.
func WritePanelText(w io.Writer, res *PanelResult) {
	v, st, s, dbPath := res.Variant, res.Station, res.Summary, res.DBPath
	ladder := "ganged ladder (one pattern on every site)"
	if !s.Ganged {
		ladder = "own ladders (sites search concurrently)"
	}
	fmt.Fprintf(w, "simulated panels  %s on %s/%s: %d panels of %d sites, %s\n", v.Name, st.Name, st.Fixture, s.Panels, s.Sites, ladder)
	fmt.Fprintf(w, "simulator         noise %.1f mV at 5 V, sample jitter %.1f ns, rung calibration σ %.2f pF per site, adjacent pads coupled through %.2f pF\n",
		st.Sim.NoiseMVAt5V, st.Sim.JitterNs, st.Sim.RungErrSDPF, s.CouplingPF)
	lim := res.Limits
	fmt.Fprintf(w, "test limits       trip %.2f … %.2f pF, clock %.0f … %.0f Hz\n\n", lim.TripLowPF, lim.TripHighPF, lim.ClockLowHz, lim.ClockHighHz)
	fmt.Fprintf(w, "sites             %d tested: %d pass, %d fail, %d station-fault\n", s.Units, s.Pass, s.Fail, s.StationFault)
	fmt.Fprintf(w, "fixture time      %.1f ms per panel = %.1f ms per site; one unit alone %.1f ms: the panel takes %.2f× one unit (%.1f× faster than %d units in a row)\n",
		s.FixtureMSPanel, s.FixtureMSPanel/float64(s.Sites), s.FixtureMSSingle, s.RatioToSingle,
		float64(s.Sites)*s.FixtureMSSingle/s.FixtureMSPanel, s.Sites)
	fmt.Fprintf(w, "trip accuracy     RMS error on good units against the simulator's truth at each site (the board's own trip point less its\n")
	fmt.Fprintf(w, "                  neighbours' coupling): %.3f pF; the same units tested alone on the demo station: %.3f pF\n", s.RMSPF, s.RMSSinglePF)
	fmt.Fprintln(w, "\nsite  stray pF  trip RMS pF  injected defect → ended as")
	for i := range s.Sites {
		var parts []string
		for _, d := range slices.Sorted(maps.Keys(s.DefectOutcomes[i])) {
			for _, oc := range slices.Sorted(maps.Keys(s.DefectOutcomes[i][d])) {
				parts = append(parts, fmt.Sprintf("%s → %s ×%d", d, oc, s.DefectOutcomes[i][d][oc]))
			}
		}
		if len(parts) == 0 {
			parts = []string{"—"}
		}
		fmt.Fprintf(w, "  %02d  %8.2f  %11.3f  %s\n", i+1, st.Sites.List[i].StrayPF, s.RMSPerSitePF[i], strings.Join(parts, ", "))
	}
	fmt.Fprintf(w, "\ncomputer time     %.3f ms CPU per site\n", s.CPUPerSiteMS)
	if res.Kept {
		fmt.Fprintf(w, "shift log         %s (see 'padline history --db %s --variant %s' and 'padline drift --db %s --variant %s --by site')\n",
			dbPath, dbPath, v.Name, dbPath, v.Name)
	}
}
