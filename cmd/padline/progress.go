package main

import (
	"fmt"
	"io"
	"os"
	"strings"
)

// isTerminal reports whether stream is a character device (a person at a
// terminal).
func isTerminal(stream any) bool {
	f, ok := stream.(*os.File)
	if !ok {
		return false
	}
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}

// progress draws a one-line bar on a terminal for long work.
type progress struct {
	w     io.Writer
	n, i  int
	label string
	quiet bool
	drawn int
}

func newProgress(w io.Writer, n int, label string, quiet bool) *progress {
	return &progress{w: w, n: n, label: label, quiet: quiet}
}

// Step counts one unit and redraws the bar when it moved.
func (p *progress) Step() {
	p.i++
	if p.quiet {
		return
	}
	const width = 30
	filled := width * p.i / p.n
	if filled == p.drawn && p.i != p.n && p.i%50 != 0 {
		return
	}
	p.drawn = filled
	fmt.Fprintf(p.w, "\r%s [%s%s] %d/%d", p.label, strings.Repeat("=", filled), strings.Repeat(" ", width-filled), p.i, p.n)
}

// Done ends the bar's line.
func (p *progress) Done() {
	if !p.quiet && p.i > 0 {
		fmt.Fprintln(p.w)
	}
}
