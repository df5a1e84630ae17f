package console

import (
	"strings"
	"testing"

	"padline/sequences"
)

// Colour only on a terminal, and never instead of the words.
func TestPaint(t *testing.T) {
	if got := Paint("== PASS ==", sequences.Pass, false); got != "== PASS ==" {
		t.Errorf("no terminal: %q", got)
	}
	for v, sgr := range map[sequences.Verdict]string{sequences.Pass: "42", sequences.Fail: "41", sequences.StationFault: "43"} {
		got := Paint("WORD", v, true)
		if !strings.HasPrefix(got, "\x1b[1;") || !strings.Contains(got, sgr+"mWORD\x1b[0m") {
			t.Errorf("%s: %q", v, got)
		}
	}
}
