package session

import (
	"os"
	"path/filepath"
	"regexp"
	"sort"
	"strings"
	"testing"

	yaml "go.yaml.in/yaml/v3"
)

// keyPaths lists the normalised key paths of a YAML file (lists as name[]).
func keyPaths(t *testing.T, kind string, raw []byte) []string {
	t.Helper()
	var root yaml.Node
	if err := yaml.Unmarshal(raw, &root); err != nil {
		t.Fatal(err)
	}
	var out []string
	var walk func(prefix string, n *yaml.Node)
	walk = func(prefix string, n *yaml.Node) {
		switch n.Kind {
		case yaml.DocumentNode:
			for _, c := range n.Content {
				walk(prefix, c)
			}
		case yaml.SequenceNode:
			for _, c := range n.Content {
				walk(prefix+"[]", c)
			}
		case yaml.MappingNode:
			for i := 0; i+1 < len(n.Content); i += 2 {
				key := keyPath(prefix, n.Content[i].Value)
				out = append(out, normKey(kind, key))
				walk(key, n.Content[i+1])
			}
		}
	}
	walk("", &root)
	return out
}

// keyFiles are accepted files that between them use every key: the demo
// files, the deployment examples and testdata/config/good.
func keyFiles(t *testing.T) map[string][]string {
	t.Helper()
	files := map[string][]string{}
	for _, glob := range []string{"testdata/variants/*.yaml", "testdata/stations/*.yaml", "testdata/config/good/*.yaml", "deploy/*.yaml"} {
		fs, _ := filepath.Glob(filepath.Join(repo, glob))
		for _, f := range fs {
			raw, err := os.ReadFile(f)
			if err != nil {
				t.Fatal(err)
			}
			kind := "station"
			if _, err := LoadStation(f); err != nil {
				if _, verr := LoadVariant(f); verr != nil {
					if strings.Contains(glob, "deploy") {
						continue // not a variant or station file
					}
					t.Fatalf("%s is neither: %v / %v", f, err, verr)
				}
				kind = "variant"
			}
			files[kind] = append(files[kind], keyPaths(t, kind, raw)...)
		}
	}
	return files
}

// TestKeyTableIsTheParser: the parser is strict, so every key of an
// accepted file is a key the parser reads: each must be in the table, and
// every key of the table must occur in some accepted file.
func TestKeyTableIsTheParser(t *testing.T) {
	used := keyFiles(t)
	inTable := map[string]bool{}
	for _, k := range KeyTable() {
		inTable[k.File+" "+k.Name] = true
	}
	seen := map[string]bool{}
	for kind, keys := range used {
		for _, k := range keys {
			seen[kind+" "+k] = true
			if !inTable[kind+" "+k] {
				t.Errorf("%s key %s is read by the parser but missing from KeyTable", kind, k)
			}
		}
	}
	var unused []string
	for k := range inTable {
		if !seen[k] {
			unused = append(unused, k)
		}
	}
	sort.Strings(unused)
	for _, k := range unused {
		t.Errorf("KeyTable has %s, which no accepted file uses: add it to testdata/config/good", k)
	}
}

// TestEveryNumberHasARange: every number key of both formats has a
// plausible range with its source, and its typical value lies inside.
func TestEveryNumberHasARange(t *testing.T) {
	for _, k := range KeyTable() {
		isNum := k.Type == "number" || k.Type == "toleranced" || k.Type == "count" || k.Type == "list of numbers"
		switch {
		case isNum && (!k.numeric() || k.Why == ""):
			t.Errorf("%s %s: a number without a plausible range and its source", k.File, k.Name)
		case !isNum && k.numeric():
			t.Errorf("%s %s: a %s with a numeric range", k.File, k.Name, k.Type)
		case isNum && !(k.Lo <= k.Typ && k.Typ <= k.Hi):
			t.Errorf("%s %s: typical %g outside %g…%g", k.File, k.Name, k.Typ, k.Lo, k.Hi)
		}
		if k.Meaning == "" || k.Default == "" {
			t.Errorf("%s %s: no meaning or default", k.File, k.Name)
		}
	}
}

// TestAllowUnusual: a value outside its range is accepted, with a warning
// naming file and key, when the file lists the key under allow_unusual.
func TestAllowUnusual(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join(repo, "testdata/config/good/variant-every-key.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	// 22 µF: an electrolytic, outside 1 pF…10 µF, accepted knowingly
	unusual := strings.Replace(string(raw), "c_f: {nom: 100.0e-9, tol_pct: 10}", "c_f: {nom: 22.0e-6, tol_pct: 10}", 1)
	if unusual == string(raw) {
		t.Fatal("c_f line not found")
	}
	for _, tt := range []struct {
		name, body, want string
		ok               bool
	}{
		{"allowed", unusual, "v.yaml: oscillator.c_f.nom: 2.2e-5 F is outside the plausible 1e-12…1e-5 F; accepted by allow_unusual", true},
		{"not allowed", strings.Replace(unusual, "allow_unusual: [oscillator.c_f]", "allow_unusual: [sense.r_ohm]", 1), "list oscillator.c_f under allow_unusual", false},
	} {
		t.Run(tt.name, func(t *testing.T) {
			f := filepath.Join(t.TempDir(), "v.yaml")
			if err := os.WriteFile(f, []byte(tt.body), 0o644); err != nil {
				t.Fatal(err)
			}
			v, err := LoadVariant(f)
			switch {
			case tt.ok && err != nil:
				t.Fatal(err)
			case tt.ok && (len(v.Warnings) != 1 || !strings.HasSuffix(v.Warnings[0], tt.want)):
				t.Errorf("warnings %q, want one ending %q", v.Warnings, tt.want)
			case !tt.ok && (err == nil || !strings.Contains(err.Error(), tt.want)):
				t.Errorf("err %v, want %q", err, tt.want)
			}
		})
	}
}

// TestUnitHint: the likely intended value of a unit mistake (issue #20).
func TestUnitHint(t *testing.T) {
	for _, tt := range []struct {
		kind, key string
		x         float64
		want      string
	}{
		{"variant", "oscillator.c_f", 100, "farads? 100 nF is 1e-7"},
		{"variant", "supply_v", 9000, "volts? 9000 mV is 9"},
		{"variant", "sense.pad_pf", 8.0e-12, "pF? 8e-12 F is 8"},
		{"variant", "oscillator.r_ohm", 22, "ohms? 22 kΩ is 22000"},
		{"station", "ladder.operate_ms", 0.0005, "ms? 0.0005 s is 0.5"},
		{"station", "uncertainty_pf", 1e23, ""},
		{"station", "check_every_hours", 3e6, ""},
	} {
		k, ok := keyIndex(tt.kind, tt.key)
		if !ok {
			t.Fatalf("no key %s", tt.key)
		}
		if got := unitHint(k, tt.x); got != tt.want {
			t.Errorf("%s %g: hint %q, want %q", tt.key, tt.x, got, tt.want)
		}
	}
}

// TestEveryReadKeyIsInTheTable: every key the parser's source reads by a
// literal name is in KeyTable, even one no testdata file uses yet.
func TestEveryReadKeyIsInTheTable(t *testing.T) {
	srcs, _ := filepath.Glob("*.go")
	read := regexp.MustCompile(`d\.(?:str|num|positive|nonNegative|count|boolean|toleranced|tolerancedUnless|section|freeForm|list|strList|numList|lookup|has|name|optIndexList|atMost)\("([a-z_.]+)"`)
	n := 0
	for _, f := range srcs {
		if strings.HasSuffix(f, "_test.go") {
			continue
		}
		raw, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		for _, m := range read.FindAllStringSubmatch(string(raw), -1) {
			n++
			_, inV := keyIndex("variant", m[1])
			_, inS := keyIndex("station", m[1])
			if !inV && !inS {
				t.Errorf("%s reads key %s, which KeyTable lacks", f, m[1])
			}
		}
	}
	if n < 50 {
		t.Fatalf("found only %d keys read", n)
	}
}
