package session

import (
	"fmt"
	"strings"
)

// The reference of both file formats, rendered from KeyTable: 'padline help
// variant-file' and 'padline help station-file' print FileHelp, and
// docs/files.md is FilesMarkdown (a test keeps the checked-in page equal).

// fileIntro is the prose before each file's keys.
var fileIntro = map[string]string{
	"variant": `A variant file describes one product variant: its circuit (from which
'padline limits' computes the test limits), its specification, its serials
and, optionally, how the station tests it (plan:). Give it to --variant as a
path; QM-205 and QM-212 are built in (testdata/variants holds copies).

Keys are written in lower case, each once in its section; an unknown key is
an error naming file and key.

A toleranced value is one of
  supply_v: 5.0                                   exact, no tolerance
  supply_v: {nom: 5.0, tol_pct: 5}                nominal ± percent (0 ≤ tol_pct < 100)
  supply_v: {min: 4.75, typ: 5.0, max: 5.25}      corners; min ≤ typ ≤ max
and may add dist: normal | uniform | triangular (how the Monte Carlo draws it;
normal by default, clipped to the corners) and, with dist: normal, sd: σ in
the value's own unit (default: each side's tolerance at 3σ). The corners
always give the worst case.

plan: is optional: every key has a default, shown below.

Every number has a plausible range for the trade. A value outside it is an
error that names the file, the key and, for a unit mistake, the value you
probably meant (c_f 100: farads? 100 nF is 1e-7). To accept a value knowingly,
list the key under allow_unusual: [key, ...]: it is then a warning.`,
	"station": `A station file describes one station: its fixture, how its pins are
driven, the calibrated ladder, its reference units and their check schedule,
and where its shift log is. Give it to --station as a path; demo-sim and
demo-panel are built in (testdata/stations holds copies).

Keys are written in lower case, each once in its section; an unknown key is
an error naming file and key.

driver: sim runs every pin against the built-in simulated line; the optional
sim: section says how that line differs from the simulator's realism floor
(DEVELOPERS.md "Simulator realism floor") and injects fixture faults; a
gpio station does not use it. sites: makes a panel station (README "Panels").

Every number has a plausible range for the trade. A value outside it is an
error that names the file, the key and, for a unit mistake, the value you
probably meant (operate_ms 0.0005: ms? 0.0005 s is 0.5). To accept a value
knowingly, list the key under allow_unusual: [key, ...]: it is then a warning.`,
}

// FileHelp is the terminal reference of one file kind ("variant" or
// "station"): the prose, then every key with its type, unit, default,
// meaning and plausible range.
func FileHelp(kind string) string {
	var b strings.Builder
	b.WriteString(fileIntro[kind])
	b.WriteString("\n\nKeys (section.key; list[] is a key of each list element):\n")
	for _, k := range KeyTable() {
		if k.File != kind {
			continue
		}
		fmt.Fprintf(&b, "\n  %s  (%s%s; default: %s)\n", k.Name, k.Type, unitSuffixComma(k.Unit), k.Default)
		b.WriteString(wrap(k.Meaning, "      ", 78))
		if k.numeric() {
			b.WriteString(wrap(fmt.Sprintf("plausible: %s (%s)", rangeText(k), k.Why), "      ", 78))
		}
	}
	return b.String()
}

// FilesMarkdown is docs/files.md: both references as Markdown tables.
func FilesMarkdown() string {
	var b strings.Builder
	b.WriteString("# Variant and station files\n\n")
	b.WriteString("<!-- Generated from sequences/session/keys.go by TestFilesPage (go test ./sequences/session -run TestFilesPage -update); do not edit. -->\n\n")
	b.WriteString("The same text is printed by `padline help variant-file` and `padline help station-file`.\n")
	for _, kind := range []string{"variant", "station"} {
		fmt.Fprintf(&b, "\n## %s files\n\n", strings.ToUpper(kind[:1])+kind[1:])
		b.WriteString("```text\n" + fileIntro[kind] + "\n```\n\n")
		b.WriteString("| key | type | unit | default | meaning | plausible | source of the range |\n|---|---|---|---|---|---|---|\n")
		for _, k := range KeyTable() {
			if k.File != kind {
				continue
			}
			rng, why := "", ""
			if k.numeric() {
				rng, why = rangeText(k), k.Why
			}
			fmt.Fprintf(&b, "| `%s` | %s | %s | %s | %s | %s | %s |\n", k.Name, k.Type, k.Unit, mdCell(k.Default), mdCell(k.Meaning), rng, mdCell(why))
		}
	}
	return b.String()
}

func unitSuffixComma(u string) string {
	if u == "" {
		return ""
	}
	return ", " + u
}

// rangeText is a key's plausible range as printed, e.g. "3…18 V" or
// "0, or 0.1…5e6 ns".
func rangeText(k Key) string {
	s := fmtNum(k.Lo) + "…" + fmtNum(k.Hi) + unitSuffix(k.Unit)
	if k.ZeroOK && k.Lo > 0 {
		s = "0, or " + s
	}
	return s
}

// wrap breaks s into lines of at most width columns, each after indent.
func wrap(s, indent string, width int) string {
	var b strings.Builder
	line := indent
	for _, w := range strings.Fields(s) {
		if line != indent && len([]rune(line))+1+len([]rune(w)) > width {
			b.WriteString(line + "\n")
			line = indent
		}
		if line != indent {
			line += " "
		}
		line += w
	}
	return b.String() + line + "\n"
}

func mdCell(s string) string { return strings.ReplaceAll(s, "|", `\|`) }
