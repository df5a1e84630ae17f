package driftreport

import (
	"context"
	"errors"
	"fmt"
	"io"
	"padline/store"
	"time"
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

// useApprovedBaseline makes the variant's approved baseline the charts'
// target and σ, unless --baseline, --target or --sigma was given or the
// series is a CSV file.
func useApprovedBaseline(ctx context.Context, db *store.DB, o *Options, rep *Report) error {
	if db == nil || o.OwnBaseline || rep.Variant == "" {
		return nil
	}
	b, err := db.LastBaseline(ctx, rep.Variant)
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
func describeBaseline(ctx context.Context, db *store.DB, o Options, g driftSeries, w *Window) {
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
			sa := db.RunAt(ctx, g.filter.Variant, g.runIDs[a], time.Unix(0, g.times[a])).Serial
			sb := db.RunAt(ctx, g.filter.Variant, g.runIDs[b], time.Unix(0, g.times[b])).Serial
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
