package session

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"math/bits"
	"slices"
	"strings"
	"time"

	"padline/fixture/sim"
	"padline/sequences"
	"padline/store"
)

// StudyOptions say which study RunStudy makes.
type StudyOptions struct {
	// Type1: one reference unit (Ref, else the station file's first)
	// measured N times. Otherwise a gauge R&R study of Parts parts ×
	// Appraisers appraisers × Trials trials on Serials (on the simulated
	// line, by default the first good serials of the variant).
	Type1                     bool
	N                         int
	Ref                       string
	Parts, Trials, Appraisers int
	Serials                   []string
	// Prompt tells the operator which unit to load (gpio stations).
	Prompt func(msg string)
}

// studyBench is a rig opened for a study: its shift log and its loader.
type studyBench struct {
	*Rig
	db *store.DB
	ld *Loader
}

// measure runs the variant's production plan on the unit in the fixture and
// returns its trip point; nothing is recorded as a run.
func (r *studyBench) measure(ctx context.Context, pl *sequences.Plan, serial string) (float64, error) {
	run := &sequences.Run{Serial: serial, Variant: r.Variant.Name, Station: r.Station.Name, Fixture: r.Station.Fixture}
	t, err := pl.Execute(ctx, r.Fixture, r.Clock, run)
	if err != nil {
		return 0, fmt.Errorf("%s: %w", serial, err)
	}
	if t.Trip == nil || !t.Trip.Found || t.Trip.Below {
		return 0, fmt.Errorf("%s: no trip point (%s %s): a study needs units that trip inside the ladder", serial, run.Verdict, run.FailCode)
	}
	return t.Trip.TripPF, nil
}

// StudyReport is what a study records and prints with --json.
type StudyReport struct {
	Kind        string                 `json:"kind"`
	Station     string                 `json:"station"`
	Fixture     string                 `json:"fixture"`
	Variant     string                 `json:"variant"`
	Time        time.Time              `json:"time"`
	TolPF       float64                `json:"tolerance_pf"`
	Note        string                 `json:"note,omitempty"`
	Serials     []string               `json:"serials"`
	Readings    any                    `json:"readings"`
	Type1       *sequences.Type1Result `json:"type1,omitempty"`
	GRR         *sequences.GRRResult   `json:"grr,omitempty"`
	StudyID     int64                  `json:"study_id"`
	Uncertainty *UncertaintyReport     `json:"uncertainty"`
	// Limits is the limits version the new U gives (pending when it
	// changed the limits).
	Limits *store.LimitsVersion `json:"limits_version,omitempty"`
}

// UncertaintyReport is the station's GUM budget and where its inputs came from.
type UncertaintyReport struct {
	sequences.Budget
	Source string `json:"source"`
}

// RunStudy makes a type-1 or gauge R&R study on the rig with the
// variant's production plan (the trip search every unit gets), records it
// in the shift log, then recomputes and stores the station's GUM budget:
// 'padline limits --station' and 'padline run' take its U as their guard
// band from then on.
func RunStudy(ctx context.Context, rig *Rig, db *store.DB, o StudyOptions) (StudyReport, error) {
	r := &studyBench{Rig: rig, db: db, ld: &Loader{Rig: rig, Prompt: o.Prompt}}
	tol := r.Limits.TestLimits.High - r.Limits.TestLimits.Low
	rep := StudyReport{Station: r.Station.Name, Fixture: r.Station.Fixture, Variant: r.Variant.Name, Time: time.Now().UTC(), TolPF: tol}
	pl, err := sequences.NewPlan(r.PlanConfig, r.Fixture.Ladder().Distinct())
	if err != nil {
		return rep, err
	}
	if o.Type1 {
		err = r.type1(ctx, pl, o, &rep)
	} else {
		err = r.grr(ctx, pl, o, &rep)
	}
	if err != nil {
		return rep, err
	}
	results, err := json.Marshal(rep)
	if err != nil {
		return rep, err
	}
	if rep.StudyID, err = db.RecordStudy(ctx, store.Study{Kind: rep.Kind, Time: rep.Time, Station: r.Station.Name, Fixture: r.Station.Fixture, Results: results}); err != nil {
		return rep, err
	}
	if rep.Uncertainty, err = r.saveBudget(ctx); err != nil {
		return rep, err
	}
	u, from, err := Uncertainty(ctx, db.Path(), r.Station)
	if err != nil {
		return rep, err
	}
	lv, err := SyncStudyLimits(ctx, db, rig, u, from, time.Now())
	rep.Limits = &lv
	return rep, err
}

// type1 measures one reference unit o.N times.
func (r *studyBench) type1(ctx context.Context, pl *sequences.Plan, o StudyOptions, rep *StudyReport) error {
	rep.Kind = store.StudyType1
	var ref *StationRef
	for i := range r.Station.Trust.References {
		if o.Ref == "" || r.Station.Trust.References[i].Serial == o.Ref {
			ref = &r.Station.Trust.References[i]
			break
		}
	}
	if ref == nil {
		return fmt.Errorf("station study: station file %s registers no reference unit %q", r.Station.Source.Name, o.Ref)
	}
	rep.Serials = []string{ref.Serial}
	xs := make([]float64, 0, o.N)
	for i := range o.N {
		if r.Line != nil || i == 0 {
			if err := r.ld.Load(ctx, ref.Serial, ref.SimDefects, "reference unit "+ref.Serial); err != nil {
				return err
			}
		}
		x, err := r.measure(ctx, pl, ref.Serial)
		if err != nil {
			return fmt.Errorf("station study: %w", err)
		}
		xs = append(xs, x)
	}
	res, err := sequences.Type1(xs, ref.TripPF, rep.TolPF)
	if err != nil {
		return fmt.Errorf("station study: %w", err)
	}
	rep.Readings, rep.Type1 = xs, &res
	if r.Line != nil {
		rep.Note = "simulated line: the reference unit was reloaded for every measurement"
	}
	return nil
}

// grr measures o.Parts parts, o.Trials times for each of o.Appraisers.
func (r *studyBench) grr(ctx context.Context, pl *sequences.Plan, o StudyOptions, rep *StudyReport) error {
	rep.Kind = store.StudyGRR
	serials := o.Serials
	if len(serials) == 0 {
		if r.Line == nil {
			return errors.New("station study: --serials is required on a gpio station (the parts' serials)")
		}
		serials = goodSerials(r.Line, r.Variant, o.Parts)
	}
	if len(serials) != o.Parts {
		return fmt.Errorf("station study: %d serials for %d parts", len(serials), o.Parts)
	}
	rep.Serials = serials
	data := make([][][]float64, o.Appraisers)
	for ap := range data {
		data[ap] = make([][]float64, o.Parts)
		for tr := range o.Trials {
			for p, s := range serials {
				what := fmt.Sprintf("part %d (%s) for appraiser %d, trial %d", p+1, s, ap+1, tr+1)
				if err := r.ld.Load(ctx, s, nil, what); err != nil {
					return err
				}
				x, err := r.measure(ctx, pl, s)
				if err != nil {
					return fmt.Errorf("station study: %w", err)
				}
				data[ap][p] = append(data[ap][p], x)
			}
		}
	}
	res, err := sequences.GaugeRR(data, rep.TolPF)
	if err != nil {
		return fmt.Errorf("station study: %w", err)
	}
	rep.Readings, rep.GRR = data, &res
	if r.Line != nil {
		rep.Note = "simulated line: each appraiser is a separate round of loads (the sim has no operators); every measurement is a fresh load"
	}
	return nil
}

// goodSerials returns the first n serials of the demo numbering whose
// simulated units carry no defect: the parts of a GRR study (a real study
// picks good parts spread over the process range).
func goodSerials(line *sim.Line, v *Variant, n int) []string {
	var out []string
	for i := 1; len(out) < n && i < 100000; i++ {
		s := DemoSerial(v, i)
		if v.CheckSerial(s) != nil {
			continue
		}
		if len(line.Draw(s).Truth().Defects) == 0 {
			out = append(out, s)
		}
	}
	return out
}

// budgetInput builds the station's GUM inputs from the station file, the
// variant and the latest studies in the log.
func (r *studyBench) budgetInput(ctx context.Context) (sequences.StationBudgetInput, string, error) {
	in := sequences.StationBudgetInput{
		StepPF: slices.Min(r.Station.Ladder.RungsPF),
		CalPF:  r.Station.Ladder.CalUncertaintyPF,
	}
	// Rungs closed at the level nearest the variant's nominal trip.
	best := math.Inf(1)
	for _, lv := range r.Fixture.Ladder().Distinct() {
		if d := math.Abs(lv.PF - r.Limits.Trip.Nominal); d < best {
			best, in.ClosedRungs = d, bits.OnesCount16(lv.Pattern)
		}
	}
	source := fmt.Sprintf("station file %s (rungs, cal_uncertainty_pf %.3g pF); %d rungs closed at %s's nominal trip %.2f pF",
		r.Station.Source.Name, in.CalPF, in.ClosedRungs, r.Variant.Name, r.Limits.Trip.Nominal)
	if s, err := r.db.LastStudy(ctx, r.Station.Name, r.Station.Fixture, store.StudyType1); err == nil {
		var x StudyReport
		if err := json.Unmarshal(s.Results, &x); err == nil && x.Type1 != nil {
			in.RepeatPF = x.Type1.SDPF
			in.RepeatSource = fmt.Sprintf("type-1 study %d (%s, n = %d)", s.ID, s.Time.Local().Format("2006-01-02 15:04"), x.Type1.N)
		}
	} else if !errors.Is(err, store.ErrNotFound) {
		return in, "", err
	}
	if in.RepeatPF == 0 {
		if s, err := r.db.LastStudy(ctx, r.Station.Name, r.Station.Fixture, store.StudyGRR); err == nil {
			var x StudyReport
			if err := json.Unmarshal(s.Results, &x); err == nil && x.GRR != nil {
				in.RepeatPF = x.GRR.GRR
				in.RepeatSource = fmt.Sprintf("gauge R&R study %d (%s), GRR = √(EV² + AV²)", s.ID, s.Time.Local().Format("2006-01-02 15:04"))
			}
		} else if !errors.Is(err, store.ErrNotFound) {
			return in, "", err
		}
	}
	if c, err := r.db.LastCheck(ctx, r.Station.Name, r.Station.Fixture); err == nil && c.OK && c.StationHash == r.Station.Source.Hash {
		var rep CheckReport
		if err := json.Unmarshal(c.Details, &rep); err == nil && rep.Offset != nil {
			if _, u, err := rep.Offset.At(r.NominalWeights()); err == nil && u > 0 {
				in.OffsetUPF = u
				in.OffsetSource = fmt.Sprintf("reference check %d (%s): %d reference units with lab trip points", c.ID, c.Time.Local().Format("2006-01-02 15:04"), len(rep.Offset.Refs))
				source += "; fixture offset from " + in.OffsetSource
			}
		}
	} else if err != nil && !errors.Is(err, store.ErrNotFound) {
		return in, "", err
	}
	if in.RepeatPF > 0 {
		source += "; repeatability from " + in.RepeatSource
	} else {
		source += "; no study yet: repeatability not included"
	}
	return in, source, nil
}

// saveBudget computes the station's GUM budget and stores it.
func (r *studyBench) saveBudget(ctx context.Context) (*UncertaintyReport, error) {
	in, source, err := r.budgetInput(ctx)
	if err != nil {
		return nil, err
	}
	b := sequences.StationBudget(in)
	comps, err := json.Marshal(b.Components)
	if err != nil {
		return nil, err
	}
	if _, err := r.db.SaveUncertainty(ctx, store.Uncertainty{Time: time.Now().UTC(), Station: r.Station.Name, Fixture: r.Station.Fixture,
		UPF: b.U, UCPF: b.UC, Components: comps, Source: source}); err != nil {
		return nil, err
	}
	return &UncertaintyReport{Budget: b, Source: source}, nil
}

// WriteStudy prints a study and the budget it left, for people.
func WriteStudy(w io.Writer, rep StudyReport) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
	switch {
	case rep.Type1 != nil:
		t := rep.Type1
		p("type-1 study %d  %s / fixture %s, reference unit %s, %s plan", rep.StudyID, rep.Station, rep.Fixture, rep.Serials[0], rep.Variant)
		p("  n %d   reference %.3f pF   mean %.3f pF   bias %+.3f pF   repeatability sd %.4f pF", t.N, t.RefPF, t.MeanPF, t.BiasPF, t.SDPF)
		p("  T (test limit width) %.2f pF   Cg %.2f   Cgk %.2f   (≥ %.2f wanted: %s)", t.TolPF, t.Cg, t.Cgk, sequences.Type1MinIndex, map[bool]string{true: "capable", false: "NOT capable"}[t.Capable])
	case rep.GRR != nil:
		g := rep.GRR
		p("gauge R&R study %d  %s / fixture %s, %s plan: %d parts × %d appraisers × %d trials (AIAG average-and-range, MSA 4th ed.)",
			rep.StudyID, rep.Station, rep.Fixture, rep.Variant, g.Parts, g.Appraisers, g.Trials)
		p("  parts %s", strings.Join(rep.Serials, " "))
		p("  R̿ %.4f   X̄diff %.4f   Rp %.3f pF", g.RBarBar, g.XDiff, g.RP)
		p("  EV  %.4f pF  %6.2f %%    (repeatability)", g.EV, g.PctEV)
		p("  AV  %.4f pF  %6.2f %%    (reproducibility)", g.AV, g.PctAV)
		p("  GRR %.4f pF  %6.2f %%    %.2f %% of tolerance %.2f pF", g.GRR, g.PctGRR, g.PctTol, rep.TolPF)
		p("  PV  %.4f pF  %6.2f %%", g.PV, g.PctPV)
		p("  TV  %.4f pF", g.TV)
		p("  ndc %d (≥ 5 wanted)   verdict: %s", g.NDC, g.Verdict)
	}
	if rep.Note != "" {
		p("  note: %s", rep.Note)
	}
	if u := rep.Uncertainty; u != nil {
		p("")
		WriteBudget(w, u.Budget, u.Source)
	}
	if lv := rep.Limits; lv != nil {
		p("")
		p("limits version %d: %s, %.2f … %.2f pF (%s)", lv.ID, lv.Status, lv.LowPF, lv.HighPF, lv.Cause)
		if lv.Status == store.LimitsPending {
			p("  'padline run' refuses until it is approved: padline limits approve %d --by NAME --why TEXT (with this --db)", lv.ID)
		}
	}
}

// WriteBudget prints a GUM budget with its components and sources.
func WriteBudget(w io.Writer, b sequences.Budget, source string) {
	fmt.Fprintf(w, "uncertainty (GUM, JCGM 100:2008): U = %.3f pF (k = %g), u_c = %.4f pF\n", b.U, b.K, b.UC)
	for _, c := range b.Components {
		fmt.Fprintf(w, "  %-18s u = %.4f pF   %s\n", c.Name, c.U, c.Source)
	}
	fmt.Fprintf(w, "  from: %s\n", source)
}
