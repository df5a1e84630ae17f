package driftreport

import (
	"bufio"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strconv"

	"padline/store/drift"
)

// StudyRow is one row of the drift study as `padline drift study --json`
// prints it: the simulated run-length figures beside the reference ARL.
type StudyRow struct {
	Chart     string  `json:"chart"`
	Shift     float64 `json:"shift_sigma"`
	Runs      int     `json:"runs"`
	Censored  int     `json:"censored"`
	Mean      Num     `json:"arl"`
	SE        Num     `json:"arl_se"`
	Median    Num     `json:"median"`
	P10       Num     `json:"p10"`
	P90       Num     `json:"p90"`
	Published Num     `json:"published_arl"`
	Source    string  `json:"source,omitempty"`
}

// StudyRows converts the study's rows for JSON (non-finite numbers as null).
func StudyRows(rows []drift.StudyRow) []StudyRow {
	out := make([]StudyRow, len(rows))
	for i, r := range rows {
		out[i] = StudyRow{r.Chart, r.Shift, r.Result.Runs, r.Result.Censored, Num(r.Result.Mean), Num(r.Result.SE),
			Num(r.Result.Median), Num(r.Result.P10), Num(r.Result.P90), Num(r.Published), r.Source}
	}
	return out
}

// WriteStudy prints the study's table for people.
func WriteStudy(w io.Writer, rows []drift.StudyRow, runs int, seed uint64) {
	fmt.Fprintf(w, "zero-state run lengths, known μ and σ, %d runs per cell, seed %d\n\n", runs, seed)
	fmt.Fprintf(w, "%-44s %6s %9s %7s %7s %6s %7s %10s  %s\n", "chart set", "shift", "ARL", "±SE", "median", "p10", "p90", "reference", "source")
	for _, r := range rows {
		pub := "-"
		if !math.IsNaN(r.Published) {
			pub = strconv.FormatFloat(r.Published, 'f', 1, 64)
		}
		fmt.Fprintf(w, "%-44s %5.1fσ %9.1f %7.1f %7.0f %6.0f %7.0f %10s  %s\n", r.Chart, r.Shift, r.Result.Mean, r.Result.SE,
			r.Result.Median, r.Result.P10, r.Result.P90, pub, r.Source)
	}
}

// PrintStudy runs the drift study (runs per cell, seed) and prints it for
// people or as one JSON object.
func PrintStudy(w io.Writer, runs int, seed uint64, asJSON bool) error {
	if runs < 1 {
		return fmt.Errorf("drift study: --runs must be ≥ 1, got %d", runs)
	}
	rows, err := drift.Study(runs, seed)
	if err != nil {
		return fmt.Errorf("drift study: %w", err)
	}
	if asJSON {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(map[string]any{"runs": runs, "seed": seed, "rows": StudyRows(rows)})
	}
	bw := bufio.NewWriter(w)
	WriteStudy(bw, rows, runs, seed)
	return bw.Flush()
}
