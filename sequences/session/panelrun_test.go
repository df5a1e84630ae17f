package session_test

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"padline/sequences"
	"padline/sequences/session"
)

// panelLog records what a panel run shows.
type panelLog struct {
	started, ended int
	tested         []*session.PanelOutcome
	refused        []string
	locked         string
}

func (p *panelLog) Started(*session.PanelRig, string) { p.started++ }
func (p *panelLog) Locked(why error, fix string)      { p.locked = why.Error() + " | " + fix }
func (p *panelLog) Refused(line string, why error) error {
	p.refused = append(p.refused, line+": "+why.Error())
	return nil
}
func (p *panelLog) Prompt(string) {}
func (p *panelLog) Tested(oc *session.PanelOutcome, _ sequences.Limits, _ error) error {
	p.tested = append(p.tested, oc)
	return nil
}
func (p *panelLog) Aborted(string) {}
func (p *panelLog) Ended(n int)    { p.ended = n }

// RunPanel: the gate refuses an unchecked station (ErrNotReady, with the
// command that clears it); after a check, every scanned panel is tested,
// a bad line refused without testing anything, x-outs left untested.
func TestRunPanelGateLoopAndRefusals(t *testing.T) {
	ctx := context.Background()
	db := filepath.Join(t.TempDir(), "shift.db")
	o := session.Options{Variant: "QM-205", Station: "demo-panel", ShiftLog: db, Operator: "t"}
	var view panelLog
	err := session.RunPanel(ctx, o, session.OneSerial("QM205-0001"), &view)
	if !errors.Is(err, session.ErrNotReady) || !strings.Contains(view.locked, "padline station check --variant QM-205 --station demo-panel") || view.started != 0 {
		t.Fatalf("unchecked: err %v, view %+v", err, view)
	}
	if rep, _, err := session.StationCheck(ctx, "QM-205", "demo-panel", db, session.RigOptions{}, nil); err != nil || !rep.OK {
		t.Fatalf("check %+v: %v", rep.Faults, err)
	}
	view = panelLog{}
	in := "QM205-0001\n\nQM205-0002 x:3\nQM205-0003 3\nQM205-0004 x:9\n"
	if err := session.RunPanel(ctx, o, session.LineScanner(strings.NewReader(in)), &view); err != nil {
		t.Fatal(err)
	}
	if view.started != 1 || view.ended != 2 || len(view.tested) != 2 || len(view.refused) != 2 {
		t.Fatalf("view %+v", view)
	}
	if oc := view.tested[1]; oc.Panel != "QM205-0002" || !oc.XOut[2] || oc.Runs[2] != nil || oc.Runs[0] == nil || oc.IDs[0] == 0 {
		t.Errorf("panel with an x-out at site 3: %+v", oc)
	}
	if !strings.Contains(view.refused[0], "want x:SITES after the label") || !strings.Contains(view.refused[1], "x-out \"9\"") {
		t.Errorf("refusals %q", view.refused)
	}
}

// With sites.serials: scan every site's label is scanned, "-" an x-out;
// the panel takes its label from the first tested site.
func TestParsePanelLineScanEach(t *testing.T) {
	b, err := os.ReadFile(filepath.Join("defaults", "stations", "demo-panel.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "scan-panel.yaml")
	if err := os.WriteFile(path, []byte(strings.Replace(string(b), "serials: pattern", "serials: scan", 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	r, _, _ := panelRig(t, path)
	if !r.Station.Sites.ScanEach {
		t.Fatal("serials: scan not read")
	}
	line := "- QM205-000102 QM205-000103 QM205-000104 QM205-000105 QM205-000106 QM205-000107 QM205-000108"
	label, serials, xout, err := session.ParsePanelLine(r, line)
	if err != nil || label != "panel-QM205-000102" || !xout[0] || xout[1] || serials[7] != "QM205-000108" {
		t.Fatalf("label %q serials %v xout %v: %v", label, serials, xout, err)
	}
	if _, _, _, err := session.ParsePanelLine(r, "QM205-000101 QM205-000102"); err == nil || !strings.Contains(err.Error(), "want 8 site labels") {
		t.Errorf("two labels for eight sites: %v", err)
	}
	if _, _, _, err := session.ParsePanelLine(r, strings.Repeat("- ", 7)+"nonsense"); !errors.Is(err, session.ErrPanelSerials) {
		t.Errorf("a label off the serial pattern: %v", err)
	}
}
