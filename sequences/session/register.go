package session

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"strconv"
	"strings"

	yaml "go.yaml.in/yaml/v3"
	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"

	"padline/sequences"
)

// 'padline station register-ref': a kept good unit measured n times on this
// station, and its reference_units entry written into the station file.

// RegisterOptions say which unit to register and how often to measure it.
type RegisterOptions struct {
	Serial string
	N      int
	// Prompt tells the operator which unit to load (gpio stations).
	Prompt func(msg string)
}

// RegisterReport is the measurement and the entry it gives.
type RegisterReport struct {
	StationFile string    `json:"station_file"`
	Station     string    `json:"station"`
	Fixture     string    `json:"fixture"`
	Variant     string    `json:"variant"`
	Serial      string    `json:"serial"`
	Readings    []float64 `json:"readings_pf"`
	MeanPF      float64   `json:"mean_pf"`
	SDPF        float64   `json:"sd_pf"`
	// PredictionPF is the half-width of the 99.73 % prediction interval of
	// one more reading: t·s·√(1 + 1/n).
	PredictionPF float64 `json:"prediction_pf"`
	UPF          float64 `json:"uncertainty_pf"`
	UFrom        string  `json:"uncertainty_source"`
	TripPF       float64 `json:"trip_pf"`
	AllowedDevPF float64 `json:"allowed_dev_pf"`
	// Written says the entry was written into the station file; else YAML
	// is the entry to paste under reference_units, and WhyNot says why.
	Written bool   `json:"written"`
	YAML    string `json:"yaml"`
	WhyNot  string `json:"why_not_written,omitempty"`
}

// MinRegisterN is the fewest readings a registration takes: as a type-1
// study (VDA 5 / AIAG MSA practice of ≥ 25 readings of one part).
const MinRegisterN = 25

// MeasureReference measures the unit o.Serial o.N times with the variant's
// production plan (reloaded for every reading on the simulated line) and
// works out its entry: trip_pf is the mean; allowed_dev_pf is the larger of
// the station's U and the 99.73 % prediction interval of one further reading,
// t(0.99865, n−1)·s·√(1 + 1/n) (Montgomery & Runger, *Applied Statistics and
// Probability for Engineers*, "Prediction interval for a future
// observation"): a check's reading deviates from the mean by that much by
// chance alone, and a deviation within U cannot be told from the station's
// own uncertainty. Nothing is recorded in the shift log.
func MeasureReference(ctx context.Context, rig *Rig, o RegisterOptions) (RegisterReport, error) {
	st := rig.Station
	rep := RegisterReport{StationFile: st.Source.Name, Station: st.Name, Fixture: st.Fixture, Variant: rig.Variant.Name,
		Serial: o.Serial, UPF: rig.UncertaintyPF, UFrom: rig.UncertaintyFrom}
	if strings.TrimSpace(o.Serial) == "" {
		return rep, errors.New("station register-ref: --serial is required (the kept good unit's serial)")
	}
	if o.N < MinRegisterN {
		return rep, fmt.Errorf("station register-ref: --n must be at least %d, got %d", MinRegisterN, o.N)
	}
	b := &studyBench{Rig: rig, ld: &Loader{Rig: rig, Prompt: o.Prompt}}
	pl, err := sequences.NewPlan(rig.PlanConfig, rig.Fixture.Ladder().Distinct())
	if err != nil {
		return rep, err
	}
	for i := range o.N {
		if rig.Line != nil || i == 0 {
			if err := b.ld.Load(ctx, o.Serial, nil, "the unit to register, "+o.Serial); err != nil {
				return rep, err
			}
		}
		x, err := b.measure(ctx, pl, o.Serial)
		if err != nil {
			return rep, fmt.Errorf("station register-ref: %w", err)
		}
		rep.Readings = append(rep.Readings, x)
	}
	b.ld.Unload()
	n := float64(o.N)
	rep.MeanPF, rep.SDPF = stat.MeanStdDev(rep.Readings, nil)
	t := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: n - 1}.Quantile(0.99865)
	rep.PredictionPF = t * rep.SDPF * math.Sqrt(1+1/n)
	rep.TripPF = math.Round(rep.MeanPF*1000) / 1000
	rep.AllowedDevPF = math.Ceil(math.Max(rep.UPF, rep.PredictionPF)*100) / 100
	return rep, nil
}

// RegisterReference puts rep's entry into the station file st came from,
// keeping its comments and key order (a re-registered serial's entry is
// updated in place). The new file must parse as a station file. When the
// file cannot be written (a built-in station, no write permission), nothing
// is written and rep.YAML is the entry to paste.
func RegisterReference(st *Station, rep *RegisterReport) error {
	entry := fmt.Sprintf("{serial: %s, trip_pf: %s, allowed_dev_pf: %s}", yamlScalar(rep.Serial),
		strconv.FormatFloat(rep.TripPF, 'f', -1, 64), strconv.FormatFloat(rep.AllowedDevPF, 'f', -1, 64))
	rep.YAML = "reference_units:\n  - " + entry + "\n"
	out, err := withReference(st.Source.Raw, rep.Serial, entry)
	if err != nil {
		return fmt.Errorf("%s: %w", st.Source.Name, err)
	}
	if _, err := parseStation(newSource(st.Source.Name, out)); err != nil {
		return fmt.Errorf("station register-ref: the entry does not fit the station file: %w", err)
	}
	if strings.HasPrefix(st.Source.Name, "built-in ") {
		rep.WhyNot = st.Source.Name + " is built into padline"
		return nil
	}
	// A file nobody may write (mode 0444) is read-only even for root.
	if fi, err := os.Stat(st.Source.Name); err == nil && fi.Mode().Perm()&0o222 == 0 {
		rep.WhyNot = fmt.Sprintf("%s is read-only (mode %04o)", st.Source.Name, fi.Mode().Perm())
		return nil
	}
	f, err := os.OpenFile(st.Source.Name, os.O_WRONLY, 0)
	if errors.Is(err, fs.ErrPermission) {
		rep.WhyNot = "no permission to write " + st.Source.Name
		return nil
	}
	if err != nil {
		return err
	}
	if err := f.Truncate(0); err != nil {
		return errors.Join(err, f.Close())
	}
	if _, err := f.Write(out); err != nil {
		return errors.Join(fmt.Errorf("write %s: %w", st.Source.Name, err), f.Close())
	}
	if err := f.Close(); err != nil {
		return err
	}
	rep.Written = true
	return nil
}

// yamlScalar quotes s when YAML would not read it back as the same string.
func yamlScalar(s string) string {
	var v any
	if yaml.Unmarshal([]byte(s), &v) == nil {
		if got, ok := v.(string); ok && got == s && !strings.ContainsAny(s, ",{}[]:#") {
			return s
		}
	}
	return strconv.Quote(s)
}

// withReference returns raw with entry (one flow mapping) under the
// top-level reference_units: replacing the entry of the same serial, else
// appended; the list is created at the end of the file when absent. It edits
// the YAML node tree, so comments and order stay.
func withReference(raw []byte, serial, entry string) ([]byte, error) {
	var root yaml.Node
	if err := yaml.Unmarshal(raw, &root); err != nil {
		return nil, err
	}
	if root.Kind != yaml.DocumentNode || len(root.Content) != 1 || root.Content[0].Kind != yaml.MappingNode {
		return nil, errors.New("not a YAML mapping")
	}
	var item yaml.Node
	if err := yaml.Unmarshal([]byte(entry), &item); err != nil {
		return nil, err
	}
	newItem := item.Content[0]
	newItem.Style = yaml.FlowStyle
	top := root.Content[0]
	var list *yaml.Node
	for i := 0; i+1 < len(top.Content); i += 2 {
		if top.Content[i].Value == "reference_units" {
			list = top.Content[i+1]
		}
	}
	if list == nil {
		key := &yaml.Node{Kind: yaml.ScalarNode, Tag: "!!str", Value: "reference_units",
			HeadComment: "Reference units kept at the station (padline station register-ref)."}
		list = &yaml.Node{Kind: yaml.SequenceNode, Tag: "!!seq"}
		top.Content = append(top.Content, key, list)
	}
	if list.Kind != yaml.SequenceNode {
		if list.Tag != "!!null" {
			return nil, errors.New("reference_units: not a list")
		}
		list.Kind, list.Tag, list.Value = yaml.SequenceNode, "!!seq", ""
	}
	replaced := false
	for i, it := range list.Content {
		for j := 0; it.Kind == yaml.MappingNode && j+1 < len(it.Content); j += 2 {
			if it.Content[j].Value == "serial" && it.Content[j+1].Value == serial {
				newItem.LineComment, newItem.HeadComment = it.LineComment, it.HeadComment
				list.Content[i], replaced = newItem, true
			}
		}
	}
	if !replaced {
		list.Content = append(list.Content, newItem)
	}
	var buf bytes.Buffer
	enc := yaml.NewEncoder(&buf)
	enc.SetIndent(2)
	if err := enc.Encode(&root); err != nil {
		return nil, err
	}
	if err := enc.Close(); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

// WriteRegister prints the measurement, the entry, and where it went.
func WriteRegister(w io.Writer, r RegisterReport) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
	p("reference unit %s on station %s fixture %s (variant %s)", r.Serial, r.Station, r.Fixture, r.Variant)
	p("readings    %d: mean %.3f pF, sd %.3f pF", len(r.Readings), r.MeanPF, r.SDPF)
	p("allowed dev %.2f pF = the larger of U %.2f pF (%s) and the 99.73 %% prediction interval of one more reading ±%.3f pF",
		r.AllowedDevPF, r.UPF, r.UFrom, r.PredictionPF)
	if r.Written {
		p("written     into %s under reference_units; the station file changed, so run 'padline station check' before production", r.StationFile)
		return
	}
	p("not written (%s); paste this under reference_units in the station file:", r.WhyNot)
	fmt.Fprint(w, r.YAML)
}
