//go:build unix

package main

// Fail-safe and crash-safety tests of 'padline run' (DEVELOPERS.md "Benchmarks, studies and torture"):
// the built binary under SIGTERM and SIGKILL against the simulated station,
// and the fixture's state after a stop or a panic in-process.
//
// The full crash torture (500 serials, 20 SIGKILLs) is the default; it takes a
// few seconds. Scale it with
//
//	go test ./cmd/padline -run TestCrashTorture -v -torture.units 2000 -torture.kills 100 -torture.seed 7

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"periph.io/x/conn/v3/gpio"

	"padline/fixture/sim"
	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
)

var (
	tortureUnits = flag.Int("torture.units", 500, "crash torture: serials to test (the torture target is 500)")
	tortureKills = flag.Int("torture.kills", 20, "crash torture: SIGKILLs (the torture target is 20)")
	tortureSeed  = flag.Uint64("torture.seed", 1, "crash torture: seed of the kill moments")
)

// The padline binary, built once for every subprocess test of the package.
var (
	binOnce sync.Once
	binDir  string
	binPath string
	binErr  error
)

func TestMain(m *testing.M) {
	flag.Parse()
	code := m.Run()
	if binDir != "" {
		_ = os.RemoveAll(binDir)
	}
	os.Exit(code)
}

// padlineBinary builds the command from this package's directory (the test's
// working directory) once and returns the binary's path.
func padlineBinary(t *testing.T) string {
	t.Helper()
	binOnce.Do(func() {
		binDir, binErr = os.MkdirTemp("", "padline-torture-")
		if binErr != nil {
			return
		}
		binPath = filepath.Join(binDir, "padline")
		out, err := exec.Command("go", "build", "-o", binPath, ".").CombinedOutput()
		if err != nil {
			binErr = fmt.Errorf("go build: %w\n%s", err, out)
		}
	})
	if binErr != nil {
		t.Fatal(binErr)
	}
	return binPath
}

// proc is one running 'padline run' whose stdout is read line by line.
type proc struct {
	cmd    *exec.Cmd
	stdin  io.WriteCloser // nil when stdin was given whole
	lines  chan string    // complete stdout lines, in order; closed at EOF
	got    []string
	tail   string // bytes after the last newline when stdout ended
	eof    chan struct{}
	stderr strings.Builder
}

// startPadline starts bin with args. With input != nil it is stdin whole
// (closed after it); with input == nil stdin is a pipe left open (p.stdin).
func startPadline(t *testing.T, bin string, input *string, args ...string) *proc {
	t.Helper()
	return startPadlineEnv(t, bin, input, nil, args...)
}

// startPadlineEnv is startPadline with env added to the environment.
func startPadlineEnv(t *testing.T, bin string, input *string, env []string, args ...string) *proc {
	t.Helper()
	p := &proc{cmd: exec.Command(bin, args...), lines: make(chan string, 1<<16), eof: make(chan struct{})}
	if env != nil {
		p.cmd.Env = append(os.Environ(), env...)
	}
	if input != nil {
		p.cmd.Stdin = strings.NewReader(*input)
	} else {
		w, err := p.cmd.StdinPipe()
		if err != nil {
			t.Fatal(err)
		}
		p.stdin = w
	}
	p.cmd.Stderr = &p.stderr
	out, err := p.cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := p.cmd.Start(); err != nil {
		t.Fatal(err)
	}
	go func() {
		defer close(p.eof)
		defer close(p.lines)
		r := bufio.NewReader(out)
		for {
			s, err := r.ReadString('\n')
			if err != nil {
				p.tail = s
				return
			}
			p.lines <- strings.TrimSuffix(s, "\n")
		}
	}()
	return p
}

// waitLines collects stdout lines until there are n of them or stdout ends;
// it reports whether n were reached.
func (p *proc) waitLines(n int) bool {
	for len(p.got) < n {
		s, ok := <-p.lines
		if !ok {
			return false
		}
		p.got = append(p.got, s)
	}
	return true
}

// wait reads stdout to its end and reaps the process. It kills the process
// and returns false when that takes longer than limit.
func (p *proc) wait(limit time.Duration) bool {
	timer := time.AfterFunc(limit, func() { _ = p.cmd.Process.Kill() })
	p.waitLines(math.MaxInt)
	<-p.eof
	_ = p.cmd.Wait()
	return timer.Stop()
}

// signaled reports whether the process died of sig.
func (p *proc) signaled(sig syscall.Signal) bool {
	ws, ok := p.cmd.ProcessState.Sys().(syscall.WaitStatus)
	return ok && ws.Signaled() && ws.Signal() == sig
}

// unitLine is one JSON object printed by 'padline run --json' (run.go unitJSON).
type unitLine struct {
	ID         int64    `json:"id"`
	Serial     string   `json:"serial"`
	Verdict    string   `json:"verdict"`
	FailCode   string   `json:"fail_code"`
	PriorFails int      `json:"prior_fails"`
	ClockHz    *float64 `json:"clock_hz"`
	TripPF     *float64 `json:"trip_pf"`
	TripSEPF   *float64 `json:"trip_se_pf"`
	SpreadPF   *float64 `json:"spread_pf"`
	present    map[string]bool
}

func parseUnitLine(s string) (unitLine, error) {
	var u unitLine
	if err := json.Unmarshal([]byte(s), &u); err != nil {
		return u, fmt.Errorf("not a JSON unit line: %q: %w", s, err)
	}
	var keys map[string]json.RawMessage
	_ = json.Unmarshal([]byte(s), &keys)
	u.present = map[string]bool{}
	for k := range keys {
		u.present[k] = true
	}
	if u.Serial == "" || u.ID <= 0 || u.Verdict == "" {
		return u, fmt.Errorf("JSON unit line lacks serial, id or verdict: %q", s)
	}
	return u, nil
}

// sameAsLogged checks a printed unit line against the run the log holds
// under its id: serial, verdict, fail code and every printed measurement,
// value for value (Go's JSON encoding of a float64 reads back exactly).
func sameAsLogged(u unitLine, e *store.Entry) error {
	if e == nil {
		return fmt.Errorf("%s: printed as run %d (%s), which is not in the shift log", u.Serial, u.ID, u.Verdict)
	}
	if e.Serial != u.Serial || string(e.Verdict) != u.Verdict || string(e.FailCode) != u.FailCode {
		return fmt.Errorf("run %d: printed %s %s %q, logged %s %s %q", u.ID, u.Serial, u.Verdict, u.FailCode, e.Serial, e.Verdict, e.FailCode)
	}
	for name, v := range map[string]*float64{"clock_hz": u.ClockHz, "trip_pf": u.TripPF, "trip_se_pf": u.TripSEPF, "spread_pf": u.SpreadPF} {
		i := slices.IndexFunc(e.Measurements, func(m sequences.Measurement) bool { return string(m.Name) == name })
		switch {
		case !u.present[name] && i >= 0:
			return fmt.Errorf("run %d: %s logged but not printed", u.ID, name)
		case !u.present[name]:
		case i < 0:
			return fmt.Errorf("run %d: %s printed but not logged", u.ID, name)
		case v == nil && !math.IsNaN(e.Measurements[i].Value),
			v != nil && *v != e.Measurements[i].Value:
			return fmt.Errorf("run %d: %s printed %v, logged %v", u.ID, name, v, e.Measurements[i].Value)
		}
	}
	return nil
}

// planOrder is the order in which the standard plan, with its checks folded
// into the search, records measurements: the idle step's clock and idle
// readings, then the trip search's prior, release and the rest of the idle
// check, and its trip point (with the fixture offset, when a check with lab
// trip points set one, before it) (sequences/plan.go NewPlan and its step
// functions), then the retest flag Session.Test appends to a pass after
// fails (sequences/session.go).
var planOrder = []string{
	"idle/clock_hz", "idle/idle_highs",
	"trip_search/prior_sigma_pf", "trip_search/prior_sigma_log_sd", "trip_search/prior_sigma_units",
	"trip_search/prior_sigma_log_units", "trip_search/prior_trip_pf", "trip_search/prior_trip_sd_pf", "trip_search/sigma_ref_pf",
	"trip_search/trip_ladder_pf", "trip_search/fixture_offset_pf", "trip_search/fixture_offset_u_pf",
	"release/release_lows", "idle/idle_lows",
	"trip_search/trip_pf", "trip_search/trip_se_pf", "trip_search/spread_pf", "retest/prior_fails",
}

// wholeRun reports a run that is not what a finished plan records: its
// measurements out of plan order, a pass without every measurement of the
// standard plan,
// a fail without a fail code or with measurements after its failing step,
// a trip search half-recorded.
func wholeRun(e *store.Entry) error {
	var names []string
	at := -1
	for _, m := range e.Measurements {
		n := string(m.Step) + "/" + string(m.Name)
		i := slices.Index(planOrder, n)
		if i <= at {
			return fmt.Errorf("run %d (%s): measurement %s out of plan order or repeated: %v", e.ID, e.Serial, n, names)
		}
		at = i
		names = append(names, n)
	}
	has := func(n string) bool { return slices.Contains(names, n) }
	if has("trip_search/trip_se_pf") != has("trip_search/spread_pf") || (has("trip_search/trip_se_pf") && !has("trip_search/trip_pf")) {
		return fmt.Errorf("run %d (%s): trip search half-recorded: %v", e.ID, e.Serial, names)
	}
	switch e.Verdict {
	case sequences.Pass:
		if e.FailCode != "" {
			return fmt.Errorf("run %d (%s): pass with fail code %q", e.ID, e.Serial, e.FailCode)
		}
		for _, n := range []string{"idle/clock_hz", "idle/idle_highs", "release/release_lows", "idle/idle_lows",
			"trip_search/trip_pf", "trip_search/trip_se_pf", "trip_search/spread_pf"} {
			if !has(n) {
				return fmt.Errorf("run %d (%s): pass without %s: %v", e.ID, e.Serial, n, names)
			}
		}
		for _, m := range e.Measurements {
			if m.Verdict != sequences.Pass {
				return fmt.Errorf("run %d (%s): pass with failing %s", e.ID, e.Serial, m.Name)
			}
		}
	case sequences.Fail:
		if e.FailCode == "" || len(names) == 0 {
			return fmt.Errorf("run %d (%s): fail without fail code or measurements: %q %v", e.ID, e.Serial, e.FailCode, names)
		}
		first := slices.IndexFunc(e.Measurements, func(m sequences.Measurement) bool { return m.Verdict == sequences.Fail })
		if first < 0 && e.FailCode != sequences.CodeTripNoisy {
			return fmt.Errorf("run %d (%s): fail %s without a failing measurement: %v", e.ID, e.Serial, e.FailCode, names)
		}
		for _, m := range e.Measurements[max(first, 0):] {
			if first >= 0 && m.Step != e.Measurements[first].Step {
				return fmt.Errorf("run %d (%s): measurements after the failing step %s: %v", e.ID, e.Serial, e.Measurements[first].Step, names)
			}
		}
	case sequences.StationFault:
		if e.FailCode == "" {
			return fmt.Errorf("run %d (%s): station fault without a code", e.ID, e.Serial)
		}
	default:
		return fmt.Errorf("run %d (%s): verdict %q", e.ID, e.Serial, e.Verdict)
	}
	return nil
}

// logRuns reads every run of the shift log at path, after its integrity check.
func logRuns(t *testing.T, path string) map[int64]*store.Entry {
	t.Helper()
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if err := db.IntegrityCheck(context.Background()); err != nil {
		t.Fatalf("integrity check: %v", err)
	}
	runs := map[int64]*store.Entry{}
	for e, err := range db.Runs(context.Background(), store.Filter{}) {
		if err != nil {
			t.Fatal(err)
		}
		runs[e.ID] = e
	}
	return runs
}

func serialRange(from, n int) []string {
	s := make([]string, n)
	for i := range s {
		s[i] = fmt.Sprintf("QM205-%06d", from+i)
	}
	return s
}

// holdAt starts 'padline run --json' on serials with the unit hold of
// testhook.go at serial/step, and returns once the binary says it holds
// that unit: the fixture is then powered, mid-test, and stays so until the
// signal. No timer races the machine's load; the bound is only a hang
// guard.
func holdAt(t *testing.T, bin, db string, serials []string, serial string, step sequences.StepName) *proc {
	t.Helper()
	fifo := filepath.Join(t.TempDir(), "held")
	if err := syscall.Mkfifo(fifo, 0o600); err != nil {
		t.Fatal(err)
	}
	input := strings.Join(serials, "\n") + "\n"
	p := startPadlineEnv(t, bin, &input, []string{"PADLINE_TEST_HOLD=" + serial + "/" + string(step), "PADLINE_TEST_HOLD_MARK=" + fifo},
		"run", "--variant", "QM-205", "--station", "demo-sim", "--db", db, "--json")
	held := make(chan string, 1)
	go func() {
		f, err := os.Open(fifo) // blocks until the binary opens it to write
		if err != nil {
			held <- err.Error()
			return
		}
		defer f.Close()
		line, _ := bufio.NewReader(f).ReadString('\n')
		held <- strings.TrimSpace(line)
	}()
	select {
	case got := <-held:
		if want := "held " + serial + " " + string(step); got != want {
			p.wait(time.Minute)
			t.Fatalf("hold marker %q, want %q", got, want)
		}
	case <-p.eof:
		p.wait(time.Minute)
		// Unblock the reader's open.
		if f, err := os.OpenFile(fifo, os.O_WRONLY|syscall.O_NONBLOCK, 0); err == nil {
			f.Close()
		}
		t.Fatalf("padline ended before holding %s at %s: %s", serial, step, p.stderr.String())
	case <-time.After(2 * time.Minute):
		_ = p.cmd.Process.Kill()
		p.wait(time.Minute)
		t.Fatalf("no hold of %s at %s within 2 minutes: %s", serial, step, p.stderr.String())
	}
	return p
}

// TestSIGTERMMidUnit sends SIGTERM to 'padline run --json' while a unit is
// held mid-test at a known step (testhook.go): after power-up, in the
// middle of the plan and after the trip search, on the first, second and
// fifth unit. Each must exit 0 with exactly the printed runs in the log,
// say on stderr that the held unit was stopped with the fixture halted, and
// log nothing of that unit.
func TestSIGTERMMidUnit(t *testing.T) {
	bin := padlineBinary(t)
	serials := serialRange(1, 20)
	for _, tc := range []struct {
		unit int // 0-based index of the held unit
		step sequences.StepName
	}{
		{0, sequences.StepPowerUp},
		{1, sequences.StepIdle},
		{4, sequences.StepTripSearch},
	} {
		held := serials[tc.unit]
		t.Run(string(tc.step), func(t *testing.T) {
			db := filepath.Join(t.TempDir(), "shift.db")
			checkStation(t, db)
			p := holdAt(t, bin, db, serials, held, tc.step)
			if err := p.cmd.Process.Signal(syscall.SIGTERM); err != nil {
				t.Fatal(err)
			}
			if !p.wait(time.Minute) {
				t.Fatalf("still running a minute after SIGTERM")
			}
			stderr := p.stderr.String()
			if code := p.cmd.ProcessState.ExitCode(); code != 0 {
				t.Fatalf("exit %d after SIGTERM (signaled: %v)\nstderr:\n%s", code, p.signaled(syscall.SIGTERM), stderr)
			}
			if p.tail != "" || strings.Contains(stderr, "padline:") {
				t.Fatalf("partial stdout line %q or an error on stderr:\n%s", p.tail, stderr)
			}
			if len(p.got) != tc.unit {
				t.Errorf("%d verdicts printed, want the %d units before the held one", len(p.got), tc.unit)
			}
			runs := logRuns(t, db)
			for i, s := range p.got {
				u, err := parseUnitLine(s)
				if err != nil {
					t.Fatal(err)
				}
				if u.Serial != serials[i] {
					t.Fatalf("line %d is %s, want %s (units in scan order)", i, u.Serial, serials[i])
				}
				if err := sameAsLogged(u, runs[u.ID]); err != nil {
					t.Error(err)
				}
			}
			if len(runs) != len(p.got) {
				t.Errorf("%d runs logged, %d verdicts printed", len(runs), len(p.got))
			}
			if !strings.Contains(stderr, "stopped: "+held+" was not finished") || !strings.Contains(stderr, "Fixture halted") {
				t.Errorf("stderr does not say %s was stopped with the fixture halted:\n%s", held, stderr)
			}
			for _, e := range runs {
				if e.Serial == held {
					t.Errorf("the interrupted unit %s was logged as run %d", held, e.ID)
				}
			}
		})
	}
}

// TestSIGTERMWhileWaitingForScan stops 'padline run' while it waits for the
// next serial, the station's usual state between units (and when systemd
// stops the service): it must exit promptly, not at the next scan.
func TestSIGTERMWhileWaitingForScan(t *testing.T) {
	bin := padlineBinary(t)
	db := filepath.Join(t.TempDir(), "shift.db")
	checkStation(t, db)
	// The binary writes "scan N" to the FIFO as its Nth wait for a serial
	// begins (testhook.go): "scan 2" is the wait after the first unit,
	// past the stop check at the top of the loop, so the signal lands in
	// the read itself, whatever the machine's load.
	fifo := filepath.Join(t.TempDir(), "scan")
	if err := syscall.Mkfifo(fifo, 0o600); err != nil {
		t.Fatal(err)
	}
	marks := make(chan string, 4)
	go func() {
		for {
			f, err := os.Open(fifo) // blocks until the binary opens it to write
			if err != nil {
				return
			}
			line, _ := bufio.NewReader(f).ReadString('\n')
			f.Close()
			if marks <- strings.TrimSpace(line); strings.TrimSpace(line) == "scan 2" {
				return
			}
		}
	}()
	p := startPadlineEnv(t, bin, nil, []string{"PADLINE_TEST_SCAN_MARK=" + fifo},
		"run", "--variant", "QM-205", "--station", "demo-sim", "--db", db, "--json")
	defer p.stdin.Close()
	if _, err := io.WriteString(p.stdin, "QM205-000001\n"); err != nil {
		t.Fatal(err)
	}
	if !p.waitLines(1) {
		p.wait(time.Minute)
		t.Fatalf("no verdict line: %s", p.stderr.String())
	}
	for m := ""; m != "scan 2"; {
		select {
		case m = <-marks:
		case <-p.eof:
			p.wait(time.Minute)
			t.Fatalf("padline ended before waiting for a second serial: %s", p.stderr.String())
		}
	}
	if err := p.cmd.Process.Signal(syscall.SIGTERM); err != nil {
		t.Fatal(err)
	}
	// A generous bound on a hang, not a speed target: a clean stop takes
	// milliseconds.
	if !p.wait(5 * time.Second) {
		t.Fatalf("still waiting for a scan 5 s after SIGTERM (killed): the stdin read in run.go does not watch the stop request")
	}
	if code := p.cmd.ProcessState.ExitCode(); code != 0 {
		t.Errorf("exit %d after SIGTERM: %s", code, p.stderr.String())
	}
	if runs := logRuns(t, db); len(runs) != 1 {
		t.Errorf("%d runs logged, want the 1 printed", len(runs))
	}
}

// tortureStart is what a crash torture starts from: the -torture.* units
// and kills (fewer with -short), the padline binary, a shift log that has
// passed the station check, the serials, and the kill moments' generator
// (seeded by -torture.seed, on the torture's own stream).
func tortureStart(t *testing.T, stream uint64) (units, kills int, bin, db string, serials []string, rng *rand.Rand) {
	t.Helper()
	units, kills = *tortureUnits, *tortureKills
	if testing.Short() {
		units, kills = min(units, 100), min(kills, 5)
	}
	bin = padlineBinary(t)
	db = filepath.Join(t.TempDir(), "shift.db")
	checkStation(t, db)
	return units, kills, bin, db, serialRange(1, units), rand.New(rand.NewPCG(*tortureSeed, stream))
}

// TestCrashTorture runs 'padline run --json' on the serials, SIGKILLs it at
// seeded random moments (after a random number of verdict lines plus a random
// 0–3 ms, so kills land in start-up, inside units and inside commits), and
// restarts it each time on the serials that have no verdict printed yet, as
// an operator re-scans the units without a verdict. At the end the shift log
// must pass its integrity check, hold every printed verdict unchanged, hold
// only whole runs, and hold a run for every serial.
func TestCrashTorture(t *testing.T) {
	units, kills, bin, db, serials, rng := tortureStart(t, 0x4b494c4c)

	printed := map[string]unitLine{}
	refused := map[string]string{}
	remaining := serials
	killed, starts, partial := 0, 0, 0
	var delays []time.Duration
	start := time.Now()
	for len(remaining) > 0 {
		if starts > kills+10 {
			t.Fatalf("no progress after %d starts; %d serials left", starts, len(remaining))
		}
		starts++
		input := strings.Join(remaining, "\n") + "\n"
		p := startPadline(t, bin, &input, "run", "--variant", "QM-205", "--station", "demo-sim", "--db", db, "--json")
		if killed < kills {
			// Spread the remaining kills over the remaining serials.
			after := rng.IntN(max(1, len(remaining)/(kills-killed+1)))
			delay := time.Duration(rng.IntN(3000)) * time.Microsecond
			if p.waitLines(after) {
				time.Sleep(delay)
				_ = p.cmd.Process.Kill()
				delays = append(delays, delay)
			}
		}
		if !p.wait(time.Minute) {
			t.Fatalf("start %d: still running after a minute", starts)
		}
		if p.signaled(syscall.SIGKILL) {
			killed++
			if p.tail != "" {
				partial++
			}
		} else if code := p.cmd.ProcessState.ExitCode(); code != 0 || p.tail != "" {
			t.Fatalf("start %d: exit %d, partial line %q\nstderr:\n%s", starts, code, p.tail, p.stderr.String())
		}
		// The process works through its input in order.
		for i, s := range p.got {
			serial := remaining[i]
			if rest, ok := strings.CutPrefix(s, "NOT TESTED  "); ok {
				// The retest limit: the serial was logged (and not
				// shown) by enough killed processes already.
				refused[serial] = rest
				continue
			}
			u, err := parseUnitLine(s)
			if err != nil {
				t.Fatalf("start %d: %v", starts, err)
			}
			if u.Serial != serial {
				t.Fatalf("start %d: line %d is %s, want %s: the station did not continue where it stopped", starts, i, u.Serial, serial)
			}
			printed[serial] = u
		}
		remaining = remaining[len(p.got):]
	}
	elapsed := time.Since(start)

	runs := logRuns(t, db)
	bySerial := map[string][]*store.Entry{}
	halfWritten := 0
	for _, e := range runs {
		bySerial[e.Serial] = append(bySerial[e.Serial], e)
		if err := wholeRun(e); err != nil {
			halfWritten++
			t.Error(err)
		}
	}
	lost, shownIDs := 0, map[int64]bool{}
	for _, u := range printed {
		if err := sameAsLogged(u, runs[u.ID]); err != nil {
			lost++
			t.Error(err)
		}
		shownIDs[u.ID] = true
	}
	missing := 0
	for _, s := range serials {
		if len(bySerial[s]) == 0 {
			missing++
			t.Errorf("%s: no run in the shift log", s)
		}
	}
	unshown := 0
	for id, e := range runs {
		if !shownIDs[id] {
			unshown++
			if _, ok := printed[e.Serial]; !ok && refused[e.Serial] == "" {
				t.Errorf("run %d of %s is logged, but the serial got neither a verdict line nor a refusal", id, e.Serial)
			}
		}
	}
	// A killed process can have committed at most the one unit it was
	// about to print.
	if unshown > killed {
		t.Errorf("%d runs logged without a printed verdict after %d kills", unshown, killed)
	}
	if killed != kills {
		t.Errorf("%d kills, want %d", killed, kills)
	}
	slices.Sort(delays)
	if len(delays) == 0 {
		delays = []time.Duration{0}
	}
	t.Logf("crash torture: %d serials, %d starts, %d SIGKILLs (delay after the last line read: %v … %v), %s",
		units, starts, killed, delays[0], delays[len(delays)-1], elapsed.Round(time.Millisecond))
	t.Logf("crash torture: %d runs in the log, %d verdicts printed and checked against it, %d runs committed but not shown (retested after restart), %d refused by the retest limit",
		len(runs), len(printed), unshown, len(refused))
	t.Logf("crash torture: integrity_check ok; lost %d (printed, not logged or different); half-written %d; serials without a run %d; partial stdout lines at a kill %d",
		lost, halfWritten, missing, partial)
}

// tripwire is the station a plan drives, with one trap: on the n-th call of
// one operation it lets the call through, notes whether the fixture was live
// (unit powered, a rung coil energised) and then fires.
type tripwire struct {
	sequences.Station
	line      *sim.Line
	op        string
	n, calls  int
	fire      func()
	live      bool
	triggered bool
}

func (w *tripwire) after(op string) {
	if op != w.op {
		return
	}
	w.calls++
	if w.calls != w.n {
		return
	}
	w.triggered = true
	w.live = w.line.Powered()
	w.fire()
}

func (w *tripwire) Power(on bool) error {
	err := w.Station.Power(on)
	if on {
		w.after("power_on")
	}
	return err
}

func (w *tripwire) SetPattern(p uint16) error {
	err := w.Station.SetPattern(p)
	if p != 0 {
		w.after("set_pattern")
	}
	return err
}

func (w *tripwire) Sample(k int, period time.Duration) (int, error) {
	h, err := w.Station.Sample(k, period)
	w.after("sample")
	return h, err
}

func (w *tripwire) MeasureClock(periods int, timeout time.Duration) (float64, error) {
	hz, err := w.Station.MeasureClock(periods, timeout)
	w.after("measure_clock")
	return hz, err
}

var errStepPanic = errors.New("torture: a step panicked")

// TestStopAndPanicLeaveFixtureHalted builds the station as 'padline run'
// does (demo-sim line, fixture, QM-205 plan, shift log, session) and stops
// the unit mid-plan, by cancelling the context or by a panic inside a step,
// at several points where the unit is powered, and once before the unit
// starts (a stop request between units must also read as ErrAborted, which
// 'padline run' treats as a clean stop; any other error exits 1). Afterwards the unit power pin
// and every rung pin must be low, every contact open once the relays had
// their operate + bounce time, and nothing of the unit logged.
func TestStopAndPanicLeaveFixtureHalted(t *testing.T) {
	base, err := session.OpenRig(context.Background(), "QM-205", "demo-sim", "", session.RigOptions{})
	if err != nil {
		t.Fatal(err)
	}
	v, st := base.Variant, base.Station
	db, err := store.Open(filepath.Join(t.TempDir(), "shift.db"))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	hash, err := db.PutVariant(context.Background(), v.Name, v.Source.Raw)
	if err != nil {
		t.Fatal(err)
	}

	cases := []struct {
		op     string
		n      int
		panics bool
	}{
		{"before", 0, false}, // the stop request came before the unit started
		{"power_on", 1, false},
		{"measure_clock", 1, false},
		{"sample", 1, false},      // idle check
		{"set_pattern", 1, false}, // release check: touch level
		{"set_pattern", 4, false}, // trip search, rungs closed
		{"sample", 12, false},
		{"power_on", 1, true},
		{"measure_clock", 1, true},
		{"set_pattern", 4, true},
		{"sample", 12, true},
	}
	for i, c := range cases {
		how := "stop"
		if c.panics {
			how = "panic"
		}
		t.Run(fmt.Sprintf("%s_after_%s_%d", how, c.op, c.n), func(t *testing.T) {
			rig, err := base.Reopen() // a line of its own, the limits computed once
			if err != nil {
				t.Fatal(err)
			}
			line := rig.Line
			ctx, cancel := context.WithCancel(context.Background())
			defer cancel()
			w := &tripwire{Station: rig.Fixture, line: line, op: c.op, n: c.n, fire: cancel}
			if c.panics {
				w.fire = func() { panic(errStepPanic) }
			}
			sess := &sequences.Session{
				Plan: rig.Plan, Station: w, Clock: rig.Clock, Recorder: db,
				Template: sequences.Run{Variant: v.Name, ConfigHash: hash, Station: st.Name, Fixture: st.Fixture},
				Retest:   &sequences.RetestPolicy{Max: v.Plan.Retest.Max, FlagPassAfterFail: v.Plan.Retest.FlagPassAfterFail},
			}
			serial := fmt.Sprintf("QM205-9%05d", i)
			line.Load(serial)
			if c.op == "before" {
				cancel()
			}

			var (
				oc       *sequences.Outcome
				testErr  error
				panicked any
			)
			func() {
				defer func() { panicked = recover() }()
				oc, testErr = sess.Test(ctx, serial)
			}()

			if c.op != "before" && (!w.triggered || !w.live) {
				t.Fatalf("the trap (%s #%d) fired %v with the unit powered %v: the case tests nothing", c.op, c.n, w.triggered, w.live)
			}
			if c.panics {
				if panicked != errStepPanic {
					t.Errorf("panic %v escaped, want the step's panic re-raised", panicked)
				}
			} else if oc != nil || !errors.Is(testErr, sequences.ErrAborted) {
				t.Errorf("stopped unit: outcome %v, error %v; want no outcome and ErrAborted", oc, testErr)
			}
			pins := line.Pins()
			if line.Powered() {
				t.Error("unit still powered")
			}
			for r, pin := range pins.Ladder {
				if lv := pin.(interface{ Read() gpio.Level }).Read(); lv != gpio.Low {
					t.Errorf("rung %d coil pin %v", r, lv)
				}
			}
			line.Clock().Sleep(st.Ladder.Operate + st.Ladder.Bounce + time.Millisecond)
			for r := range pins.Ladder {
				if s := line.Relay(r); s != sim.RelayOpen {
					t.Errorf("rung %d contact %v after operate + bounce", r, s)
				}
			}
			if es, err := db.RunsBySerial(context.Background(), serial); err != nil || len(es) != 0 {
				t.Errorf("interrupted unit logged: %d runs, %v", len(es), err)
			}
		})
	}
}
