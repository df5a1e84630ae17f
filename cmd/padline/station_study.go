package main

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

	"github.com/spf13/cobra"

	"padline/fixture/sim"
	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
)

type studyOptions struct {
	variant, station, ref string
	type1, grr            bool
	n                     int
	parts, trials, apprs  int
	serials               []string
	asJSON                bool
}

func (a *app) stationStudyCmd() *cobra.Command {
	var o studyOptions
	cmd := &cobra.Command{
		Use:   "study --variant V --station FILE (--type1 [--n 25] | --grr [--parts 10 --trials 3 --appraisers 3])",
		Short: "Type-1 or gauge R&R study of the station; stores it and the station's uncertainty U",
		Long: `study measures the station as a measurement system, with the variant's own
production plan (the same trip search every unit gets).

--type1  one reference unit (the first in the station file, or --ref) measured
         n times (n ≥ 25): bias against its registered trip, repeatability sd,
         Cg = 0.2·T/(6·s) and Cgk = (0.1·T − |bias|)/(3·s), T = the width of the
         variant's test limits (both ≥ 1.33 wanted).
--grr    gauge R&R by the AIAG average-and-range method (MSA 4th ed.): parts ×
         appraisers × trials; EV, AV, GRR, PV, TV, %GRR, ndc and the verdict
         (< 10 % acceptable, 10–30 % conditional, > 30 % not). Parts are
         different good units (--serials, or on the simulated line the first
         good serials of the variant). On the simulated line an appraiser is a
         separate round of loads: the sim has no operators, so AV measures
         load-to-load reproducibility only.

After either study the station's GUM budget is recomputed and stored: ladder
resolution δ/√12 (δ = the smallest rung), rung calibration
(cal_uncertainty_pf × √(rungs closed at the variant's nominal trip)), and
repeatability from the latest type-1 study (else the latest GRR);
U = 2·u_c. 'padline limits --station' and 'padline run' use U as the guard
band from then on.`,
		Example: `  padline station study --variant QM-205 --station demo-sim --db shift.db --type1
  padline station study --variant QM-205 --station demo-sim --db shift.db --grr --json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			if o.type1 == o.grr {
				return errors.New("station study: give exactly one of --type1 or --grr")
			}
			if o.type1 && o.n < 25 {
				return fmt.Errorf("station study: --n must be at least 25 for a type-1 study, got %d", o.n)
			}
			dbPath, err := shiftLogPath(cmd, o.station)
			if err != nil {
				return err
			}
			return a.stationStudy(cmd.Context(), o, dbPath)
		},
	}
	f := cmd.Flags()
	f.StringVar(&o.variant, "variant", "", "variant whose plan and test limits the study uses (required)")
	f.StringVar(&o.station, "station", "", "station file: a .yaml file or a built-in name (required)")
	addShiftLogFlag(f)
	f.BoolVar(&o.type1, "type1", false, "type-1 study of one reference unit")
	f.IntVar(&o.n, "n", 25, "type-1: measurements of the reference unit")
	f.StringVar(&o.ref, "ref", "", "type-1: the reference unit's serial (default: the first in the station file)")
	f.BoolVar(&o.grr, "grr", false, "gauge R&R study (AIAG average-and-range)")
	f.IntVar(&o.parts, "parts", 10, "GRR: parts (2–10)")
	f.IntVar(&o.trials, "trials", 3, "GRR: trials per part and appraiser (2–3)")
	f.IntVar(&o.apprs, "appraisers", 3, "GRR: appraisers (2–3; on the simulated line, rounds of loads)")
	f.StringSliceVar(&o.serials, "serials", nil, "GRR: the parts' serials (default on the simulated line: the first good serials)")
	f.BoolVar(&o.asJSON, "json", false, "print the study as one JSON object")
	_ = cmd.MarkFlagRequired("variant")
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

// measure runs the variant's production plan on the unit in the fixture and
// returns its trip point; nothing is recorded as a run.
func (r *rig) measure(ctx context.Context, pl *sequences.Plan, serial string) (float64, error) {
	run := &sequences.Run{Serial: serial, Variant: r.v.Name, Station: r.st.Name, Fixture: r.st.Fixture}
	t, err := pl.Execute(ctx, r.fx, r.clk, run)
	if err != nil {
		return 0, fmt.Errorf("%s: %w", serial, err)
	}
	if t.Trip == nil || !t.Trip.Found || t.Trip.Below {
		return 0, fmt.Errorf("%s: no trip point (%s %s): a study needs units that trip inside the ladder", serial, run.Verdict, run.FailCode)
	}
	return t.Trip.TripPF, nil
}

// studyReport is what a study records and prints with --json.
type studyReport struct {
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
	Uncertainty *uncertaintyReport     `json:"uncertainty"`
}

type uncertaintyReport struct {
	sequences.Budget
	Source string `json:"source"`
}

func (a *app) stationStudy(ctx context.Context, o studyOptions, dbPath string) (err error) {
	r, err := a.openRig(ctx, o.variant, o.station, dbPath, o.asJSON)
	if err != nil {
		return err
	}
	defer func() {
		if cerr := r.close(ctx); cerr != nil && err == nil {
			err = cerr
		}
	}()
	pl, err := sequences.NewPlan(r.plan, r.fx.Ladder().Distinct())
	if err != nil {
		return err
	}
	tol := r.rep.TestLimits.High - r.rep.TestLimits.Low
	rep := studyReport{Station: r.st.Name, Fixture: r.st.Fixture, Variant: r.v.Name, Time: time.Now().UTC(), TolPF: tol}
	if o.type1 {
		rep.Kind = store.StudyType1
		var ref *session.StationRef
		for i := range r.st.Trust.References {
			if o.ref == "" || r.st.Trust.References[i].Serial == o.ref {
				ref = &r.st.Trust.References[i]
				break
			}
		}
		if ref == nil {
			return fmt.Errorf("station study: station file %s registers no reference unit %q", r.st.Source.Name, o.ref)
		}
		rep.Serials = []string{ref.Serial}
		xs := make([]float64, 0, o.n)
		for i := range o.n {
			if r.line != nil || i == 0 {
				if err := r.load(ctx, ref.Serial, ref.SimDefects, "reference unit "+ref.Serial); err != nil {
					return err
				}
			}
			x, err := r.measure(ctx, pl, ref.Serial)
			if err != nil {
				return fmt.Errorf("station study: %w", err)
			}
			xs = append(xs, x)
		}
		res, err := sequences.Type1(xs, ref.TripPF, tol)
		if err != nil {
			return fmt.Errorf("station study: %w", err)
		}
		rep.Readings, rep.Type1 = xs, &res
		if r.line != nil {
			rep.Note = "simulated line: the reference unit was reloaded for every measurement"
		}
	} else {
		rep.Kind = store.StudyGRR
		serials := o.serials
		if len(serials) == 0 {
			if r.line == nil {
				return errors.New("station study: --serials is required on a gpio station (the parts' serials)")
			}
			serials = goodSerials(r.line, r.v, o.parts)
		}
		if len(serials) != o.parts {
			return fmt.Errorf("station study: %d serials for %d parts", len(serials), o.parts)
		}
		rep.Serials = serials
		data := make([][][]float64, o.apprs)
		for ap := range data {
			data[ap] = make([][]float64, o.parts)
			for tr := range o.trials {
				for p, s := range serials {
					what := fmt.Sprintf("part %d (%s) for appraiser %d, trial %d", p+1, s, ap+1, tr+1)
					if err := r.load(ctx, s, nil, what); err != nil {
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
		res, err := sequences.GaugeRR(data, tol)
		if err != nil {
			return fmt.Errorf("station study: %w", err)
		}
		rep.Readings, rep.GRR = data, &res
		if r.line != nil {
			rep.Note = "simulated line: each appraiser is a separate round of loads (the sim has no operators); every measurement is a fresh load"
		}
	}
	results, err := json.Marshal(rep)
	if err != nil {
		return err
	}
	if rep.StudyID, err = r.db.RecordStudy(ctx, store.Study{Kind: rep.Kind, Time: rep.Time, Station: r.st.Name, Fixture: r.st.Fixture, Results: results}); err != nil {
		return err
	}
	if rep.Uncertainty, err = r.saveBudget(ctx); err != nil {
		return err
	}
	if o.asJSON {
		enc := json.NewEncoder(a.stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(rep)
	}
	writeStudy(a.stdout, rep)
	return nil
}

// goodSerials returns the first n serials of the demo numbering whose
// simulated units carry no defect: the parts of a GRR study (a real study
// picks good parts spread over the process range).
func goodSerials(line *sim.Line, v *session.Variant, n int) []string {
	var out []string
	for i := 1; len(out) < n && i < 100000; i++ {
		s := demoSerial(v, i)
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
func (r *rig) budgetInput(ctx context.Context) (sequences.StationBudgetInput, string, error) {
	in := sequences.StationBudgetInput{
		StepPF: slices.Min(r.st.Ladder.RungsPF),
		CalPF:  r.st.Ladder.CalUncertaintyPF,
	}
	// Rungs closed at the level nearest the variant's nominal trip.
	best := math.Inf(1)
	for _, lv := range r.fx.Ladder().Distinct() {
		if d := math.Abs(lv.PF - r.rep.Trip.Nominal); d < best {
			best, in.ClosedRungs = d, bits.OnesCount16(lv.Pattern)
		}
	}
	source := fmt.Sprintf("station file %s (rungs, cal_uncertainty_pf %.3g pF); %d rungs closed at %s's nominal trip %.2f pF",
		r.st.Source.Name, in.CalPF, in.ClosedRungs, r.v.Name, r.rep.Trip.Nominal)
	if s, err := r.db.LastStudy(ctx, r.st.Name, r.st.Fixture, store.StudyType1); err == nil {
		var x studyReport
		if err := json.Unmarshal(s.Results, &x); err == nil && x.Type1 != nil {
			in.RepeatPF = x.Type1.SDPF
			in.RepeatSource = fmt.Sprintf("type-1 study %d (%s, n = %d)", s.ID, s.Time.Local().Format("2006-01-02 15:04"), x.Type1.N)
		}
	} else if !errors.Is(err, store.ErrNotFound) {
		return in, "", err
	}
	if in.RepeatPF == 0 {
		if s, err := r.db.LastStudy(ctx, r.st.Name, r.st.Fixture, store.StudyGRR); err == nil {
			var x studyReport
			if err := json.Unmarshal(s.Results, &x); err == nil && x.GRR != nil {
				in.RepeatPF = x.GRR.GRR
				in.RepeatSource = fmt.Sprintf("gauge R&R study %d (%s), GRR = √(EV² + AV²)", s.ID, s.Time.Local().Format("2006-01-02 15:04"))
			}
		} else if !errors.Is(err, store.ErrNotFound) {
			return in, "", err
		}
	}
	if in.RepeatPF > 0 {
		source += "; repeatability from " + in.RepeatSource
	} else {
		source += "; no study yet: repeatability not included"
	}
	return in, source, nil
}

// saveBudget computes the station's GUM budget and stores it.
func (r *rig) saveBudget(ctx context.Context) (*uncertaintyReport, error) {
	in, source, err := r.budgetInput(ctx)
	if err != nil {
		return nil, err
	}
	b := sequences.StationBudget(in)
	comps, err := json.Marshal(b.Components)
	if err != nil {
		return nil, err
	}
	if _, err := r.db.SaveUncertainty(ctx, store.Uncertainty{Time: time.Now().UTC(), Station: r.st.Name, Fixture: r.st.Fixture,
		UPF: b.U, UCPF: b.UC, Components: comps, Source: source}); err != nil {
		return nil, err
	}
	return &uncertaintyReport{Budget: b, Source: source}, nil
}

func writeStudy(w io.Writer, rep studyReport) {
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
		writeBudget(w, u.Budget, u.Source)
	}
}

func writeBudget(w io.Writer, b sequences.Budget, source string) {
	fmt.Fprintf(w, "uncertainty (GUM, JCGM 100:2008): U = %.3f pF (k = %g), u_c = %.4f pF\n", b.U, b.K, b.UC)
	for _, c := range b.Components {
		fmt.Fprintf(w, "  %-18s u = %.4f pF   %s\n", c.Name, c.U, c.Source)
	}
	fmt.Fprintf(w, "  from: %s\n", source)
}
