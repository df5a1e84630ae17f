//go:build unix

package main

import (
	"io"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// SIGHUP and SIGQUIT stop 'padline run' through the same clean halt as
// SIGTERM, and exit 128 + the signal's number so a service restarts it
// (instead of dying of the signal with the fixture as it was).
func TestHangupAndQuitHaltFixture(t *testing.T) {
	bin := padlineBinary(t)
	for _, sig := range []syscall.Signal{syscall.SIGHUP, syscall.SIGQUIT} {
		t.Run(sig.String(), func(t *testing.T) {
			db := filepath.Join(t.TempDir(), "shift.db")
			checkStation(t, db)
			p := startPadline(t, bin, nil, "run", "--variant", "QM-205", "--station", "demo-sim", "--db", db, "--json")
			defer p.stdin.Close()
			if _, err := io.WriteString(p.stdin, "QM205-000001\n"); err != nil {
				t.Fatal(err)
			}
			if !p.waitLines(1) {
				p.wait(time.Minute)
				t.Fatalf("no verdict line: %s", p.stderr.String())
			}
			time.Sleep(300 * time.Millisecond)
			if err := p.cmd.Process.Signal(sig); err != nil {
				t.Fatal(err)
			}
			if !p.wait(10 * time.Second) {
				t.Fatalf("still running 10 s after %v (killed)", sig)
			}
			if p.signaled(sig) {
				t.Fatalf("died of %v without halting the fixture", sig)
			}
			if code, want := p.cmd.ProcessState.ExitCode(), 128+int(sig); code != want {
				t.Errorf("exit %d after %v, want %d: %s", code, sig, want, p.stderr.String())
			}
			if !strings.Contains(p.stderr.String(), "fixture halted") {
				t.Errorf("stderr does not say the fixture was halted: %s", p.stderr.String())
			}
			if runs := logRuns(t, db); len(runs) != 1 {
				t.Errorf("%d runs logged, want the 1 printed", len(runs))
			}
		})
	}
}

// With --service the end of input (the console closed, Ctrl-D) is an
// error: the service manager restarts the station instead of leaving the
// line down after a clean exit.
func TestServiceEndOfInputIsError(t *testing.T) {
	bin := padlineBinary(t)
	db := filepath.Join(t.TempDir(), "shift.db")
	checkStation(t, db)
	in := "QM205-000001\n"
	p := startPadline(t, bin, &in, "run", "--service", "--variant", "QM-205", "--station", "demo-sim", "--db", db)
	if !p.wait(time.Minute) {
		t.Fatal("still running a minute after its input ended")
	}
	if code := p.cmd.ProcessState.ExitCode(); code == 0 {
		t.Fatalf("exit 0 at the end of a service's input: %s", p.stderr.String())
	}
	if !strings.Contains(p.stderr.String(), "input ended") {
		t.Errorf("stderr does not say the input ended: %s", p.stderr.String())
	}
	out := strings.Join(p.got, "\n")
	if !strings.Contains(out, "QM205-000001") || !strings.Contains(out, "STATION HALTED") {
		t.Errorf("stdout lacks the verdict or the halt: %s", out)
	}
	// Without --service the end of input stays an ordinary end.
	p = startPadline(t, bin, &in, "run", "--variant", "QM-205", "--station", "demo-sim", "--db", db)
	if !p.wait(time.Minute) {
		t.Fatal("still running")
	}
	if code := p.cmd.ProcessState.ExitCode(); code != 0 {
		t.Fatalf("exit %d at the end of an interactive run's input: %s", code, p.stderr.String())
	}
}
