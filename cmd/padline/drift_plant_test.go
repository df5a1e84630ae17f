package main

import (
	"fmt"
	"reflect"
	"strings"
	"testing"
	"time"

	"padline/store/driftreport"
)

// driftPlantSameVerdict: 'padline drift' on the plant database gives,
// for the runs a station forwarded, the verdict sentence and the alarms
// (serial, time, chart, rule, in order) its own shift log gives: with the
// provisional baseline, under --by station, and with a baseline approved
// over the same window on each ('drift baseline set --db postgres://…';
// DEVELOPERS.md "Approved baselines on the plant"). db is a demo shift
// with a step whose change the demo put at changeSerial, forwarded to url
// (TestPlantSameNumbersAsShiftLog, which skips without PostgreSQL and
// fails then under PADLINE_REQUIRE_PARTS=1). It approves a baseline in db.
func driftPlantSameVerdict(t *testing.T, db, url, changeSerial string) {
	t.Helper()
	same := func(name string, args ...string) driftreport.Report {
		t.Helper()
		a := driftJSON(t, append(args, "--db", db)...)
		b := driftJSON(t, append(args, "--db", url)...)
		if a.Verdict == "" || a.Verdict != b.Verdict {
			t.Errorf("%s: verdict\nshift log:   %s\nplant store: %s", name, a.Verdict, b.Verdict)
		}
		if len(a.Groups) != len(b.Groups) {
			t.Fatalf("%s: %d groups on the shift log, %d on the plant store", name, len(a.Groups), len(b.Groups))
		}
		for i := range a.Groups {
			ga, gb := a.Groups[i], b.Groups[i]
			if ga.AlarmCount == 0 || ga.AlarmCount != gb.AlarmCount || !reflect.DeepEqual(alarmLines(ga.Alarms), alarmLines(gb.Alarms)) {
				t.Errorf("%s: alarms differ:\nshift log (%d):\n%s\nplant store (%d):\n%s", name, ga.AlarmCount,
					strings.Join(alarmLines(ga.Alarms), "\n"), gb.AlarmCount, strings.Join(alarmLines(gb.Alarms), "\n"))
			}
			if va, vb := verdictLine(ga.Verdict), verdictLine(gb.Verdict); va != vb {
				t.Errorf("%s: group %q verdict\n%s\n%s", name, ga.Key, va, vb)
			}
		}
		t.Logf("%s: %s (%d alarms)", name, a.Verdict, a.Groups[0].AlarmCount)
		// The text report's first line is the same sentence.
		ta := strings.SplitN(mustCLI(t, append(args, "--db", db)...), "\n", 2)[0]
		tb := strings.SplitN(mustCLI(t, append(args, "--db", url)...), "\n", 2)[0]
		if ta != tb || ta != "verdict          "+a.Verdict {
			t.Errorf("%s: first lines\n%s\n%s", name, ta, tb)
		}
		return a
	}
	rep := same("default watch", "drift", "--variant", "QM-205", "--alarms", "0")
	if v := rep.Groups[0].Verdict; v == nil || !v.Drifting || v.Change == nil || v.Change.Serial != changeSerial {
		t.Errorf("verdict %+v, the demo's change at %s", rep.Groups[0].Verdict, changeSerial)
	}
	same("by station", "drift", "--variant", "QM-205", "--by", "station")

	// Each database keeps the baselines approved on it: approved over the
	// same window on the shift log and on the plant store, the centre, σ
	// and verdict are the same.
	pts := driftJSON(t, "drift", "--db", db, "--variant", "QM-205")
	first := pts.Groups[0].First.Format(time.RFC3339Nano)
	for _, on := range []string{db, url} {
		mustCLI(t, "drift", "baseline", "set", "--db", on, "--variant", "QM-205", "--since", first, "--until", changeTime(t, rep), "--name", "before the step")
	}
	appr := driftJSON(t, "drift", "--db", db, "--variant", "QM-205")
	b := appr.Groups[0].Baseline.Approved
	if b == nil {
		t.Fatalf("no approved baseline used: %+v", appr.Groups[0].Baseline)
	}
	a := appr.Verdict
	p := driftJSON(t, "drift", "--db", url, "--variant", "QM-205")
	if pb := p.Groups[0].Baseline.Approved; pb == nil || pb.Centre != b.Centre || pb.Sigma != b.Sigma || pb.N != b.N || pb.FirstSerial != b.FirstSerial || pb.LastSerial != b.LastSerial {
		t.Errorf("approved baselines differ:\nshift log:   %+v\nplant store: %+v", b, pb)
	}
	if a == "" || a != p.Verdict {
		t.Errorf("approved baseline: verdict\nshift log:   %s\nplant store: %s", a, p.Verdict)
	}
	t.Logf("approved baseline: %s", a)
	if la, lb := alarmLines(appr.Groups[0].Alarms), alarmLines(p.Groups[0].Alarms); !reflect.DeepEqual(la, lb) {
		t.Errorf("approved baseline: alarms differ:\nshift log:\n%s\nplant store:\n%s", strings.Join(la, "\n"), strings.Join(lb, "\n"))
	}
}

// changeTime is the time of the verdict's change point, as --until takes it.
func changeTime(t *testing.T, rep driftreport.Report) string {
	t.Helper()
	v := rep.Groups[0].Verdict
	if v == nil || v.Change == nil || v.Change.Time == nil {
		t.Fatalf("no change point: %+v", v)
	}
	return v.Change.Time.Format(time.RFC3339Nano)
}

// alarmLines are the alarms as the report lists them.
func alarmLines(al []driftreport.Alarm) []string {
	var out []string
	for _, a := range al {
		when := ""
		if a.Time != nil {
			when = a.Time.UTC().Format("15:04:05.000")
		}
		out = append(out, fmt.Sprintf("%d %s %s %s %s %s", a.Seq, a.Serial, when, a.Chart, a.Rule, a.Note))
	}
	return out
}

// verdictLine is a group's verdict with its points named by serial and
// time (UTC), for comparing.
func verdictLine(v *driftreport.Verdict) string {
	if v == nil {
		return "none"
	}
	pt := func(p *driftreport.Point) string {
		if p == nil || p.Time == nil {
			return "-"
		}
		return p.Serial + " " + p.Time.UTC().Format(time.RFC3339Nano)
	}
	return fmt.Sprintf("%s | drifting %v, %d alarms, %d earlier, shift %g pF %g σ, change %s, signal %s, %s, %s",
		v.Text, v.Drifting, v.Alarms, v.Earlier, v.ShiftPF, v.ShiftSigma, pt(v.Change), pt(v.Signal), v.Rule, v.Where)
}
