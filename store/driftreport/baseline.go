package driftreport

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"time"

	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
	"padline/store/drift"
	"padline/store/plant"
)

// BaselineJSON is a stored baseline in --json output.
type BaselineJSON struct {
	Variant     string    `json:"variant"`
	Name        string    `json:"name"`
	Centre      float64   `json:"centre_pf"`
	Sigma       float64   `json:"sigma_pf"`
	N           int       `json:"n"`
	Method      string    `json:"method"`
	Since       time.Time `json:"since"`
	Until       time.Time `json:"until"`
	FirstSerial string    `json:"first_serial"`
	LastSerial  string    `json:"last_serial"`
	ApprovedBy  string    `json:"approved_by"`
	ApprovedAt  time.Time `json:"approved_at"`
}

// BaselineOf is b for JSON.
func BaselineOf(b store.Baseline) BaselineJSON {
	return BaselineJSON{b.Variant, b.Name, b.Centre, b.Sigma, b.N, b.Method, b.Since, b.Until, b.FirstSerial, b.LastSerial, b.ApprovedBy, b.ApprovedAt}
}

// baselineText describes the baseline a drift report used.
func baselineText(b store.Baseline) string {
	return fmt.Sprintf("approved baseline %q: centre %.3f pF, σ %.3f pF from %d passed units %s … %s (%s … %s)",
		b.Name, b.Centre, b.Sigma, b.N, b.FirstSerial, b.LastSerial, fmtTime(b.Since), fmtTime(b.Until))
}

// useApprovedBaseline makes the variant's approved baseline in the log
// read (the shift log's, or the plant store's) the charts' target and σ,
// unless --baseline, --target or --sigma was given or the series is a CSV
// file.
func useApprovedBaseline(ctx context.Context, db runLog, o *Options, rep *Report) error {
	bl, ok := db.(baselineLog)
	if !ok || o.OwnBaseline || rep.Variant == "" {
		return nil
	}
	b, err := bl.LastBaseline(ctx, rep.Variant)
	if errors.Is(err, store.ErrNotFound) {
		return nil
	}
	if err != nil {
		return err
	}
	o.approved = &b
	o.Drift.Target, o.Drift.FixTarget, o.Drift.Sigma = b.Centre, true, b.Sigma
	return nil
}

// describeBaseline says which baseline a group was charted against.
func describeBaseline(ctx context.Context, db runLog, o Options, g driftSeries, w *Window) {
	switch {
	case o.approved != nil:
		j := BaselineOf(*o.approved)
		w.Kind, w.Approved, w.Text = "approved", &j, baselineText(*o.approved)
	case o.OwnBaseline || db == nil:
		w.Kind = "given"
	default:
		w.Kind = "provisional"
		if db != nil && w.LastUnit > 0 && w.LastUnit <= len(g.runIDs) {
			a, b := w.FirstUnit-1, w.LastUnit-1
			sa := g.runOf(ctx, db, a).Serial
			sb := g.runOf(ctx, db, b).Serial
			w.Text = fmt.Sprintf("the first %d points, %s … %s", w.Points, dashIfEmpty(sa), dashIfEmpty(sb))
		}
	}
}

func baselinePrefix(kind string) string {
	if kind == "provisional" {
		return "provisional (no approved baseline of the variant; see 'padline drift baseline set'): "
	}
	return ""
}

// WriteBaseline prints a stored baseline for people.
func WriteBaseline(w io.Writer, b store.Baseline) {
	fmt.Fprintf(w, "approved baseline %q of %s: centre %.3f pF, σ %.3f pF from %d passed units %s … %s (%s … %s), approved by %s at %s\n",
		b.Name, b.Variant, b.Centre, b.Sigma, b.N, b.FirstSerial, b.LastSerial, fmtTime(b.Since), fmtTime(b.Until), dashIfEmpty(b.ApprovedBy), fmtTime(b.ApprovedAt))
}

// MinApproved is the fewest points an approved baseline may come from:
// Montgomery (Introduction to Statistical Quality Control, 6th ed., §6.4)
// advises at least 20–25 subgroups for phase I limits; the drift package's
// own studies use 50.
const MinApproved = 25

// BaselineRequest is what `padline drift baseline set` asks for.
type BaselineRequest struct {
	DB      string // the shift log's path
	Variant string
	// Since and Until bound the window (as given: 8h, 2026-11-30 06:00 …).
	Since, Until string
	// LastApproved takes, instead of Since/Until, the units judged
	// against the variant's limits version approved last (its station and
	// fixture, from its approval until now); in a log without limits
	// versions, the window of the most recently approved baseline record.
	LastApproved   bool
	Name, Approver string
}

// SetBaseline computes the centre (mean) and σ (MR̄/d2, as the
// individuals chart does) of the variant's passed units' trip points over
// the requested window of the shift log and stores them as its approved
// baseline.
func SetBaseline(ctx context.Context, r BaselineRequest, now time.Time) (store.Baseline, error) {
	fail := func(err error) (store.Baseline, error) {
		return store.Baseline{}, fmt.Errorf("drift baseline set: %w", err)
	}
	switch {
	case r.Variant == "":
		return fail(errors.New("give --variant V"))
	case r.LastApproved && (r.Since != "" || r.Until != ""):
		return fail(errors.New("give --since/--until or --last-approved, not both"))
	case !r.LastApproved && (r.Since == "" || r.Until == ""):
		return fail(errors.New("give --since T --until T (the window of in-control units to approve) or --last-approved"))
	}
	db, closeLog, err := openBaselineLog(ctx, r.DB)
	if err != nil {
		return fail(err)
	}
	defer closeLog()
	if v, _, err := session.VariantFor(ctx, db, r.Variant); err == nil {
		r.Variant = v.Name
	}
	f := store.Filter{Variant: r.Variant, Verdict: sequences.Pass}
	from := "approved baseline window"
	if r.LastApproved {
		lv, ok, err := lastApprovedLimits(ctx, db, r.Variant)
		if err != nil {
			return fail(err)
		}
		if ok {
			// The units judged against the limits approved last: on its
			// station and fixture, from its approval on.
			f.Station, f.Fixture, f.Since, f.Until = lv.Station, lv.Fixture, lv.Decided, now
			from = fmt.Sprintf("window of limits version %d (%s / %s, approved by %s at %s, until now)",
				lv.ID, lv.Station, lv.Fixture, dashIfEmpty(lv.ApprovedBy), fmtTime(lv.Decided))
		} else {
			// A log without limits versions: the window of the variant's
			// most recently approved baseline record.
			prev, err := db.LastBaseline(ctx, r.Variant)
			if errors.Is(err, store.ErrNotFound) {
				return fail(fmt.Errorf("%s has no approved limits version and no approved baseline in %s to take the window of (give --since/--until)", r.Variant, r.DB))
			}
			if err != nil {
				return fail(err)
			}
			// The stored window holds its first and last point's finish
			// times: Until is inclusive there, the filter's bound exclusive.
			f.Since, f.Until = prev.Since, prev.Until.Add(1)
			from = fmt.Sprintf("window of approved baseline %q (%s … %s)", prev.Name, fmtTime(prev.Since), fmtTime(prev.Until))
			if r.Name == "" {
				r.Name = prev.Name
			}
		}
	} else {
		if f.Since, err = store.ParseWhen(r.Since, now); err != nil {
			return fail(fmt.Errorf("--since: %w", err))
		}
		if f.Until, err = store.ParseWhen(r.Until, now); err != nil {
			return fail(fmt.Errorf("--until: %w", err))
		}
		from = fmt.Sprintf("window %s … %s", r.Since, r.Until)
	}
	if f.Driver, err = session.DriverFilter(ctx, db, false); err != nil {
		return fail(err)
	}
	pts, err := db.TripValues(ctx, f, 0)
	if err != nil {
		return fail(err)
	}
	if len(pts) < MinApproved {
		return fail(fmt.Errorf("%d passed units of %s with a trip point in the %s; an approved baseline needs at least %d",
			len(pts), r.Variant, from, MinApproved))
	}
	x := make([]float64, len(pts))
	for i, p := range pts {
		x[i] = p.TripPF
	}
	c, err := drift.IndividualsChart(x, drift.FirstN(len(x)), drift.Options{})
	if err != nil {
		return fail(err)
	}
	first, last := pts[0], pts[len(pts)-1]
	b := store.Baseline{Variant: r.Variant, Name: r.Name, Centre: c.Location.Target, Sigma: c.Location.Sigma, N: len(x),
		Method: "mean, MR̄/d2 of passed units' trip points", Since: first.Finished, Until: last.Finished,
		FirstSerial: runAt(ctx, db, r.Variant, first.RunID, first.Finished).Serial,
		LastSerial:  runAt(ctx, db, r.Variant, last.RunID, last.Finished).Serial,
		ApprovedBy:  r.Approver, ApprovedAt: now}
	if r.LastApproved {
		b.Method += ", over the " + from
	}
	if b.Name == "" {
		b.Name = first.Finished.Local().Format("2006-01-02 15:04") + " … " + last.Finished.Local().Format("2006-01-02 15:04")
	}
	if b.ID, err = db.SetBaseline(ctx, b); err != nil {
		return fail(err)
	}
	return b, nil
}

// ShowBaseline returns the variant's approved baseline from the shift log
// at path.
func ShowBaseline(ctx context.Context, path, variant string) (store.Baseline, error) {
	if variant == "" {
		return store.Baseline{}, errors.New("drift baseline show: give --variant V")
	}
	db, closeLog, err := openBaselineLog(ctx, path)
	if err != nil {
		return store.Baseline{}, fmt.Errorf("drift baseline show: %w", err)
	}
	defer closeLog()
	b, err := db.LastBaseline(ctx, variant)
	if errors.Is(err, store.ErrNotFound) {
		return b, fmt.Errorf("drift baseline show: %w (set one with 'padline drift baseline set')", err)
	}
	if err != nil {
		return b, fmt.Errorf("drift baseline show: %w", err)
	}
	return b, nil
}

// PrintBaseline prints b for people, or as JSON.
func PrintBaseline(w io.Writer, b store.Baseline, asJSON bool) error {
	if asJSON {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(BaselineOf(b))
	}
	WriteBaseline(w, b)
	return nil
}

// lastApprovedLimits is the variant's limits version approved last (on
// any station and fixture); ok is false when the log holds none.
func lastApprovedLimits(ctx context.Context, db baselineLog, variant string) (store.LimitsVersion, bool, error) {
	s, ok := db.(*store.DB)
	if !ok {
		return store.LimitsVersion{}, false, nil // the plant store keeps no limits versions
	}
	vs, err := s.LimitsVersions(ctx, "", "", variant, store.LimitsApproved)
	if err != nil {
		return store.LimitsVersion{}, false, err
	}
	var best store.LimitsVersion
	for _, v := range vs {
		if !v.Decided.IsZero() && (best.ID == 0 || !v.Decided.Before(best.Decided)) {
			best = v
		}
	}
	return best, best.ID != 0, nil
}

// openBaselineLog opens an existing shift log, never creating one, or the
// plant store when path is a postgres:// URL.
func openBaselineLog(ctx context.Context, path string) (baselineLog, func(), error) {
	if plant.IsURL(path) {
		p, err := plant.OpenMigrated(ctx, path)
		if err != nil {
			return nil, nil, err
		}
		return p, p.Close, nil
	}
	if _, err := os.Stat(path); errors.Is(err, fs.ErrNotExist) {
		return nil, nil, fmt.Errorf("no shift log at %s (give --db PATH or postgres://…, set PADLINE_DB, or --station-file)", path)
	}
	s, err := store.Open(path)
	if err != nil {
		return nil, nil, err
	}
	return s, func() { s.Close() }, nil
}
