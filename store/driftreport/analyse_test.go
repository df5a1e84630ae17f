package driftreport

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"testing"
	"time"
)

func TestParseSeriesCSV(t *testing.T) {
	for _, tc := range []struct {
		name, in, column string
		want             []float64
		err              string // substring of the error; "" = no error
	}{
		{"plain", "serial,trip_pf\nA,29.5\nB,30.25\n", "trip_pf", []float64{29.5, 30.25}, ""},
		{"spaces, BOM and CRLF", "\ufeff serial , trip_pf \r\nA, 29.5 \r\nB,1e1\r\n", "trip_pf", []float64{29.5, 10}, ""},
		{"quoted cells", "\"a,b\",v\n\"x,y\",\"-3.5\"\n", "v", []float64{-3.5}, ""},
		{"blank cells skipped", "v,w\n1,\n,2\n3,\n", "v", []float64{1, 3}, ""},
		{"ragged rows that reach the column", "a,v\n1,2,3\n4,5\n", "v", []float64{2, 5}, ""},
		{"header only", "v\n", "v", nil, ""},
		{"empty file", "", "v", nil, "empty file"},
		{"no such column", "a,b\n1,2\n", "v", nil, `line 1: no column "v" in the header (columns: "a", "b")`},
		{"column twice", "v,v\n1,2\n", "v", nil, `line 1: column "v" appears twice`},
		{"not a number", "a,v\n1,2\n3,abc\n", "v", nil, `line 3, column "v": "abc" is not a finite number`},
		{"NaN refused", "v\nNaN\n", "v", nil, `line 2, column "v": "NaN" is not a finite number`},
		{"Inf refused", "v\n1\n+Inf\n", "v", nil, `line 3, column "v": "+Inf" is not a finite number`},
		{"short row", "a,b,v\n1,2,3\n4\n", "v", nil, `line 3: 1 fields, column "v" is field 3`},
		{"line counts a quoted newline", "a,v\n\"x\ny\",1\nz,q\n", "v", nil, `line 4, column "v": "q"`},
		{"bare quote", "v\n1\"2\n", "v", nil, "line 2, column 2"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			got, err := ParseSeriesCSV(strings.NewReader(tc.in), tc.column)
			if tc.err != "" {
				if err == nil || !strings.Contains(err.Error(), tc.err) {
					t.Fatalf("err %v, want one containing %q", err, tc.err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if fmt.Sprint(got) != fmt.Sprint(tc.want) {
				t.Errorf("got %v, want %v", got, tc.want)
			}
		})
	}
}

// FuzzSeriesCSV: ParseSeriesCSV never panics, returns only finite numbers,
// names a line in every error about a row, and reads back what it read
// when the values are written out again.
func FuzzSeriesCSV(f *testing.F) {
	for _, s := range []string{
		"serial,trip_pf\nQM205-000001,29.5\nQM205-000002,30.25\n",
		"\ufefftrip_pf\r\n1\r\n\r\n2\r\n",
		"a,trip_pf\n\"x,y\",\"1e3\"\n",
		"trip_pf\nNaN\n",
		"trip_pf,trip_pf\n1,2\n",
		"a,b,trip_pf\n1\n",
		"trip_pf\n1\"2\n",
		"",
		"trip_pf\n0x1p-2\n-0\n",
	} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, in string) {
		xs, err := ParseSeriesCSV(strings.NewReader(in), "trip_pf")
		if err != nil {
			if msg := err.Error(); !strings.Contains(msg, "line ") && !strings.Contains(msg, "empty file") && !strings.Contains(msg, "header") {
				t.Fatalf("error without a line: %v", err)
			}
			return
		}
		var b strings.Builder
		b.WriteString("trip_pf\n")
		for _, x := range xs {
			if math.IsNaN(x) || math.IsInf(x, 0) {
				t.Fatalf("non-finite value %v from %q", x, in)
			}
			b.WriteString(strconv.FormatFloat(x, 'g', -1, 64) + "\n")
		}
		again, err := ParseSeriesCSV(strings.NewReader(b.String()), "trip_pf")
		if err != nil || fmt.Sprint(again) != fmt.Sprint(xs) {
			t.Fatalf("round trip: %v, %v != %v", err, again, xs)
		}
	})
}

func TestShiftOf(t *testing.T) {
	loc := time.FixedZone("plant", 3600)
	for _, tc := range []struct {
		at, name, start string
	}{
		{"2026-11-30 06:00", "2026-11-30 early", "2026-11-30 06:00"},
		{"2026-11-30 13:59", "2026-11-30 early", "2026-11-30 06:00"},
		{"2026-11-30 14:00", "2026-11-30 late", "2026-11-30 14:00"},
		{"2026-11-30 22:30", "2026-11-30 night", "2026-11-30 22:00"},
		{"2026-12-01 05:59", "2026-11-30 night", "2026-11-30 22:00"},
	} {
		at, _ := time.ParseInLocation("2006-01-02 15:04", tc.at, loc)
		name, start, end := shiftOf(at)
		if name != tc.name || start.Format("2006-01-02 15:04") != tc.start || end.Sub(start) != 8*time.Hour {
			t.Errorf("%s: %s %v %v, want %s from %s", tc.at, name, start, end, tc.name, tc.start)
		}
	}
}
