package session

import (
	"math"
	"os"
	"strings"
	"testing"
)

func TestVariantGateKeys(t *testing.T) {
	raw205, err := os.ReadFile(repo + "/testdata/variants/QM-205.yaml")
	if err != nil {
		t.Fatal(err)
	}
	raw212, err := os.ReadFile(repo + "/testdata/variants/QM-212.yaml")
	if err != nil {
		t.Fatal(err)
	}
	// QM-205: 0.4 V / 0.51, 1.0, 2.0 mA → 784.3, 400, 200 Ω.
	v, err := parseVariant(newSource("QM-205.yaml", raw205))
	if err != nil {
		t.Fatal(err)
	}
	if r := v.Circuit.GateROhm; math.Abs(r.Max-784.31) > 0.01 || r.Typ != 400 || r.Min != 200 || v.Circuit.EdgeNS.Typ != 100 {
		t.Errorf("QM-205 gate %+v edge %+v", r, v.Circuit.EdgeNS)
	}
	v, err = parseVariant(newSource("QM-212.yaml", raw212))
	if err != nil {
		t.Fatal(err)
	}
	if tab := v.Circuit.BySupply; tab == nil || len(tab.SupplyV) != 2 || len(tab.Inputs) != 4 {
		t.Fatalf("QM-212 by_supply %+v", tab)
	}
	for _, tc := range []struct {
		name     string
		raw      []byte
		old, new string
		want     string
	}{
		{"resistance and current", raw205, "  i_out_at_v: 0.4\n", "  i_out_at_v: 0.4\n  r_out_ohm: 300\n", "QM.yaml: gate.r_out_ohm: give either r_out_ohm or i_out_ma"},
		{"current without voltage", raw205, "  i_out_at_v: 0.4\n", "", "QM.yaml: missing key gate.i_out_at_v"},
		{"negative edge", raw205, "edge_ns: {min: 40,", "edge_ns: {min: -1,", "QM.yaml: gate.edge_ns.min: must be ≥ 0"},
		{"misspelt gate key", raw205, "  edge_ns:", "  edge_nss:", "QM.yaml: unknown key gate.edge_nss"},
		{"supply outside the table", raw212, "supply_v: {nom: 12.0, tol_pct: 5}", "supply_v: {nom: 14.5, tol_pct: 5}", "outside the supply table's 10..15 V"},
		{"delay twice", raw212, "  setup_ns: {min: 10, typ: 20, max: 40}\n", "  setup_ns: {min: 10, typ: 20, max: 40}\n  delay_ns: 6000\n", "QM.yaml: clock_path.delay_ns: also given in by_supply"},
		{"rows differ", raw212, "    edge_ns: {min: 15, typ: 40, max: 80}\n", "", "QM.yaml: by_supply[1]: must give the same keys as by_supply[0]"},
		{"misspelt row key", raw212, "    edge_ns: {min: 15,", "    edge_nss: {min: 15,", "QM.yaml: unknown key by_supply[1].edge_nss"},
		{"row threshold out of range", raw212, "threshold_frac: {min: 0.267,", "threshold_frac: {min: 0,", "QM.yaml: by_supply[1].threshold_frac.min: must be a fraction"},
		{"rows out of order", raw212, "supply_v: 15", "supply_v: 9", "QM.yaml: by_supply: supply table row 1: supply 9 V must be above the previous row's 10 V"},
		{"row not a map", raw212, "by_supply:\n", "by_supply:\n  - 7\n", "QM.yaml: by_supply[0]: want a row of keys"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			raw := strings.Replace(string(tc.raw), tc.old, tc.new, 1)
			if raw == string(tc.raw) {
				t.Fatalf("test edit %q not found", tc.old)
			}
			_, err := parseVariant(newSource("QM.yaml", []byte(raw)))
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %v, want %q", err, tc.want)
			}
		})
	}
}
