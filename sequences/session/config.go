package session

import (
	"bytes"
	"crypto/sha256"
	"embed"
	"encoding/hex"
	"fmt"
	"io/fs"
	"math"
	"os"
	"path"
	"path/filepath"
	"slices"
	"sort"
	"strconv"
	"strings"
	"unicode"

	"github.com/spf13/viper"

	"padline/sequences/timing"
)

// builtin holds the embedded default variants and stations: byte-identical
// copies of testdata/variants and testdata/stations (a test keeps them so).
//
//go:embed defaults/variants/*.yaml defaults/stations/*.yaml
var builtin embed.FS

// ConfigError is a one-line problem in a config file, naming file and key.
type ConfigError struct {
	File, Key, Msg string
}

func (e *ConfigError) Error() string {
	if e.Key == "" {
		return e.File + ": " + escapeControls(e.Msg)
	}
	return e.File + ": " + escapeControls(e.Key) + ": " + escapeControls(e.Msg)
}

// escapeControls writes each control character of s (but tab) as its Go
// escape and each invalid byte as U+FFFD (as range reads it), so a config
// error stays one printable line: a YAML parser's message can quote the
// file's own bytes (a "\0" in a quoted scalar is a NUL), which must not
// reach the terminal or the shift log raw.
func escapeControls(s string) string {
	var b strings.Builder
	for _, r := range s {
		if unicode.IsControl(r) && r != '\t' {
			q := strconv.QuoteRune(r)
			b.WriteString(q[1 : len(q)-1])
			continue
		}
		b.WriteRune(r)
	}
	return b.String()
}

// Source is the exact bytes of one config file and where they came from.
type Source struct {
	// Name is the file path as given, or "built-in NAME".
	Name string
	// Raw is the file's exact bytes (the snapshot the shift log keeps).
	Raw []byte
	// Hash is the hex sha256 of Raw.
	Hash string
}

// openConfig resolves ref the way --variant and --station do: a path when the
// file exists or ref ends in .yaml/.yml, else a built-in from dir (the
// embedded defaults/<dir>/NAME.yaml). kind names the thing for errors.
func openConfig(ref, dir, kind string) (Source, error) {
	if isConfigPath(ref) {
		raw, err := readConfigFile(ref, kind)
		if err != nil {
			return Source{}, err
		}
		return newSource(ref, raw), nil
	}
	raw, err := builtin.ReadFile(path.Join("defaults", dir, ref+".yaml"))
	if err != nil || ref == "" || strings.ContainsAny(ref, `/\`) {
		return Source{}, fmt.Errorf("unknown %s %q: give a .yaml file or one of the built-in %ss: %s",
			kind, ref, kind, strings.Join(builtinNames(dir), ", "))
	}
	return newSource("built-in "+ref, raw), nil
}

// isConfigPath reports whether ref names a config file rather than a
// built-in: an existing file, or anything ending in .yaml or .yml.
func isConfigPath(ref string) bool {
	ext := strings.ToLower(filepath.Ext(ref))
	st, err := os.Stat(ref)
	return (err == nil && !st.IsDir()) || ext == ".yaml" || ext == ".yml"
}

func newSource(name string, raw []byte) Source {
	sum := sha256.Sum256(raw)
	return Source{Name: name, Raw: raw, Hash: hex.EncodeToString(sum[:])}
}

// builtinNames lists the embedded configs of dir ("variants" or "stations").
func builtinNames(dir string) []string {
	ents, _ := fs.ReadDir(builtin, path.Join("defaults", dir))
	var names []string
	for _, e := range ents {
		names = append(names, strings.TrimSuffix(e.Name(), ".yaml"))
	}
	return names
}

// doc reads one YAML file strictly. Readers mark every key they accept; keys
// left unmarked are unknown. The first problem is kept (an unknown key is
// reported before any other problem, since a misspelling usually causes a
// "missing key" too), so a whole file can be read without early returns.
type doc struct {
	file  string
	root  map[string]any
	known map[string]bool // full dotted keys accepted, including sections
	open  map[string]bool // sections whose content is free-form
	err   *ConfigError
	// kind is "variant" or "station": which half of KeyTable applies.
	kind string
	// allow holds the keys listed under allow_unusual; warnings collects
	// what they let through (shared with a by_supply row's own doc).
	allow    map[string]bool
	warnings *[]string
}

// parseDoc parses raw as YAML through viper (no environment overrides: the
// file's bytes are the snapshot, so nothing may change what they say).
func parseDoc(file string, raw []byte) (*doc, error) {
	if len(raw) > MaxConfigBytes {
		return nil, &ConfigError{File: file, Msg: fmt.Sprintf("file is over %d bytes; not read", MaxConfigBytes)}
	}
	if err := strictKeys(file, raw); err != nil {
		return nil, err
	}
	v := viper.New()
	v.SetConfigType("yaml")
	if err := v.ReadConfig(bytes.NewReader(raw)); err != nil {
		msg := strings.Join(strings.Fields(strings.ReplaceAll(err.Error(), "While parsing config: ", "")), " ")
		return nil, &ConfigError{File: file, Msg: msg}
	}
	return &doc{file: file, root: v.AllSettings(), known: map[string]bool{}, open: map[string]bool{}}, nil
}

// fail records a problem at key unless an earlier one was recorded.
func (d *doc) fail(key, format string, args ...any) {
	if d.err == nil {
		d.err = &ConfigError{File: d.file, Key: key, Msg: fmt.Sprintf(format, args...)}
	}
}

// missing records a missing required key.
func (d *doc) missing(key string) {
	if d.err == nil {
		d.err = &ConfigError{File: d.file, Msg: "missing key " + key}
	}
}

// finish returns the first unknown key, else the first recorded problem.
func (d *doc) finish() error {
	var unknown []string
	var walk func(prefix string, m map[string]any)
	walk = func(prefix string, m map[string]any) {
		for k, v := range m {
			key := k
			if prefix != "" {
				key = prefix + "." + k
			}
			if d.open[key] {
				continue
			}
			if !d.known[key] {
				unknown = append(unknown, key)
				continue
			}
			if sub, ok := v.(map[string]any); ok {
				walk(key, sub)
			}
		}
	}
	walk("", d.root)
	if len(unknown) > 0 {
		sort.Strings(unknown)
		msg := "unknown key " + unknown[0]
		if len(unknown) > 1 {
			msg += fmt.Sprintf(" (and %d more)", len(unknown)-1)
		}
		return &ConfigError{File: d.file, Msg: msg}
	}
	if d.err != nil {
		return d.err
	}
	return nil
}

// lookup returns the raw value at a dotted key, marking it (and its parents)
// known. ok is false when the key is absent or null.
func (d *doc) lookup(key string) (any, bool) {
	parts := strings.Split(key, ".")
	var cur any = d.root
	for i, p := range parts {
		m, isMap := cur.(map[string]any)
		if !isMap {
			return nil, false
		}
		cur, isMap = m[p]
		if !isMap {
			return nil, false
		}
		d.known[strings.Join(parts[:i+1], ".")] = true
	}
	return cur, cur != nil
}

// has reports whether key is present (and not null), without marking it.
func (d *doc) has(key string) bool {
	parts := strings.Split(key, ".")
	var cur any = d.root
	for _, p := range parts {
		m, ok := cur.(map[string]any)
		if !ok {
			return false
		}
		if cur, ok = m[p]; !ok {
			return false
		}
	}
	return cur != nil
}

// section marks key as a known section and checks it is a mapping when present.
func (d *doc) section(key string, required bool) bool {
	v, ok := d.lookup(key)
	if !ok {
		if required {
			d.missing(key)
		}
		return false
	}
	if _, isMap := v.(map[string]any); !isMap {
		d.fail(key, "want a section of keys, got %s", describeValue(v))
		return false
	}
	return true
}

// freeForm marks key as a section whose content is not checked here.
func (d *doc) freeForm(key string) map[string]any {
	v, ok := d.lookup(key)
	d.open[key] = true
	if !ok {
		return nil
	}
	m, isMap := v.(map[string]any)
	if !isMap {
		d.fail(key, "want a section of keys, got %s", describeValue(v))
		return nil
	}
	return m
}

func describeValue(v any) string {
	switch x := v.(type) {
	case string:
		return fmt.Sprintf("text %q", x)
	case bool:
		return fmt.Sprintf("true/false %v", x)
	case []any:
		return "a list"
	case map[string]any:
		return "a section"
	default:
		return fmt.Sprintf("%v", x)
	}
}

// markAll marks the known keys of a toleranced value's mapping, so a
// structural error is reported as such rather than as unknown keys.
func (d *doc) markAll(key string, m map[string]any) {
	for k := range m {
		if slices.Contains([]string{"nom", "tol_pct", "min", "typ", "max", "dist", "sd"}, k) {
			d.known[key+"."+k] = true
		}
	}
}

// asNumber converts a YAML scalar to float64.
func asNumber(v any) (float64, bool) {
	switch x := v.(type) {
	case int:
		return float64(x), true
	case int64:
		return float64(x), true
	case uint64:
		return float64(x), true
	case float64:
		return x, !math.IsNaN(x) && !math.IsInf(x, 0)
	}
	return 0, false
}

// str reads a text key; required keys must be non-empty.
func (d *doc) str(key string, required bool) string {
	v, ok := d.lookup(key)
	if !ok {
		if required {
			d.missing(key)
		}
		return ""
	}
	s, isStr := v.(string)
	if !isStr {
		d.fail(key, "want text, got %s", describeValue(v))
		return ""
	}
	if required && strings.TrimSpace(s) == "" {
		d.fail(key, "must not be empty")
	}
	if len(s) > maxTextBytes {
		d.fail(key, "%d bytes of text: at most %d", len(s), maxTextBytes)
		return ""
	}
	if off, r, bad := badText(s); bad {
		d.fail(key, "control or invalid character %U at offset %d: text here is one printable line", r, off)
		return ""
	}
	return s
}

// maxTextBytes bounds every text key of a config file (a description is a
// line, a pattern a few dozen characters).
const maxTextBytes = 1024

// name reads a required name key (station, fixture, variant): text of at
// most 64 bytes, printed on every banner and history line.
func (d *doc) name(key string) string {
	s := d.str(key, true)
	if len(s) > maxNameBytes {
		d.fail(key, "%d bytes: a name is at most %d", len(s), maxNameBytes)
	}
	return s
}

// num reads a number; def is returned when the key is optional and absent.
func (d *doc) num(key string, required bool, def float64) (float64, bool) {
	v, ok := d.lookup(key)
	if !ok {
		if required {
			d.missing(key)
		}
		return def, false
	}
	f, isNum := asNumber(v)
	if !isNum {
		d.fail(key, "want a number, got %s", describeValue(v))
		return def, false
	}
	if f > 0 {
		d.plausible(key, f)
	}
	return f, true
}

// positive reads a number that must be > 0.
func (d *doc) positive(key string, required bool, def float64) float64 {
	f, ok := d.num(key, required, def)
	if ok && f <= 0 {
		d.fail(key, "must be > 0, got %g", f)
	}
	return f
}

// nonNegative reads a number that must be ≥ 0.
func (d *doc) nonNegative(key string, required bool, def float64) float64 {
	f, ok := d.num(key, required, def)
	if ok && f < 0 {
		d.fail(key, "must be ≥ 0, got %g", f)
	}
	return f
}

// count reads a whole number ≥ min.
func (d *doc) count(key string, min, def int) int {
	f, ok := d.num(key, false, float64(def))
	if !ok {
		return def
	}
	if f != math.Trunc(f) || f > 1e9 {
		d.fail(key, "want a whole number, got %g", f)
		return def
	}
	if int(f) < min {
		d.fail(key, "must be ≥ %d, got %g", min, f)
	}
	return int(f)
}

// boolean reads an optional true/false key.
func (d *doc) boolean(key string, def bool) bool {
	v, ok := d.lookup(key)
	if !ok {
		return def
	}
	b, isBool := v.(bool)
	if !isBool {
		d.fail(key, "want true or false, got %s", describeValue(v))
		return def
	}
	return b
}

// rangeKind says what a toleranced value must satisfy.
type rangeKind int

const (
	mustBePositive rangeKind = iota // > 0 over the whole range
	mayBeZero                       // ≥ 0 over the whole range
	mustBeFraction                  // inside (0, 1) over the whole range
)

// toleranced reads a toleranced value: {nom, tol_pct} or {min, typ, max},
// each with optional dist (normal|uniform|triangular) and sd; a plain number
// is an exact value without tolerance.
func (d *doc) toleranced(key string, kind rangeKind) timing.Value {
	v, ok := d.lookup(key)
	if !ok {
		d.missing(key)
		return timing.Value{}
	}
	if f, isNum := asNumber(v); isNum {
		if d.checkRange(key, kind, f) {
			d.plausible(key, f)
		}
		return timing.Fixed(f)
	}
	m, isMap := v.(map[string]any)
	if !isMap {
		d.fail(key, "want {nom, tol_pct} or {min, typ, max}, got %s", describeValue(v))
		return timing.Value{}
	}
	_, hasNom := m["nom"]
	_, hasTol := m["tol_pct"]
	_, hasMin := m["min"]
	_, hasTyp := m["typ"]
	_, hasMax := m["max"]
	var val timing.Value
	switch {
	case (hasNom || hasTol) && (hasMin || hasTyp || hasMax):
		d.markAll(key, m)
		d.fail(key, "give either {nom, tol_pct} or {min, typ, max}, not both")
		return val
	case hasNom || hasTol:
		nom, okN := d.num(key+".nom", true, 0)
		tol, okT := d.num(key+".tol_pct", true, 0)
		if okT && (tol < 0 || tol >= 100) {
			d.fail(key+".tol_pct", "must be ≥ 0 and below 100, got %g", tol)
		}
		if okN && d.checkRange(key+".nom", kind, nom) && okT && tol >= 0 && tol < 100 {
			val = timing.Tol(nom, tol)
			d.checkRange(key+" (nom ± tol_pct)", kind, val.Min, val.Max)
		}
	case hasMin || hasTyp || hasMax:
		lo, okL := d.num(key+".min", true, 0)
		typ, okT := d.num(key+".typ", true, 0)
		hi, okH := d.num(key+".max", true, 0)
		if okL && okT && okH {
			if lo > typ || typ > hi {
				d.fail(key, "need min ≤ typ ≤ max, got min %g, typ %g, max %g", lo, typ, hi)
			}
			d.checkRange(key+".min", kind, lo)
			d.checkRange(key+".max", kind, hi)
			val = timing.Range(lo, typ, hi)
		}
	default:
		if _, ok := m["dist"]; !ok {
			if _, ok := m["sd"]; !ok && len(m) > 0 {
				return val // only unknown keys: finish reports them
			}
		}
		d.markAll(key, m)
		d.fail(key, "want {nom, tol_pct} or {min, typ, max}")
		return val
	}
	if _, ok := m["dist"]; ok {
		dist := timing.Dist(d.str(key+".dist", true))
		if !slices.Contains([]timing.Dist{timing.Normal, timing.Uniform, timing.Triangular}, dist) {
			d.fail(key+".dist", "must be normal, uniform or triangular, got %q", dist)
		}
		val.Dist = dist
	}
	if _, ok := m["sd"]; ok {
		val.SD = d.positive(key+".sd", true, 0)
		if val.Dist != timing.Normal && val.Dist != "" {
			d.fail(key+".sd", "applies only to dist: normal")
		}
	}
	return val
}

// checkRange checks values against kind, reporting at key; it returns
// whether all were fine.
func (d *doc) checkRange(key string, kind rangeKind, xs ...float64) bool {
	for _, x := range xs {
		switch {
		case kind == mustBePositive && x <= 0:
			d.fail(key, "must be > 0, got %g", x)
			return false
		case kind == mayBeZero && x < 0:
			d.fail(key, "must be ≥ 0, got %g", x)
			return false
		case kind == mustBeFraction && (x <= 0 || x >= 1):
			d.fail(key, "must be a fraction inside (0, 1), got %g", x)
			return false
		}
	}
	return true
}

// fmtIndex names element i of a list key, e.g. ladder.rungs_pf[3].
func fmtIndex(key string, i int) string { return fmt.Sprintf("%s[%d]", key, i) }

// list reads a required list key.
func (d *doc) list(key string) []any {
	v, ok := d.lookup(key)
	if !ok {
		d.missing(key)
		return nil
	}
	l, isList := v.([]any)
	if !isList {
		d.fail(key, "want a list, got %s", describeValue(v))
		return nil
	}
	return l
}

// strList reads a required list of non-empty text.
func (d *doc) strList(key string) []string {
	var out []string
	for i, v := range d.list(key) {
		s, ok := v.(string)
		if !ok || s == "" {
			d.fail(fmtIndex(key, i), "want a pin name, got %s", describeValue(v))
			continue
		}
		out = append(out, s)
	}
	return out
}

// numList reads a required list of numbers.
func (d *doc) numList(key string) []float64 {
	var out []float64
	for i, v := range d.list(key) {
		f, ok := asNumber(v)
		if !ok {
			d.fail(fmtIndex(key, i), "want a number, got %s", describeValue(v))
			continue
		}
		if f > 0 {
			d.plausible(fmtIndex(key, i), f)
		}
		out = append(out, f)
	}
	return out
}
