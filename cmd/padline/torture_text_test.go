//go:build unix

package main

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
)

// TestCrashTortureText is TestCrashTorture on the operator's text output
// (the verdict banner lines, not --json): SIGKILLs at seeded random
// moments, restarts on the serials without a printed verdict, and every
// printed verdict line must match a run of that serial in the shift log
// (verdict, fail code, trip point as printed). Scale it with the same
// -torture.* flags.
func TestCrashTortureText(t *testing.T) {
	units, kills, bin, db, serials, rng := tortureStart(t, 0x54455854)
	type shown struct{ verdict, code, trip string }
	printed := map[string]shown{}
	remaining := serials
	killed, starts := 0, 0
	for len(remaining) > 0 {
		if starts > kills+10 {
			t.Fatalf("no progress after %d starts; %d serials left", starts, len(remaining))
		}
		starts++
		input := strings.Join(remaining, "\n") + "\n"
		p := startPadline(t, bin, &input, "run", "--variant", "QM-205", "--station", "demo-sim", "--db", db)
		if killed < kills {
			// Two banner lines, then about one line per unit.
			after := 2 + rng.IntN(max(1, len(remaining)/(kills-killed+1)))
			if p.waitLines(after) {
				time.Sleep(time.Duration(rng.IntN(3000)) * time.Microsecond)
				_ = p.cmd.Process.Kill()
			}
		}
		if !p.wait(time.Minute) {
			t.Fatalf("start %d: still running after a minute", starts)
		}
		if p.signaled(syscall.SIGKILL) {
			killed++
		} else if code := p.cmd.ProcessState.ExitCode(); code != 0 {
			t.Fatalf("start %d: exit %d\nstderr:\n%s", starts, code, p.stderr.String())
		}
		next := 0
		for _, s := range p.got {
			if strings.HasPrefix(s, "NOT TESTED  ") && next < len(remaining) {
				next++ // the retest limit: logged by killed processes already
				continue
			}
			f := strings.Fields(s)
			if len(f) < 3 || next >= len(remaining) || f[0] != remaining[next] {
				continue // banner, advice and summary lines
			}
			sh := shown{}
			switch {
			case strings.Contains(s, "PASS"):
				sh.verdict = string(sequences.Pass)
			case strings.Contains(s, "STATION FAULT"):
				sh.verdict, sh.code = string(sequences.StationFault), strings.TrimSuffix(f[5], ":")
			case strings.Contains(s, "FAIL"):
				sh.verdict, sh.code = string(sequences.Fail), f[4]
			default:
				t.Fatalf("start %d: unreadable verdict line %q", starts, s)
			}
			// "trip 31.78 pF (limits …)"; a unit without one says "no trip point".
			if i := strings.Index(s, "   trip "); i >= 0 {
				if x := strings.Fields(s[i:]); len(x) > 1 {
					if _, err := strconv.ParseFloat(x[1], 64); err == nil {
						sh.trip = x[1]
					}
				}
			}
			printed[f[0]] = sh
			next++
		}
		remaining = remaining[next:]
	}
	runs := logRuns(t, db)
	bySerial := map[string][]*store.Entry{}
	for _, e := range runs {
		bySerial[e.Serial] = append(bySerial[e.Serial], e)
		if err := wholeRun(e); err != nil {
			t.Error(err)
		}
	}
	lost := 0
	for serial, sh := range printed {
		match := false
		for _, e := range bySerial[serial] {
			trip := ""
			for _, m := range e.Measurements {
				if m.Name == sequences.MeasTripPF {
					trip = fmt.Sprintf("%.2f", m.Value)
				}
			}
			if string(e.Verdict) == sh.verdict && (sh.code == "" || string(e.FailCode) == sh.code) && (sh.trip == "" || sh.trip == trip) {
				match = true
			}
		}
		if !match {
			lost++
			t.Errorf("%s: printed %+v, no such run in the shift log", serial, sh)
		}
	}
	if killed != kills {
		t.Errorf("%d kills, want %d", killed, kills)
	}
	t.Logf("crash torture (text): %d serials, %d starts, %d SIGKILLs, %d runs in the log, %d printed verdicts checked, lost %d",
		units, starts, killed, len(runs), len(printed), lost)
}

// TestLogMovedWhileRunning deletes or renames the shift log under a
// running 'padline run' (then SIGKILLs it, the worst case): no verdict may
// be printed for a run that is not in the file at the log's path, and the
// station must say it halted.
func TestLogMovedWhileRunning(t *testing.T) {
	bin := padlineBinary(t)
	for name, move := range map[string]func(string) error{
		"deleted": func(p string) error {
			for _, f := range []string{p, p + "-wal", p + "-shm"} {
				if err := os.Remove(f); err != nil && !os.IsNotExist(err) {
					return err
				}
			}
			return nil
		},
		"renamed": func(p string) error { return os.Rename(p, p+".moved") },
	} {
		t.Run(name, func(t *testing.T) {
			db := filepath.Join(t.TempDir(), "shift.db")
			checkStation(t, db)
			p := startPadline(t, bin, nil, "run", "--variant", "QM-205", "--station", "demo-sim", "--db", db, "--json")
			for i := 1; i <= 5; i++ {
				if _, err := fmt.Fprintf(p.stdin, "QM205-%06d\n", i); err != nil {
					t.Fatal(err)
				}
			}
			if !p.waitLines(5) {
				p.wait(time.Minute)
				t.Fatalf("no 5 verdicts: %s", p.stderr.String())
			}
			if err := move(db); err != nil {
				t.Fatal(err)
			}
			for i := 6; i <= 10; i++ {
				_, _ = fmt.Fprintf(p.stdin, "QM205-%06d\n", i)
			}
			_, _ = io.WriteString(p.stdin, "")
			time.Sleep(500 * time.Millisecond)
			_ = p.cmd.Process.Kill()
			p.stdin.Close()
			p.wait(time.Minute)
			verdicts, halted := 0, false
			for _, s := range p.got {
				switch {
				case strings.Contains(s, `"halted"`):
					halted = true
				case strings.Contains(s, `"verdict"`):
					verdicts++
				}
			}
			if verdicts != 5 || !halted {
				t.Fatalf("%d verdicts printed (want the 5 before the log was %s), halted %v:\n%s\n%s", verdicts, name, halted, strings.Join(p.got, "\n"), p.stderr.String())
			}
			if name == "renamed" {
				// Put back where the halt message says: the printed runs
				// are all there (the log's write-ahead file stayed at the
				// path).
				if err := os.Rename(db+".moved", db); err != nil {
					t.Fatal(err)
				}
				if runs := logRuns(t, db); len(runs) != 5 {
					t.Errorf("%d runs in the log put back, want the 5 printed", len(runs))
				}
			}
		})
	}
}
