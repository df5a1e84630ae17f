package main

import (
	"os"
	"regexp"
	"strconv"
	"strings"
	"testing"
)

// The station's service must not restart a refused station (exit 3) in a
// loop, and its Documentation= must be a file the README's install step
// installs (issue #20; README "What the service does").
func TestServiceFile(t *testing.T) {
	unit, err := os.ReadFile("../../deploy/padline.service")
	if err != nil {
		t.Fatal(err)
	}
	readme, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	m := regexp.MustCompile(`(?m)^RestartPreventExitStatus=(.*)$`).FindSubmatch(unit)
	if m == nil || !slicesContain(strings.Fields(string(m[1])), strconv.Itoa(exitStationRefused)) {
		t.Errorf("padline.service does not prevent restarting exit status %d (a refused station)", exitStationRefused)
	}
	for _, d := range regexp.MustCompile(`(?m)^Documentation=file://(\S+)$`).FindAllSubmatch(unit, -1) {
		if !strings.Contains(string(readme), " "+string(d[1])+"\n") {
			t.Errorf("Documentation=%s: the README's install step does not install it", d[1])
		}
	}
	if !strings.Contains(string(readme), "RestartPreventExitStatus=3") {
		t.Error("README does not say that a refused station is not restarted")
	}
}

func slicesContain(xs []string, x string) bool {
	for _, y := range xs {
		if y == x {
			return true
		}
	}
	return false
}
