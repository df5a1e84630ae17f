package sequences_test

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"padline/fixture"
	"padline/sequences"
)

// newTrial returns a trial on a fresh fake station, its run emptied: the
// *Trial that Execute hands back after a plan stopped at once on an open
// lid. Its context is ctx, its clock the fake's, its sample period 2.5 ms,
// and no step budget is in force.
func newTrial(t *testing.T, ctx context.Context) (*sequences.Trial, *fakeStation) {
	t.Helper()
	f := newFake(demoLevels(t), 1)
	f.LidOpen = true
	p, err := sequences.NewPlan(demoConfig(), f.ladder)
	if err != nil {
		t.Fatalf("NewPlan: %v", err)
	}
	tr, err := p.Execute(ctx, f, f.clock, &sequences.Run{})
	if !errors.Is(err, fixture.ErrLidOpen) {
		t.Fatalf("Execute with the lid open: %v", err)
	}
	*tr.Run() = sequences.Run{}
	f.LidOpen, f.Halted, f.N, f.Calls = false, false, 0, map[string]int{}
	return tr, f
}

var (
	errBus  = errors.New("bus glitch")
	errUnit = &sequences.UnitFailure{Code: sequences.CodeNoTrip, Detail: "test"}
)

func TestRetry(t *testing.T) {
	tests := []struct {
		name      string
		n         int
		results   []error // per attempt; the last repeats
		cancelled bool
		attempts  int
		want      error // nil, or what the result wraps
		kept      []int // attempts whose measurement survives
	}{
		{"passes at once", 2, []error{nil}, false, 1, nil, []int{0}},
		{"station error then pass", 2, []error{errBus, nil}, false, 2, nil, []int{1}},
		{"station error twice then pass", 2, []error{errBus, errBus, nil}, false, 3, nil, []int{2}},
		{"station error every time", 2, []error{errBus}, false, 3, errBus, nil},
		{"timeout is a station error", 1, []error{sequences.ErrStepTimeout, nil}, false, 2, nil, []int{1}},
		{"unit failure is never retried", 3, []error{errUnit}, false, 1, errUnit, []int{0}},
		{"station error then unit failure", 3, []error{errBus, errUnit}, false, 2, errUnit, []int{1}},
		{"no retries", 0, []error{errBus}, false, 1, errBus, nil},
		{"context ended", 3, []error{errBus}, true, 1, errBus, []int{0}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			ctx, cancel := context.WithCancel(context.Background())
			defer cancel()
			tr, _ := newTrial(t, ctx)
			// A measurement made before the retried step is never discarded.
			tr.Measure("before", -1, "", sequences.NoLimit, sequences.NoLimit)
			if tc.cancelled {
				cancel()
			}
			attempt := 0
			step := sequences.StepFunc(func(ctx context.Context, tr *sequences.Trial) error {
				tr.Measure("attempt", float64(attempt), "", sequences.NoLimit, sequences.NoLimit)
				err := tc.results[min(attempt, len(tc.results)-1)]
				attempt++
				return err
			})
			err := sequences.Retry(tc.n)(step).Do(ctx, tr)
			if attempt != tc.attempts {
				t.Errorf("%d attempts, want %d", attempt, tc.attempts)
			}
			if tc.want == nil && err != nil || tc.want != nil && !errors.Is(err, tc.want) {
				t.Errorf("err = %v, want %v", err, tc.want)
			}
			ms := tr.Run().Measurements
			if len(ms) != 1+len(tc.kept) || ms[0].Name != "before" {
				t.Fatalf("measurements %+v, want before + attempts %v", ms, tc.kept)
			}
			for i, a := range tc.kept {
				if ms[1+i].Value != float64(a) {
					t.Errorf("kept attempt %g, want %d", ms[1+i].Value, a)
				}
			}
		})
	}
}

// TestRetryStation retries through the trial: a latch pin error on the
// first read, then a good read; each attempt gets its own budget when
// Timeout sits inside Retry.
func TestRetryStation(t *testing.T) {
	tests := []struct {
		name     string
		op       func(f *fakeStation) func(int, string) error
		wrappers func(s sequences.Step) sequences.Step
		want     error
		reads    int
	}{
		{"pin error then a good read", func(*fakeStation) func(int, string) error { return pinErrorOn(1) },
			func(s sequences.Step) sequences.Step { return sequences.Wrap(s, sequences.Retry(1)) }, nil, 3},
		{"pin error twice, one retry", func(*fakeStation) func(int, string) error {
			return func(n int, _ string) error {
				if n <= 2 {
					return latchPinError()
				}
				return nil
			}
		}, func(s sequences.Step) sequences.Step { return sequences.Wrap(s, sequences.Retry(1)) }, errPinRead, 2},
		{"slow read, retried with a fresh budget", func(f *fakeStation) func(int, string) error { return f.slowOn(1, 2*time.Second) },
			func(s sequences.Step) sequences.Step {
				return sequences.Wrap(s, sequences.Retry(1), sequences.Timeout(time.Second))
			}, nil, 3},
		{"slow read, retries share the budget", func(f *fakeStation) func(int, string) error { return f.slowOn(1, 2*time.Second) },
			func(s sequences.Step) sequences.Step {
				return sequences.Wrap(s, sequences.Timeout(time.Second), sequences.Retry(3))
			}, sequences.ErrStepTimeout, 1},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			tr, f := newTrial(t, context.Background())
			f.OpFunc = tc.op(f)
			step := sequences.StepFunc(func(ctx context.Context, tr *sequences.Trial) error {
				if err := tr.Power(true); err != nil {
					return err
				}
				highs, err := tr.Sample(4)
				if err != nil {
					return err
				}
				tr.Measure("highs", float64(highs), "count", 0, 0)
				return nil
			})
			err := tc.wrappers(step).Do(context.Background(), tr)
			if tc.want == nil && err != nil || tc.want != nil && !errors.Is(err, tc.want) {
				t.Errorf("err = %v, want %v", err, tc.want)
			}
			if got := f.Calls["power"] + f.Calls["sample"]; got != tc.reads {
				t.Errorf("%d station calls (%v), want %d", got, f.Calls, tc.reads)
			}
			if n := len(tr.Run().Measurements); (tc.want == nil) != (n == 1) {
				t.Errorf("%d measurements after err %v", n, err)
			}
		})
	}
}

func TestTimeout(t *testing.T) {
	sleep := func(d time.Duration) sequences.Step {
		return sequences.StepFunc(func(_ context.Context, tr *sequences.Trial) error { return tr.Sleep(d) })
	}
	seq := func(steps ...sequences.Step) sequences.Step {
		return sequences.StepFunc(func(ctx context.Context, tr *sequences.Trial) error {
			for _, s := range steps {
				if err := s.Do(ctx, tr); err != nil {
					return err
				}
			}
			return nil
		})
	}
	// sample takes k latch samples, 2.5 ms each on the fake.
	sample := func(k int) sequences.Step {
		return sequences.StepFunc(func(_ context.Context, tr *sequences.Trial) error {
			_, err := tr.Sample(k)
			return err
		})
	}
	power := sequences.StepFunc(func(_ context.Context, tr *sequences.Trial) error { return tr.Power(true) })
	unitFails := sequences.StepFunc(func(_ context.Context, tr *sequences.Trial) error {
		if err := tr.Sleep(2 * time.Second); err != nil {
			return err
		}
		return errUnit
	})
	tests := []struct {
		name  string
		step  sequences.Step
		slow  int // station call made slow by 2 s (0: none)
		want  error
		calls int // station calls that reached the fake
	}{
		{"within budget", sequences.Wrap(seq(sleep(400*time.Millisecond), sleep(400*time.Millisecond)), sequences.Timeout(time.Second)), 0, nil, 0},
		// 1 s exactly is not past the deadline.
		{"exactly the budget", sequences.Wrap(sleep(time.Second), sequences.Timeout(time.Second)), 0, nil, 0},
		{"sleep overruns", sequences.Wrap(sleep(1500*time.Millisecond), sequences.Timeout(time.Second)), 0, sequences.ErrStepTimeout, 0},
		{"slow station call, then another", sequences.Wrap(seq(power, sample(3)), sequences.Timeout(time.Second)), 1, sequences.ErrStepTimeout, 1},
		{"slow last station call", sequences.Wrap(seq(power, sample(3)), sequences.Timeout(time.Second)), 2, sequences.ErrStepTimeout, 2},
		{"401 samples in a 1 s budget", sequences.Wrap(seq(power, sample(401), sample(1)), sequences.Timeout(time.Second)), 0, sequences.ErrStepTimeout, 2},
		// The tighter budget holds whichever wrapper sets it: the sample
		// after the slow power switch never reaches the station.
		{"inner budget longer than outer", sequences.Wrap(seq(power, sample(1)), sequences.Timeout(time.Second), sequences.Timeout(10*time.Second)), 1, sequences.ErrStepTimeout, 1},
		{"inner budget shorter than outer", sequences.Wrap(seq(power, sample(1)), sequences.Timeout(10*time.Second), sequences.Timeout(time.Second)), 1, sequences.ErrStepTimeout, 1},
		{"budget lifted after the step", seq(sequences.Wrap(sleep(time.Millisecond), sequences.Timeout(time.Second)), sleep(5*time.Second)), 0, nil, 0},
		{"outer budget outlives the inner step", sequences.Wrap(seq(sequences.Wrap(sleep(time.Millisecond), sequences.Timeout(10*time.Second)), sleep(2*time.Second)), sequences.Timeout(time.Second)), 0, sequences.ErrStepTimeout, 0},
		{"unit failure inside the budget", sequences.Wrap(unitFails, sequences.Timeout(3*time.Second)), 0, errUnit, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			tr, f := newTrial(t, context.Background())
			if tc.slow > 0 {
				f.OpFunc = f.slowOn(tc.slow, 2*time.Second)
			}
			start := f.clock.Now()
			err := tc.step.Do(context.Background(), tr)
			if tc.want == nil && err != nil || tc.want != nil && !errors.Is(err, tc.want) {
				t.Errorf("err = %v, want %v (virtual time spent %v)", err, tc.want, f.clock.Now().Sub(start))
			}
			if f.N != tc.calls {
				t.Errorf("%d station calls reached the fake, want %d", f.N, tc.calls)
			}
		})
	}
}

func TestNamed(t *testing.T) {
	tests := []struct {
		name     string
		wrappers []func(sequences.Step) sequences.Step
		ret      error
		wantStep sequences.StepName // measurement's step name
		wantErr  string             // "" for nil
		same     bool               // the step's error comes back unchanged
	}{
		{"pass", []func(sequences.Step) sequences.Step{sequences.Named("idle")}, nil, "idle", "", false},
		{"station error", []func(sequences.Step) sequences.Step{sequences.Named("idle")}, errBus, "idle", "step idle: bus glitch", false},
		{"pin error", []func(sequences.Step) sequences.Step{sequences.Named("idle")}, latchPinError(), "idle",
			"step idle: latch pin GPIO17: gpio: read failed", false},
		{"unit failure", []func(sequences.Step) sequences.Step{sequences.Named("trip_search")}, errUnit, "trip_search",
			"unit fails: no_trip: test", true},
		{"nested", []func(sequences.Step) sequences.Step{sequences.Named("outer"), sequences.Named("inner")}, errBus, "inner",
			"step outer: step inner: bus glitch", false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			tr, _ := newTrial(t, context.Background())
			step := sequences.StepFunc(func(_ context.Context, tr *sequences.Trial) error {
				tr.Measure("x", 1, "", sequences.NoLimit, sequences.NoLimit)
				return tc.ret
			})
			err := sequences.Wrap(step, tc.wrappers...).Do(context.Background(), tr)
			tr.Measure("after", 2, "", sequences.NoLimit, sequences.NoLimit)
			ms := tr.Run().Measurements
			if len(ms) != 2 || ms[0].Step != tc.wantStep || ms[1].Step != "" {
				t.Errorf("measurements %+v, want x in step %s and after in no step", ms, tc.wantStep)
			}
			switch {
			case tc.wantErr == "" && err != nil:
				t.Errorf("err = %v, want nil", err)
			case tc.wantErr != "" && (err == nil || err.Error() != tc.wantErr):
				t.Errorf("err = %v, want %q", err, tc.wantErr)
			case tc.ret != nil && !errors.Is(err, tc.ret):
				t.Errorf("err = %v does not wrap %v", err, tc.ret)
			case tc.same && err != tc.ret:
				t.Errorf("err = %#v, want the step's own %#v", err, tc.ret)
			}
			var pe *fixture.PinError
			if errors.As(tc.ret, &pe) && (!errors.As(err, &pe) || pe.Pin != latchPin) {
				t.Errorf("err = %v lost the pin error", err)
			}
		})
	}
}

func TestWrapOrder(t *testing.T) {
	tests := []struct {
		name string
		tags []string
		want string
	}{
		{"no wrappers", nil, "step"},
		{"one", []string{"a"}, "a> step <a"},
		{"first is outermost", []string{"a", "b", "c"}, "a> b> c> step <c <b <a"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			tr, _ := newTrial(t, context.Background())
			var log []string
			wrappers := make([]func(sequences.Step) sequences.Step, len(tc.tags))
			for i, tag := range tc.tags {
				wrappers[i] = func(next sequences.Step) sequences.Step {
					return sequences.StepFunc(func(ctx context.Context, tr *sequences.Trial) error {
						log = append(log, tag+">")
						err := next.Do(ctx, tr)
						log = append(log, "<"+tag)
						return err
					})
				}
			}
			step := sequences.StepFunc(func(context.Context, *sequences.Trial) error {
				log = append(log, "step")
				return errBus
			})
			if err := sequences.Wrap(step, wrappers...).Do(context.Background(), tr); err != errBus {
				t.Errorf("err = %v, want the step's error", err)
			}
			if got := strings.Join(log, " "); got != tc.want {
				t.Errorf("order %q, want %q", got, tc.want)
			}
		})
	}
}

func TestUnitFailureError(t *testing.T) {
	tests := []struct {
		uf   sequences.UnitFailure
		want string
	}{
		{sequences.UnitFailure{Code: sequences.CodeTripHigh}, "unit fails: trip_high"},
		{sequences.UnitFailure{Code: sequences.CodeTripHigh, Detail: "45.00 pF > 40.00 pF"}, "unit fails: trip_high: 45.00 pF > 40.00 pF"},
	}
	for _, tc := range tests {
		if got := tc.uf.Error(); got != tc.want {
			t.Errorf("Error() = %q, want %q", got, tc.want)
		}
	}
}

func TestTrialMeasure(t *testing.T) {
	nan := sequences.NoLimit
	tests := []struct {
		name           string
		value, low, hi float64
		want           sequences.Verdict
	}{
		{"inside", 30, 20, 40, sequences.Pass},
		{"at the low limit", 20, 20, 40, sequences.Pass},
		{"at the high limit", 40, 20, 40, sequences.Pass},
		{"below", 19.99, 20, 40, sequences.Fail},
		{"above", 40.01, 20, 40, sequences.Fail},
		{"zero of zero", 0, 0, 0, sequences.Pass},
		{"one of zero", 1, 0, 0, sequences.Fail},
		{"no low limit", -1e9, nan, 40, sequences.Pass},
		{"no high limit", 1e9, 20, nan, sequences.Pass},
		{"no limits", 5, nan, nan, sequences.Pass},
		{"NaN value", math.NaN(), 20, 40, sequences.Fail},
		{"NaN value, no limits", math.NaN(), nan, nan, sequences.Fail},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			tr, _ := newTrial(t, context.Background())
			if got := tr.Measure("m", tc.value, "pF", tc.low, tc.hi); got != tc.want {
				t.Errorf("Measure(%g in [%g, %g]) = %s, want %s", tc.value, tc.low, tc.hi, got, tc.want)
			}
			ms := tr.Run().Measurements
			if len(ms) != 1 || ms[0].Verdict != tc.want || ms[0].Name != "m" || ms[0].Unit != "pF" ||
				!sameLimit(ms[0].Value, tc.value) || !sameLimit(ms[0].Low, tc.low) || !sameLimit(ms[0].High, tc.hi) {
				t.Errorf("recorded %+v", ms)
			}
		})
	}
}
