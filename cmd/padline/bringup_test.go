package main

import (
	"context"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
)

// TestBringUpFromREADME brings up a fresh simulated station made from
// deploy/station.example.yaml with exactly the commands of the README's
// "Bringing up a station" block (validate, register-ref, check, study,
// limits pending and approve), then starts it as deploy/padline.service
// does, and tests units (issue #20 "Done when").
func TestBringUpFromREADME(t *testing.T) {
	readme, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	m := regexp.MustCompile("(?s)### Bringing up a station\n.*?```sh\n(.*?)```").FindSubmatch(readme)
	if m == nil {
		t.Fatal(`README has no "Bringing up a station" section with a sh block`)
	}
	dir := t.TempDir()
	example, err := os.ReadFile("../../deploy/station.example.yaml")
	if err != nil {
		t.Fatal(err)
	}
	// The example is a gpio station with its log under /var/lib: make it a
	// simulated one logging here; nothing else changes.
	st := strings.Replace(string(example), "\ndriver: gpio\n", "\ndriver: sim\n", 1)
	st = regexp.MustCompile(`(?m)^shift_log: .*$`).ReplaceAllString(st, "shift_log: "+filepath.Join(dir, "shift.db"))
	station, variant := filepath.Join(dir, "station.yaml"), filepath.Join(dir, "QM-205.yaml")
	v, err := os.ReadFile("../../testdata/variants/QM-205.yaml")
	if err != nil {
		t.Fatal(err)
	}
	for p, b := range map[string][]byte{station: []byte(st), variant: v} {
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	local := strings.NewReplacer("/etc/padline/station.yaml", station, "/etc/padline/variants/QM-205.yaml", variant)
	ctx := context.Background()
	var ran []string
	for _, line := range strings.Split(string(m[1]), "\n") {
		line = strings.TrimSpace(line)
		if strings.HasPrefix(line, "systemctl enable") {
			line = "sudo -u padline " + serviceExecStart(t)
		}
		cmd, ok := strings.CutPrefix(line, "sudo -u padline padline ")
		if !ok {
			continue // comments, systemctl status
		}
		args := shellWords(local.Replace(cmd))
		stdin := ""
		if args[0] == "run" {
			stdin = "QM205-000001\nQM205-000002\nQM205-000003\n"
		}
		out, errs, code := runPadline(t, ctx, stdin, args...)
		ran = append(ran, args[0]+" "+args[1])
		switch {
		case args[0] == "run":
			// --service: the end of stdin ends the run with an error.
			if code == exitStationRefused || strings.Count(out, "======== PASS") < 2 {
				t.Fatalf("padline %s: exit %d\n%s\n%s", cmd, code, out, errs)
			}
		case code != 0:
			t.Fatalf("padline %s: exit %d\n%s\n%s", cmd, code, out, errs)
		}
		if args[1] == "register-ref" && !strings.Contains(out, "written") {
			t.Errorf("register-ref did not write the station file:\n%s", out)
		}
	}
	if want := "station validate,station register-ref,station check,station study,limits pending,limits approve,run --service"; strings.Join(ran, ",") != want {
		t.Errorf("ran %s, want %s", strings.Join(ran, ","), want)
	}
}

// serviceExecStart is deploy/padline.service's command line with the
// variant from padline.env and no extra arguments.
func serviceExecStart(t *testing.T) string {
	unit, err := os.ReadFile("../../deploy/padline.service")
	if err != nil {
		t.Fatal(err)
	}
	m := regexp.MustCompile(`(?m)^ExecStart=/usr/local/bin/(padline .*)$`).FindSubmatch(unit)
	if m == nil {
		t.Fatal("padline.service has no ExecStart")
	}
	return strings.NewReplacer("${PADLINE_VARIANT}", "/etc/padline/variants/QM-205.yaml", " $PADLINE_ARGS", "").Replace(string(m[1]))
}

// shellWords splits a command line at spaces outside double quotes.
func shellWords(s string) []string {
	var out []string
	var cur strings.Builder
	quoted, any := false, false
	for _, r := range s {
		switch {
		case r == '"':
			quoted, any = !quoted, true
		case r == ' ' && !quoted:
			if any {
				out = append(out, cur.String())
			}
			cur.Reset()
			any = false
		default:
			cur.WriteRune(r)
			any = true
		}
	}
	if any {
		out = append(out, cur.String())
	}
	return out
}
