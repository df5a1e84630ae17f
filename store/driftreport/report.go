package driftreport

import (
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"

	"padline/store/drift"
)

// Num is a float that encodes NaN and ±Inf as JSON null.
type Num float64

// MarshalJSON writes the number, or null when it is not finite.
func (f Num) MarshalJSON() ([]byte, error) {
	v := float64(f)
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, v, 'g', -1, 64), nil
}

// Report is the whole answer; --json prints it as one object.
type Report struct {
	Verdict       string        `json:"verdict"`
	Source        string        `json:"source"`
	Variant       string        `json:"variant,omitempty"`
	Since         string        `json:"since,omitempty"`
	Until         string        `json:"until,omitempty"`
	Station       string        `json:"station,omitempty"`
	Fixture       string        `json:"fixture,omitempty"`
	Lot           string        `json:"lot,omitempty"`
	By            string        `json:"by,omitempty"`
	Chart         string        `json:"chart"`
	Baseline      int           `json:"baseline_points"`
	Limits        [2]Num        `json:"limits"`
	LimitsFrom    string        `json:"limits_from,omitempty"`
	UncertaintyPF Num           `json:"uncertainty_pf"`
	Groups        []GroupReport `json:"groups"`
	ChartFiles    []ChartFile   `json:"chart_files,omitempty"`
}

type GroupReport struct {
	Key            string         `json:"key,omitempty"`
	Verdict        *Verdict       `json:"verdict,omitempty"`
	Points         int            `json:"points"`
	First          *time.Time     `json:"first,omitempty"`
	Last           *time.Time     `json:"last,omitempty"`
	Baseline       Window         `json:"baseline"`
	Charts         []ChartSummary `json:"charts"`
	AlarmCount     int            `json:"alarm_count"`
	Alarms         []Alarm        `json:"alarms"`
	Capability     *Capability    `json:"capability,omitempty"`
	CapabilityNote string         `json:"capability_note,omitempty"`
	Runs           int64          `json:"runs,omitempty"`
	Yield          *Yield         `json:"first_pass_yield,omitempty"`
	ChartFile      string         `json:"chart_file,omitempty"`
}

type Window struct {
	FirstUnit int        `json:"first_unit"` // 1-based
	LastUnit  int        `json:"last_unit"`  // 1-based, inclusive
	Points    int        `json:"points"`
	From      *time.Time `json:"from,omitempty"`
	To        *time.Time `json:"to,omitempty"`
	Text      string     `json:"text"`
	// Kind is "approved" (a stored baseline; the unit fields then count
	// nothing), "provisional" (the first points of the selection) or
	// "given" (--baseline, --target or --sigma).
	Kind     string        `json:"kind"`
	Approved *BaselineJSON `json:"approved,omitempty"`
}

type ChartSummary struct {
	Kind   string `json:"kind"`
	Title  string `json:"title"`
	Size   int    `json:"size"`
	Points int    `json:"points"`
	Center Num    `json:"center"`
	// Lower and Upper are the limits at the last point (EWMA limits widen
	// towards their steady value; the others are constant).
	Lower  Num    `json:"lower"`
	Upper  Num    `json:"upper"`
	Target Num    `json:"target"`
	Sigma  Num    `json:"sigma"`
	Method string `json:"method"`
	Alarms int    `json:"alarms"`
}

func chartSummary(c drift.ChartSummary) ChartSummary {
	return ChartSummary{Kind: string(c.Kind), Title: c.Kind.Title(), Size: c.Size, Points: c.Points,
		Center: Num(c.Center), Lower: Num(c.Lower), Upper: Num(c.Upper),
		Target: Num(c.Target), Sigma: Num(c.Sigma), Method: c.Method, Alarms: c.Alarms}
}

type Alarm struct {
	Seq         int        `json:"seq"`
	Chart       string     `json:"chart"`
	Rule        string     `json:"rule"`
	Description string     `json:"description"`
	Unit        int        `json:"unit"`  // 1-based series index
	Point       int        `json:"point"` // 1-based chart point
	Side        int        `json:"side"`
	OnsetUnit   int        `json:"onset_unit,omitempty"`
	Note        string     `json:"note,omitempty"`
	RunID       int64      `json:"run_id,omitempty"`
	Time        *time.Time `json:"time,omitempty"`
	Serial      string     `json:"serial,omitempty"`
}

type Capability struct {
	N            int    `json:"n"`
	Low          Num    `json:"low"`
	High         Num    `json:"high"`
	Mean         Num    `json:"mean"`
	SigmaWithin  Num    `json:"sigma_within"`
	SigmaOverall Num    `json:"sigma_overall"`
	Method       string `json:"sigma_within_method"`
	Cp           Num    `json:"cp"`
	Cpk          Num    `json:"cpk"`
	Pp           Num    `json:"pp"`
	Ppk          Num    `json:"ppk"`
}

type Yield struct {
	Pass       int     `json:"first_pass"`
	Total      int     `json:"first_units"`
	Rate       Num     `json:"rate"`
	Low        Num     `json:"low"`
	High       Num     `json:"high"`
	Confidence float64 `json:"confidence"`
}

// WriteText prints the report for people.
func WriteText(w io.Writer, r Report) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
	head := r.Source
	if r.Variant != "" {
		head = r.Variant + " trip points, " + head
	}
	var sel []string
	for _, s := range [][2]string{{"since", r.Since}, {"until", r.Until}, {"station", r.Station}, {"fixture", r.Fixture}, {"lot", r.Lot}} {
		if s[1] != "" {
			sel = append(sel, s[0]+" "+s[1])
		}
	}
	if len(sel) > 0 {
		head += " (" + strings.Join(sel, ", ") + ")"
	}
	p("verdict          %s", r.Verdict)
	p("drift            %s", head)
	p("chart            %s", driftChartDesc(r.Chart))
	lim := "none"
	if !math.IsNaN(float64(r.Limits[0])) || !math.IsNaN(float64(r.Limits[1])) {
		lim = fmt.Sprintf("%s … %s", fmtNum(float64(r.Limits[0]), "-inf"), fmtNum(float64(r.Limits[1]), "+inf"))
	}
	p("test limits      %s  (%s)", lim, dashIfEmpty(r.LimitsFrom))
	for _, g := range r.Groups {
		p("")
		if g.Key != "" {
			p("── %s %s ──", r.By, g.Key)
		}
		span := ""
		if g.First != nil {
			span = fmt.Sprintf(", %s … %s", fmtTime(*g.First), fmtTime(*g.Last))
		}
		if g.Verdict != nil && len(r.Groups) > 1 {
			p("verdict          %s", g.Verdict.Text)
		}
		p("series           %d points%s", g.Points, span)
		base := g.Baseline.Text
		if g.Baseline.Kind == "approved" {
			p("baseline         %s", base)
		} else if g.Baseline.From != nil && g.Baseline.Kind == "provisional" {
			base = fmt.Sprintf("%s, %s … %s", base, fmtTime(*g.Baseline.From), fmtTime(*g.Baseline.To))
		} else if g.Baseline.From != nil {
			base = fmt.Sprintf("units %d–%d (%d points), %s … %s", g.Baseline.FirstUnit, g.Baseline.LastUnit,
				g.Baseline.Points, fmtTime(*g.Baseline.From), fmtTime(*g.Baseline.To))
		}
		if g.Baseline.Kind != "approved" {
			p("baseline         %s%s (phase I: limits from these points, applied to all)", baselinePrefix(g.Baseline.Kind), base)
		}
		p("%-16s %10s %10s %10s   %s", "chart", "centre", "lower", "upper", "target, σ from")
		for _, c := range g.Charts {
			p("%-16s %10s %10s %10s   %s", c.Kind, fmtNum(float64(c.Center), "-"), fmtNum(float64(c.Lower), "-"),
				fmtNum(float64(c.Upper), "-"), fmt.Sprintf("target %s, σ %s: %s", fmtNum(float64(c.Target), "-"), fmtNum(float64(c.Sigma), "-"), c.Method))
		}
		switch {
		case g.AlarmCount == 0:
			p("alarms           none")
		default:
			more := ""
			if len(g.Alarms) < g.AlarmCount {
				more = fmt.Sprintf(", the first %d listed (--alarms)", len(g.Alarms))
			}
			p("alarms           %d%s", g.AlarmCount, more)
			p("  %4s  %-14s  %-19s  %-12s %-8s  %s", "#", "serial", "time", "chart", "rule", "description")
			for _, al := range g.Alarms {
				when := "-"
				if al.Time != nil {
					when = fmtTime(*al.Time)
				}
				desc := al.Description
				if al.Note != "" {
					desc += "; " + al.Note
				}
				who := al.Serial
				if who == "" {
					who = fmt.Sprintf("point %d", al.Unit)
				}
				p("  %4d  %-14s  %-19s  %-12s %-8s  %s", al.Seq, who, when, al.Chart, al.Rule, desc)
			}
		}
		if c := g.Capability; c != nil {
			p("capability       n %d, mean %s, σ within %s (%s), σ overall %s", c.N, fmtNum(float64(c.Mean), "-"),
				fmtNum(float64(c.SigmaWithin), "-"), c.Method, fmtNum(float64(c.SigmaOverall), "-"))
			p("                 Cp %s  Cpk %s  Pp %s  Ppk %s", fmtIdx(c.Cp), fmtIdx(c.Cpk), fmtIdx(c.Pp), fmtIdx(c.Ppk))
		} else {
			p("capability       not computed: %s", g.CapabilityNote)
		}
		if y := g.Yield; y != nil {
			p("first-pass yield %.2f %% (%d of %d serials passed their first test), 95 %% CI %.2f … %.2f %% (Clopper–Pearson)",
				100*float64(y.Rate), y.Pass, y.Total, 100*float64(y.Low), 100*float64(y.High))
		} else if r.Variant != "" && !strings.HasPrefix(r.Source, "CSV") {
			p("first-pass yield no unit verdicts in the selection")
		}
	}
	if len(r.ChartFiles) > 0 {
		p("")
	}
	for _, f := range r.ChartFiles {
		what := map[string]string{"control": "control charts", "pareto": "fail-code Pareto", "hourly-yield": "first-pass yield by hour"}[f.Kind]
		if f.Kind == "control" {
			what += fmt.Sprintf(", %d alarms marked as %d runs", f.Alarms, f.AlarmRuns)
		}
		p("chart file       %s (%s; %d bytes)", f.Path, what, f.Bytes)
	}
}

func driftChartDesc(kind string) string {
	switch kind {
	case "watch":
		return "default watch: individuals (3σ limit) + tabular CUSUM"
	case "imr":
		return "individuals / moving range"
	case "xbar-r":
		return "X̄ / R"
	case "xbar-s":
		return "X̄ / s"
	case "ewma":
		return "EWMA"
	}
	return "tabular CUSUM"
}

func fmtNum(v float64, none string) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return none
	}
	return strconv.FormatFloat(v, 'f', 3, 64)
}

func fmtIdx(v Num) string {
	if math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
		return "-"
	}
	return strconv.FormatFloat(float64(v), 'f', 2, 64)
}

func fmtTime(t time.Time) string { return t.Local().Format("2006-01-02 15:04:05") }

// dashIfEmpty shows an empty text field as "-".
func dashIfEmpty(s string) string {
	if s == "" {
		return "-"
	}
	return s
}
