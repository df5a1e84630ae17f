package demo

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"strings"
)

// Shift runs the demo o asks for (a shift of units, or of panels with
// o.Panel) and prints it to w: the summary for people, or with asJSON one
// JSON object per unit (per site), then the summary object.
func Shift(ctx context.Context, w io.Writer, o Options, asJSON bool) error {
	enc := json.NewEncoder(w)
	var lines []any
	if o.Panel > 0 {
		res, err := RunPanel(ctx, o)
		if err != nil {
			return err
		}
		if !asJSON {
			WritePanelText(w, res)
			return nil
		}
		for _, s := range res.Sites {
			lines = append(lines, s)
		}
		lines = append(lines, res.Summary)
	} else {
		if asJSON { // streamed: the demo keeps no unit
			o.EachUnit = func(u Unit) error { return enc.Encode(u) }
		}
		res, err := Run(ctx, o)
		if err != nil {
			return err
		}
		if !asJSON {
			WriteText(w, res)
			return nil
		}
		lines = append(lines, res.Summary())
	}
	for _, l := range lines {
		if err := enc.Encode(l); err != nil {
			return err
		}
	}
	return nil
}

// Bar is a Progress factory that draws a one-line bar per pass on w (a
// terminal); quiet draws nothing.
func Bar(w io.Writer, quiet bool) func(label string, units int) Progress {
	return func(label string, units int) Progress {
		if quiet {
			return noProgress{}
		}
		return &bar{w: w, n: units, label: label}
	}
}

// bar draws a one-line bar on a terminal for long work.
type bar struct {
	w           io.Writer
	n, i, drawn int
	label       string
}

// Step counts one unit and redraws the bar when it moved.
func (p *bar) Step() {
	p.i++
	const width = 30
	filled := width * p.i / max(p.n, 1)
	if filled == p.drawn && p.i != p.n && p.i%50 != 0 {
		return
	}
	p.drawn = filled
	fmt.Fprintf(p.w, "\r%s [%s%s] %d/%d", p.label, strings.Repeat("=", filled), strings.Repeat(" ", max(width-filled, 0)), p.i, p.n)
}

// Done ends the bar's line.
func (p *bar) Done() {
	if p.i > 0 {
		fmt.Fprintln(p.w)
	}
}
