package screen

import (
	"math"
	"os"
	"regexp"
	"strconv"
	"strings"
	"testing"
)

// relativeLuminance of an sRGB colour "#rrggbb", by the definition of
// "relative luminance" in W3C WCAG 2.1 (and 2.2), section "Definitions":
// each 8-bit channel c/255 is linearised as c/12.92 at or below 0.04045
// (WCAG 2.1 prints 0.03928; no 8-bit value lies between the two) else
// ((c+0.055)/1.055)^2.4, then L = 0.2126 R + 0.7152 G + 0.0722 B.
func relativeLuminance(t *testing.T, hex string) float64 {
	t.Helper()
	if len(hex) != 7 || hex[0] != '#' {
		t.Fatalf("colour %q: want #rrggbb", hex)
	}
	lin := func(s string) float64 {
		v, err := strconv.ParseUint(s, 16, 8)
		if err != nil {
			t.Fatalf("colour %q: %v", hex, err)
		}
		c := float64(v) / 255
		if c <= 0.04045 {
			return c / 12.92
		}
		return math.Pow((c+0.055)/1.055, 2.4)
	}
	return 0.2126*lin(hex[1:3]) + 0.7152*lin(hex[3:5]) + 0.0722*lin(hex[5:7])
}

// contrastRatio is WCAG 2.1's "contrast ratio": (L1 + 0.05) / (L2 + 0.05)
// with L1 the lighter colour's relative luminance.
func contrastRatio(t *testing.T, a, b string) float64 {
	la, lb := relativeLuminance(t, a), relativeLuminance(t, b)
	if la < lb {
		la, lb = lb, la
	}
	return (la + 0.05) / (lb + 0.05)
}

func TestContrastRatioFormula(t *testing.T) {
	for _, c := range []struct {
		a, b string
		want float64
		src  string
	}{
		// The extremes follow from the definition: (1 + 0.05)/(0 + 0.05).
		{"#000000", "#ffffff", 21, "WCAG 2.1 definition, black on white"},
		{"#123456", "#123456", 1, "WCAG 2.1 definition, a colour on itself"},
		// WebAIM Contrast Checker (webaim.org/resources/contrastchecker):
		// #767676 on white is 4.54:1, the lightest grey passing 4.5:1
		// (from memory).
		{"#767676", "#ffffff", 4.54, "WebAIM Contrast Checker"},
	} {
		if got := contrastRatio(t, c.a, c.b); math.Abs(got-c.want) > 0.005 {
			t.Errorf("%s on %s: %.3f, want %.2f (%s)", c.a, c.b, got, c.want, c.src)
		}
	}
}

// cssVars reads the custom properties (--name: #rrggbb) of screen.css.
func cssVars(t *testing.T) (map[string]string, string) {
	t.Helper()
	b, err := os.ReadFile("assets/screen.css")
	if err != nil {
		t.Fatal(err)
	}
	css := string(b)
	vars := map[string]string{}
	for _, m := range regexp.MustCompile(`--([a-z-]+):\s*(#[0-9a-fA-F]{6})\s*;`).FindAllStringSubmatch(css, -1) {
		vars[m[1]] = strings.ToLower(m[2])
	}
	return vars, css
}

// Every verdict's text against its background reaches 7:1, the enhanced
// contrast of WCAG 2.1 success criterion 1.4.6 (AAA).
func TestVerdictContrast(t *testing.T) {
	vars, _ := cssVars(t)
	for _, v := range []string{"pass", "fail", "fault", "locked", "idle"} {
		fg, bg := vars[v+"-fg"], vars[v+"-bg"]
		if fg == "" || bg == "" {
			t.Errorf("screen.css has no --%s-fg / --%s-bg", v, v)
			continue
		}
		r := contrastRatio(t, fg, bg)
		t.Logf("%-6s %s on %s: %.2f:1", v, fg, bg, r)
		if r < 7 {
			t.Errorf("%s: contrast %.2f:1 (%s on %s), want at least 7:1 (WCAG 2.1 SC 1.4.6)", v, r, fg, bg)
		}
	}
	// The page's own text, too.
	if r := contrastRatio(t, vars["page-fg"], vars["page-bg"]); r < 7 {
		t.Errorf("page text contrast %.2f:1, want at least 7:1", r)
	}
	if r := contrastRatio(t, vars["dim"], vars["panel"]); r < 7 {
		t.Errorf("dim text on a panel: contrast %.2f:1, want at least 7:1", r)
	}
}

// A colour-blind technician reads pass and fail apart by lightness too: the
// pass background is light and the fail background dark.
func TestVerdictLightnessDiffers(t *testing.T) {
	vars, _ := cssVars(t)
	if r := contrastRatio(t, vars["pass-bg"], vars["fail-bg"]); r < 4.5 {
		t.Errorf("pass and fail backgrounds differ by %.2f:1 in luminance, want at least 4.5:1", r)
	}
}

// The verdict word is at least 96 CSS px in both layouts.
func TestVerdictSize(t *testing.T) {
	_, css := cssVars(t)
	sizes := regexp.MustCompile(`--verdict-size:\s*([0-9.]+)px`).FindAllStringSubmatch(css, -1)
	if len(sizes) < 2 {
		t.Fatalf("screen.css sets --verdict-size %d times, want one per layout", len(sizes))
	}
	for _, m := range sizes {
		if px, _ := strconv.ParseFloat(m[1], 64); px < 96 {
			t.Errorf("--verdict-size %s px, want at least 96", m[1])
		}
	}
}
