package sa_test

// Bad-input and fault tests of Replicate: panicking runs, unusable results,
// nonsense settings and huge sizes, cancellation.

import (
	"context"
	"errors"
	"math"
	"runtime"
	"strings"
	"sync/atomic"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
)

// fixedRun returns a RunFunc whose run r returns results(r).
func fixedRun(results func(r int) sa.Result) sa.RunFunc {
	return func(ctx context.Context, run int, seed uint64) (sa.Result, error) {
		return results(run), nil
	}
}

func TestReplicateRecoversPanickingRun(t *testing.T) {
	for _, workers := range []int{1, 2, 4} {
		before := runtime.NumGoroutine()
		var started atomic.Int32
		run := func(ctx context.Context, r int, seed uint64) (sa.Result, error) {
			started.Add(1)
			if r == 2 {
				panic("simulation broke")
			}
			return sa.Result{X: []float64{float64(r)}}, nil
		}
		out, err := sa.Replicate(context.Background(), sa.Replications{Runs: 8, Workers: workers}, run)
		var re *sa.ReplicationError
		if !errors.As(err, &re) || re.Run != 2 {
			t.Fatalf("workers %d: error %v, want a *ReplicationError for run 2", workers, err)
		}
		var pe *oracle.PanicError
		if !errors.As(err, &pe) || pe.Value != "simulation broke" || len(pe.Stack) == 0 || !errors.Is(err, oracle.ErrPanic) {
			t.Errorf("workers %d: error %v does not carry the *oracle.PanicError with value and stack", workers, err)
		}
		if out.ErrorBars.Available {
			t.Errorf("workers %d: error bars available after a failed run", workers)
		}
		// No new runs after the failure: with one worker runs 3.. never start.
		if workers == 1 && started.Load() != 3 {
			t.Errorf("1 worker: %d runs started, want 3 (0, 1 and the panicking 2)", started.Load())
		}
		if n := settledGoroutines(before); n > before {
			t.Errorf("workers %d: %d goroutines after Replicate, %d before", workers, n, before)
		}
	}
}

func TestReplicateRejectsUnusableResults(t *testing.T) {
	good := func(r int) sa.Result { return sa.Result{X: []float64{1, 2}, Average: []float64{float64(r), 1}} }
	for _, tc := range []struct {
		name    string
		bad     sa.Result // returned by run 3
		wantDim bool      // ErrDimension wrapped as well
	}{
		{"NaN X without average", sa.Result{X: []float64{math.NaN(), 1}}, false},
		{"+Inf X without average", sa.Result{X: []float64{1, math.Inf(1)}}, false},
		{"NaN in X beside a finite average", sa.Result{X: []float64{math.NaN(), 1}, Average: []float64{1, 1}}, false},
		{"-Inf average", sa.Result{X: []float64{1, 1}, Average: []float64{math.Inf(-1), 1}}, false},
		{"empty result", sa.Result{}, false},
		{"empty X with an average", sa.Result{Average: []float64{1, 1}}, false},
		{"estimate of another length", sa.Result{X: []float64{1, 2, 3}}, true},
		{"average and X of different lengths", sa.Result{X: []float64{1, 2}, Average: []float64{1}}, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			run := fixedRun(func(r int) sa.Result {
				if r == 3 {
					return tc.bad
				}
				return good(r)
			})
			out, err := sa.Replicate(context.Background(), sa.Replications{Runs: 6, Workers: 2}, run)
			var re *sa.ReplicationError
			if !errors.As(err, &re) || re.Run != 3 || !errors.Is(err, sa.ErrInvalidResult) {
				t.Fatalf("error %v, want a *ReplicationError for run 3 wrapping ErrInvalidResult", err)
			}
			if tc.wantDim != errors.Is(err, sa.ErrDimension) {
				t.Errorf("errors.Is(err, ErrDimension) = %v, want %v (%v)", !tc.wantDim, tc.wantDim, err)
			}
			if out.ErrorBars.Available || out.ErrorBars.Center != nil {
				t.Errorf("error bars %+v after an unusable result", out.ErrorBars)
			}
		})
	}
	// Run 0 empty: every estimate must be non-empty, also the first.
	_, err := sa.Replicate(context.Background(), sa.Replications{Runs: 3}, fixedRun(func(int) sa.Result { return sa.Result{} }))
	var re *sa.ReplicationError
	if !errors.As(err, &re) || re.Run != 0 || !errors.Is(err, sa.ErrInvalidResult) {
		t.Errorf("all runs empty: error %v, want run 0 and ErrInvalidResult", err)
	}
}

func TestReplicateOverflowingSpread(t *testing.T) {
	// Finite estimates whose mean or spread overflows float64: the bars
	// would hold ±Inf or NaN, so the study fails instead.
	run := fixedRun(func(r int) sa.Result {
		return sa.Result{X: []float64{math.MaxFloat64 * float64(1-2*(r%2))}}
	})
	out, err := sa.Replicate(context.Background(), sa.Replications{Runs: 4}, run)
	if !errors.Is(err, sa.ErrInvalidResult) || out.ErrorBars.Available {
		t.Errorf("spread overflows: error %v, available %v; want ErrInvalidResult and no bars", err, out.ErrorBars.Available)
	}
	run = fixedRun(func(int) sa.Result { return sa.Result{X: []float64{math.MaxFloat64}} })
	if _, err := sa.Replicate(context.Background(), sa.Replications{Runs: 4}, run); !errors.Is(err, sa.ErrInvalidResult) {
		t.Errorf("mean overflows: error %v, want ErrInvalidResult", err)
	}
}

func TestReplicateBadSettings(t *testing.T) {
	var calls atomic.Int32
	ok := func(ctx context.Context, r int, seed uint64) (sa.Result, error) {
		calls.Add(1)
		return sa.Result{X: []float64{1}}, nil
	}
	for _, tc := range []struct {
		name  string
		s     sa.Replications
		run   sa.RunFunc
		field string // the message must name it
	}{
		{"nil run", sa.Replications{Runs: 3}, nil, "run is nil"},
		{"zero runs", sa.Replications{}, ok, "Runs"},
		{"one run", sa.Replications{Runs: 1}, ok, "Runs"},
		{"negative runs", sa.Replications{Runs: -4}, ok, "Runs"},
		{"MaxInt runs", sa.Replications{Runs: math.MaxInt}, ok, "bytes"},
		{"runs beyond the memory bound", sa.Replications{Runs: 1 << 40}, ok, "bytes"},
		{"negative workers", sa.Replications{Runs: 3, Workers: -1}, ok, "Workers"},
		{"NaN level", sa.Replications{Runs: 3, Level: math.NaN()}, ok, "Level"},
		{"level 1", sa.Replications{Runs: 3, Level: 1}, ok, "Level"},
		{"negative level", sa.Replications{Runs: 3, Level: -0.5}, ok, "Level"},
		{"+Inf level", sa.Replications{Runs: 3, Level: math.Inf(1)}, ok, "Level"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			calls.Store(0)
			_, err := sa.Replicate(context.Background(), tc.s, tc.run)
			if !errors.Is(err, sa.ErrSettings) || !strings.Contains(err.Error(), tc.field) {
				t.Errorf("error %v, want ErrSettings naming %q", err, tc.field)
			}
			if n := calls.Load(); n != 0 {
				t.Errorf("%d runs were started with invalid settings", n)
			}
		})
	}
}

func TestReplicateCancelledContext(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	var calls atomic.Int32
	out, err := sa.Replicate(ctx, sa.Replications{Runs: 5, Workers: 2}, func(ctx context.Context, r int, seed uint64) (sa.Result, error) {
		calls.Add(1)
		return sa.Result{X: []float64{1}}, nil
	})
	if !errors.Is(err, context.Canceled) || out.ErrorBars.Available || calls.Load() != 0 {
		t.Errorf("cancelled study: error %v, available %v, %d runs; want context.Canceled, no bars, no runs", err, out.ErrorBars.Available, calls.Load())
	}
}
