package driftreport

import (
	"slices"
	"strings"
	"testing"
)

// A serial on several rows (a per-measurement export, a retest) is refused
// unless --keep says which row counts.
func TestSeriesCSVRepeatedSerials(t *testing.T) {
	in := "serial,trip_pf\nA,1\nA,1\nB,2\nA,3\nC,4\n"
	if _, err := ParseSeriesCSVKeep(strings.NewReader(in), "trip_pf", ""); err == nil || !strings.Contains(err.Error(), "line 3: serial A again (first on line 2)") || !strings.Contains(err.Error(), "--keep first|last") {
		t.Errorf("repeated serial: %v", err)
	}
	for keep, want := range map[string][]float64{"first": {1, 2, 4}, "last": {2, 3, 4}} {
		got, err := ParseSeriesCSVKeep(strings.NewReader(in), "trip_pf", keep)
		if err != nil || !slices.Equal(got, want) {
			t.Errorf("--keep %s: %v, %v; want %v", keep, got, err, want)
		}
	}
	if got, err := ParseSeriesCSVKeep(strings.NewReader("serial,trip_pf\nA,1\nB,2\n"), "trip_pf", ""); err != nil || len(got) != 2 {
		t.Errorf("distinct serials: %v, %v", got, err)
	}
}
