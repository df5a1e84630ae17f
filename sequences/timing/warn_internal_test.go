package timing

import (
	"strings"
	"testing"
)

// The spread warning says what is true: a spread wider than the test
// limits, or one as narrow or narrower but shifted past one limit.
func TestSpreadWarningSaysWhatIsTrue(t *testing.T) {
	lim := Limits{Low: 10, High: 20}
	wide := spreadWarning(TripStats{MCP00135: 8, MCP99865: 22}, lim)
	if !strings.Contains(wide, "is wider than the test limits") {
		t.Errorf("a 14 pF spread over 10 pF limits: %q", wide)
	}
	high := spreadWarning(TripStats{MCP00135: 15, MCP99865: 21}, lim)
	if strings.Contains(high, "wider") || !strings.Contains(high, "narrower than the test limits 10.00..20.00 pF but shifted above the high limit") {
		t.Errorf("a 6 pF spread shifted high: %q", high)
	}
	low := spreadWarning(TripStats{MCP00135: 9, MCP99865: 15}, lim)
	if !strings.Contains(low, "shifted below the low limit") {
		t.Errorf("a 6 pF spread shifted low: %q", low)
	}
}
