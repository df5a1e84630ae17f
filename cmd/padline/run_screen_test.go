package main

import (
	"strings"
	"testing"

	"padline/sequences"
)

// --screen alone serves on this computer only; --screen=ADDR elsewhere;
// no --screen, no screen.
func TestScreenFlag(t *testing.T) {
	for _, c := range []struct {
		args []string
		want string
	}{
		{nil, ""},
		{[]string{"--screen"}, "127.0.0.1:8080"},
		{[]string{"--screen=0.0.0.0:9000"}, "0.0.0.0:9000"},
	} {
		a := &app{}
		cmd := a.runCmd()
		if err := cmd.ParseFlags(c.args); err != nil {
			t.Fatal(err)
		}
		if got := cmd.Flags().Lookup("screen").Value.String(); got != c.want {
			t.Errorf("%v: screen %q, want %q", c.args, got, c.want)
		}
	}
}

// Colour only on a terminal, and never instead of the words.
func TestPaint(t *testing.T) {
	if got := paint("== PASS ==", sequences.Pass, false); got != "== PASS ==" {
		t.Errorf("no terminal: %q", got)
	}
	for v, sgr := range map[sequences.Verdict]string{sequences.Pass: "42", sequences.Fail: "41", sequences.StationFault: "43"} {
		got := paint("WORD", v, true)
		if !strings.HasPrefix(got, "\x1b[1;") || !strings.Contains(got, sgr+"mWORD\x1b[0m") {
			t.Errorf("%s: %q", v, got)
		}
	}
}
