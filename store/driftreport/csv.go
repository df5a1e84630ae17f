package driftreport

import (
	"bufio"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"
	"unicode/utf8"
)

// ReadSeriesCSV opens path and parses its column; errors name the file.
func ReadSeriesCSV(path, column, keep string) ([]float64, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	x, err := ParseSeriesCSVKeep(bufio.NewReader(f), column, keep)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return x, nil
}

// ParseSeriesCSV reads a CSV table with a header row and returns the
// numbers of the named column, in row order. Blank cells are skipped; any
// other cell that is not a finite number is an error naming its line and
// column. Rows may be ragged as long as they reach the column.
func ParseSeriesCSV(r io.Reader, column string) ([]float64, error) {
	return ParseSeriesCSVKeep(r, column, "")
}

// ParseSeriesCSVKeep is ParseSeriesCSV for a file that may have a
// "serial" column: a serial on several rows (one row per measurement, or
// a retest) is refused unless keep says which row counts — "first" or
// "last" — so no unit is charted several times over.
func ParseSeriesCSVKeep(r io.Reader, column, keep string) ([]float64, error) {
	cr := csv.NewReader(r)
	cr.FieldsPerRecord = -1
	cr.ReuseRecord = true
	head, err := cr.Read()
	if errors.Is(err, io.EOF) {
		return nil, errors.New("empty file: want a header row naming the columns")
	}
	if err != nil {
		return nil, fmt.Errorf("header: %w", err)
	}
	col, scol := -1, -1
	var names []string
	for i, h := range head {
		h = strings.TrimSpace(strings.TrimPrefix(h, "\ufeff"))
		names = append(names, h)
		if strings.EqualFold(h, "serial") && scol < 0 {
			scol = i
		}
		if h == column {
			if col >= 0 {
				return nil, fmt.Errorf("line 1: column %q appears twice in the header", column)
			}
			col = i
		}
	}
	if col < 0 {
		return nil, fmt.Errorf("line 1: no column %q in the header (columns: %s)", column, quoteList(names))
	}
	var out []float64
	seen := map[string]int{}      // serial → index in out of its row that counts
	firstLine := map[string]int{} // serial → line it was first on
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			if keep == "last" {
				var kept []float64
				for _, v := range out {
					if !math.IsNaN(v) {
						kept = append(kept, v)
					}
				}
				return kept, nil
			}
			return out, nil
		}
		if err != nil {
			var pe *csv.ParseError
			if errors.As(err, &pe) {
				return nil, fmt.Errorf("line %d, column %d: %w", pe.Line, pe.Column, pe.Err)
			}
			return nil, err
		}
		line, _ := cr.FieldPos(0)
		if col >= len(rec) {
			return nil, fmt.Errorf("line %d: %d fields, column %q is field %d", line, len(rec), column, col+1)
		}
		cell := strings.TrimSpace(rec[col])
		if cell == "" {
			continue
		}
		v, err := strconv.ParseFloat(cell, 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("line %d, column %q: %s is not a finite number", line, column, quoteCell(cell))
		}
		if !Chartable(v) {
			return nil, fmt.Errorf("line %d, column %q: %s is outside what the charts can compute with (0, or a magnitude from %g to %g): scale the column to another unit",
				line, column, quoteCell(cell), MinMagnitude, MaxMagnitude)
		}
		if scol >= 0 && scol < len(rec) {
			serial := strings.TrimSpace(rec[scol])
			if i, ok := seen[serial]; ok && serial != "" {
				switch keep {
				case "first":
					continue
				case "last":
					out[i] = math.NaN() // dropped: a later row of the serial counts
				default:
					return nil, fmt.Errorf("line %d: serial %s again (first on line %d): the file has several rows per unit "+
						"('padline history --format csv --per measurement' writes one per measurement); export one row per run "+
						"('--per run') or give --keep first|last", line, serial, firstLine[serial])
				}
			} else {
				firstLine[serial] = line
			}
			seen[serial] = len(out)
		}
		out = append(out, v)
	}
}

func quoteList(names []string) string {
	q := make([]string, len(names))
	for i, n := range names {
		q[i] = strconv.Quote(n)
	}
	return strings.Join(q, ", ")
}

// quoteCell quotes a cell for an error, cut to a readable length.
func quoteCell(s string) string {
	const max = 40
	if utf8.RuneCountInString(s) > max {
		s = string([]rune(s)[:max]) + "…"
	}
	return strconv.Quote(s)
}

// The magnitudes a series value may have. The charts sum squared
// deviations in float64 (IEEE 754 binary64: largest finite value about
// 1.8e308, smallest normal about 2.2e-308): with |x| ≤ 1e150 a deviation
// is at most 2e150, its square 4e300, and a sum of 4e7 of them stays
// finite. The lower bound mirrors it: deviations below about 1.5e-154
// square below the smallest normal, so σ would lose its digits or come
// out 0. A value of 1e308 made the centre print as "-" with exit 0, and
// then --svg fail on an infinite point.
const (
	MaxMagnitude = 1e150
	MinMagnitude = 1e-150
)

// Chartable reports whether v is finite and 0 or of a magnitude the
// charts compute with, free of overflow and underflow (see MaxMagnitude).
func Chartable(v float64) bool {
	a := math.Abs(v)
	return a == 0 || (a >= MinMagnitude && a <= MaxMagnitude)
}
