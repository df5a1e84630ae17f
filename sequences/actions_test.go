package sequences_test

import (
	"os"
	"regexp"
	"strings"
	"testing"

	"padline/sequences"
)

// readmeAdvice parses the README's fail-code tables: rows whose first cell
// holds one or more `code`s; the second cell is what the code means and the
// last what to do.
func readmeAdvice(t *testing.T) map[sequences.FailCode]sequences.CodeAdvice {
	t.Helper()
	b, err := os.ReadFile("../README.md")
	if err != nil {
		t.Fatal(err)
	}
	codeRe := regexp.MustCompile("`([a-z_]+)`")
	out := map[sequences.FailCode]sequences.CodeAdvice{}
	station := false
	for _, line := range strings.Split(string(b), "\n") {
		if strings.HasPrefix(line, "| fail code |") {
			station = strings.Contains(line, "at the station")
			continue
		}
		if !strings.HasPrefix(line, "| `") {
			continue
		}
		cells := strings.Split(strings.Trim(line, "| "), " | ")
		if len(cells) < 3 {
			continue
		}
		for _, m := range codeRe.FindAllStringSubmatch(cells[0], -1) {
			out[sequences.FailCode(m[1])] = sequences.CodeAdvice{Means: cells[1], Do: cells[len(cells)-1], StationFault: station}
		}
	}
	return out
}

// The README's tables are the source of the advice text; the program holds
// one copy of it and the two must say the same.
func TestAdviceMatchesREADME(t *testing.T) {
	readme := readmeAdvice(t)
	codes := sequences.AdviceCodes()
	if len(readme) != len(codes) {
		t.Errorf("README lists %d fail codes, the program %d", len(readme), len(codes))
	}
	for _, c := range codes {
		got, ok := sequences.Advice(c)
		if !ok {
			t.Errorf("%s: listed but has no advice", c)
			continue
		}
		want, ok := readme[c]
		if !ok {
			t.Errorf("%s: not in the README's fail-code tables", c)
			continue
		}
		if got != want {
			t.Errorf("%s:\nprogram %+v\nREADME  %+v", c, got, want)
		}
	}
	if _, ok := sequences.Advice("no_such_code"); ok {
		t.Error("advice for an unknown code")
	}
}
