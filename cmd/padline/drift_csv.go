package main

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

// readSeriesCSV opens path and parses its column; errors name the file.
func readSeriesCSV(path, column string) ([]float64, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	x, err := parseSeriesCSV(bufio.NewReader(f), column)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return x, nil
}

// parseSeriesCSV reads a CSV table with a header row and returns the
// numbers of the named column, in row order. Blank cells are skipped; any
// other cell that is not a finite number is an error naming its line and
// column. Rows may be ragged as long as they reach the column.
func parseSeriesCSV(r io.Reader, column string) ([]float64, error) {
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
	col := -1
	var names []string
	for i, h := range head {
		h = strings.TrimSpace(strings.TrimPrefix(h, "\ufeff"))
		names = append(names, h)
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
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
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
