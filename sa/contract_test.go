package sa_test

// Regression tests of the measurement contract: cancellation reaching a
// blocking measurement, adapters shared by concurrent runs, panics on
// goroutines the library owns, counted oracles that count nonsense, and
// the one rule for a starting point.

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"runtime"
	"sync"
	"testing"
	"time"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sampling"
	"github.com/stochroot/stochroot/schedule"
)

// settledGoroutines waits up to a second for the goroutine count to fall
// to at most want and returns the last count seen.
func settledGoroutines(want int) int {
	n := runtime.NumGoroutine()
	for i := 0; i < 100 && n > want; i++ {
		time.Sleep(10 * time.Millisecond)
		n = runtime.NumGoroutine()
	}
	return n
}

// The deadline of these tests is 200 ms and the run must be abandoned
// within 50 ms of it (the bound). The bound is on wall time on a
// shared machine; a blocked measurement returns as soon as the context's
// Done channel closes, a few microseconds of work.
const (
	cancelAfter = 200 * time.Millisecond
	cancelSlack = 50 * time.Millisecond
)

func TestContractCancelInterruptsBlockingMeasurement(t *testing.T) {
	blocking := oracle.ContextFieldFunc(func(ctx context.Context, k int, dst, x []float64, rng *rand.Rand) error {
		if k < 3 {
			dst[0] = x[0] - 1
			return nil
		}
		<-ctx.Done() // a simulation that would otherwise take seconds
		return ctx.Err()
	})
	base := settledGoroutines(runtime.NumGoroutine())
	ctx, cancel := context.WithTimeout(context.Background(), cancelAfter)
	defer cancel()
	start := time.Now()
	r, err := sa.RobbinsMonro(ctx, blocking, []float64{0}, sa.Settings{Gain: schedule.Constant(0.5), MaxSteps: 100, Seed: 1})
	elapsed := time.Since(start)
	if !errors.Is(err, context.DeadlineExceeded) || r.Reason != sa.Cancelled {
		t.Fatalf("RobbinsMonro = reason %v, err %v; want Cancelled wrapping DeadlineExceeded", r.Reason, err)
	}
	if elapsed > cancelAfter+cancelSlack {
		t.Errorf("run returned %v after start, deadline %v: more than %v late", elapsed, cancelAfter, cancelSlack)
	}
	if r.Steps != 3 || r.X[0] == 0 {
		t.Errorf("Result after cancellation: %d steps, X %v; want the 3 steps taken before", r.Steps, r.X)
	}
	if n := settledGoroutines(base); n > base {
		t.Errorf("%d goroutines after the run, %d before", n, base)
	}
}

func TestContractCancelReachesSPSAWorkers(t *testing.T) {
	// SPSA with 4 workers and a Value that blocks until its context is
	// done: every worker is abandoned, none is left behind.
	var calls sync.WaitGroup
	f := oracle.ContextValueFunc(func(ctx context.Context, x []float64, rng *rand.Rand) (float64, error) {
		calls.Add(1)
		defer calls.Done()
		<-ctx.Done()
		return 0, ctx.Err()
	})
	g, err := oracle.NewSPSA(f, 3, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.1, Exponent: 0.101}, Perturbations: 4, Workers: 4})
	if err != nil {
		t.Fatal(err)
	}
	base := settledGoroutines(runtime.NumGoroutine())
	ctx, cancel := context.WithTimeout(context.Background(), cancelAfter)
	defer cancel()
	start := time.Now()
	r, err := sa.RobbinsMonro(ctx, g, []float64{0, 0, 0}, sa.Settings{Gain: schedule.Constant(0.1), MaxSteps: 10, Seed: 1})
	elapsed := time.Since(start)
	if !errors.Is(err, context.DeadlineExceeded) || r.Reason != sa.Cancelled {
		t.Fatalf("RobbinsMonro(SPSA) = reason %v, err %v; want Cancelled wrapping DeadlineExceeded", r.Reason, err)
	}
	if elapsed > cancelAfter+cancelSlack {
		t.Errorf("run returned %v after start, deadline %v: more than %v late", elapsed, cancelAfter, cancelSlack)
	}
	calls.Wait()
	if n := settledGoroutines(base); n > base {
		t.Errorf("%d goroutines after the run, %d before", n, base)
	}
}

func TestContractClosureIgnoringContextStillWorks(t *testing.T) {
	// A plain FieldFunc knows nothing of contexts; a cancelled context
	// still stops the run before the next step.
	ctx, cancel := context.WithCancel(context.Background())
	n := 0
	h := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
		n++
		if n == 5 {
			cancel()
		}
		dst[0] = x[0] - 2
		return nil
	})
	r, err := sa.RobbinsMonro(ctx, h, []float64{0}, sa.Settings{Gain: schedule.Constant(0.5), MaxSteps: 100})
	if !errors.Is(err, context.Canceled) || r.Steps != 5 {
		t.Fatalf("RobbinsMonro = %d steps, %v; want 5 steps and context.Canceled", r.Steps, err)
	}
}

// TestContractSharedGradientFreeAdapters shares one SPSA and one
// Kiefer–Wolfowitz adapter (each with 2 workers) between the concurrent
// runs of a replication study. It crashed the process before the adapters
// kept their scratch per call; now the study must also give the same bits
// as one with a fresh adapter per run.
func TestContractSharedGradientFreeAdapters(t *testing.T) {
	f := bowl([]float64{1, -1, 0.5}, 0.1)
	sizes := schedule.PowerSizes{Scale: 0.1, Exponent: 0.101}
	mk := map[string]func() oracle.Gradient{
		"SPSA": func() oracle.Gradient {
			g, _ := oracle.NewSPSA(f, 3, oracle.SPSASettings{Sizes: sizes, Perturbations: 2, Workers: 2})
			return g
		},
		"KieferWolfowitz": func() oracle.Gradient {
			g, _ := oracle.NewKieferWolfowitz(f, 3, oracle.KieferWolfowitzSettings{Sizes: sizes, Workers: 2})
			return g
		},
	}
	for name, newG := range mk {
		t.Run(name, func(t *testing.T) {
			study := func(shared oracle.Gradient) sa.Replicated {
				out, err := sa.Replicate(context.Background(), sa.Replications{Runs: 8, Workers: 4, Seed: 3},
					func(ctx context.Context, run int, seed uint64) (sa.Result, error) {
						g := shared
						if g == nil {
							g = newG()
						}
						return sa.RobbinsMonro(ctx, g, []float64{0, 0, 0}, sa.Settings{
							Gain: schedule.Power{Scale: 0.2, Offset: 10, Exponent: 0.602}, MaxSteps: 300, BurnIn: 50, Seed: seed})
					})
				if err != nil {
					t.Fatal(err)
				}
				return out
			}
			shared, own := study(newG()), study(nil)
			for r := range shared.Estimates {
				for i, v := range shared.Estimates[r] {
					if v != own.Estimates[r][i] {
						t.Fatalf("run %d coordinate %d: shared adapter %v, own adapter %v", r, i, v, own.Estimates[r][i])
					}
				}
			}
		})
	}
}

// blockingSum is a finite sum whose AddGradient waits on gate for the
// sample index 0 while gate is not nil, and panics on the index panicAt
// (when ≥ 0).
type blockingSum struct {
	n, d    int
	gate    chan struct{}
	entered chan struct{}
	panicAt int
}

func (b *blockingSum) Len() int { return b.n }
func (b *blockingSum) Dim() int { return b.d }
func (b *blockingSum) AddGradient(dst, x []float64, i int, w float64) {
	if i == b.panicAt {
		panic("sample gradient failed")
	}
	if b.gate != nil && i == 0 {
		b.entered <- struct{}{}
		<-b.gate
	}
	for j := range dst {
		dst[j] += w * (x[j] - 1)
	}
}

func TestContractMiniBatchDetectsConcurrentUse(t *testing.T) {
	f := &blockingSum{n: 4, d: 2, gate: make(chan struct{}), entered: make(chan struct{}, 1), panicAt: -1}
	b, err := oracle.NewFullBatch(f, oracle.BatchSettings{Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	first := make(chan error)
	go func() {
		dst := make([]float64, 2)
		first <- b.Measure(dst, []float64{0, 0}, nil)
	}()
	<-f.entered // the first Measure is inside AddGradient
	dst := []float64{7, 7}
	if err := b.Measure(dst, []float64{0, 0}, nil); !errors.Is(err, oracle.ErrBusy) {
		t.Errorf("overlapping Measure = %v, want ErrBusy", err)
	}
	if dst[0] != 7 || dst[1] != 7 {
		t.Errorf("overlapping Measure wrote dst = %v", dst)
	}
	close(f.gate)
	if err := <-first; err != nil {
		t.Errorf("first Measure = %v", err)
	}

	// A run holds the MiniBatch: a second run on it fails at once.
	f.gate = nil
	if err := b.Claim(); err != nil {
		t.Fatal(err)
	}
	x0 := []float64{0, 0}
	_, err = sa.MinimizeSum(context.Background(), b, x0, sa.Settings{Gain: schedule.Constant(0.5), MaxSteps: 10})
	if !errors.Is(err, oracle.ErrBusy) {
		t.Errorf("MinimizeSum on a held MiniBatch = %v, want ErrBusy", err)
	}
	b.Release()
	if _, err := sa.MinimizeSum(context.Background(), b, x0, sa.Settings{Gain: schedule.Constant(0.5), MaxSteps: 10}); err != nil {
		t.Errorf("MinimizeSum after Release = %v", err)
	}
}

func TestContractMiniBatchRecoversPanics(t *testing.T) {
	// Large enough to be split into chunks (n·d ≥ 2^15 multiply–adds) and
	// spread over 2 workers: the panicking sample is in the last chunk,
	// which a worker goroutine usually takes. Before the fix the process
	// died; now the run returns a *PanicError and the workers survive.
	for _, tc := range []struct {
		name    string
		n, d    int
		panicAt int
	}{
		{"serial", 10, 2, 3},
		{"worker chunk", 40000, 4, 39999},
		{"first chunk", 40000, 4, 0},
	} {
		t.Run(tc.name, func(t *testing.T) {
			f := &blockingSum{n: tc.n, d: tc.d, panicAt: tc.panicAt}
			b, err := oracle.NewFullBatch(f, oracle.BatchSettings{Workers: 2})
			if err != nil {
				t.Fatal(err)
			}
			defer b.Close()
			r, err := sa.MinimizeSum(context.Background(), b, make([]float64, tc.d), sa.Settings{Gain: schedule.Constant(0.5), MaxSteps: 3})
			var pe *oracle.PanicError
			if !errors.As(err, &pe) || !errors.Is(err, oracle.ErrPanic) || r.Reason != sa.Failed {
				t.Fatalf("MinimizeSum = reason %v, err %v; want Failed with a *PanicError", r.Reason, err)
			}
			// The oracle still works once the sum stops panicking.
			f.panicAt = -1
			dst := make([]float64, tc.d)
			// The mean of n terms −1/n is −1 up to n roundings of one
			// ulp each (common practice: the error bound of recursive
			// summation, n·ε).
			tol := float64(tc.n) * 0x1p-52
			if err := b.Measure(dst, make([]float64, tc.d), nil); err != nil || math.Abs(dst[0]+1) > tol {
				t.Errorf("Measure after a recovered panic = %v, %v; want -1 ± %.2g, nil", dst, err, tol)
			}
		})
	}
}

// countedField reports n measurements per call.
type countedField struct {
	oracle.FieldFunc
	n int
}

func (c countedField) MeasurementsPerCall() int { return c.n }

func TestContractCountedMustBePositive(t *testing.T) {
	h := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error { dst[0] = x[0]; return nil })
	for _, n := range []int{0, -3} {
		done := make(chan struct{})
		var err error
		go func() {
			defer close(done)
			_, err = sa.RobbinsMonro(context.Background(), countedField{h, n}, []float64{1},
				sa.Settings{Gain: schedule.Constant(0.1), MaxSteps: sa.NoLimit, MaxMeasurements: 100})
		}()
		select {
		case <-done:
		case <-time.After(10 * time.Second):
			t.Fatalf("MeasurementsPerCall %d: the run never returned", n)
		}
		if !errors.Is(err, sa.ErrSettings) {
			t.Errorf("MeasurementsPerCall %d: err = %v, want ErrSettings", n, err)
		}
	}
}

func TestContractAdapterSizeLimits(t *testing.T) {
	f := bowl([]float64{0}, 0)
	sizes := schedule.PowerSizes{Scale: 0.1, Exponent: 0.101}
	for _, dim := range []int{1 << 40, math.MaxInt} {
		if _, err := oracle.NewSPSA(f, dim, oracle.SPSASettings{Sizes: sizes}); !errors.Is(err, oracle.ErrSettings) {
			t.Errorf("NewSPSA(dim %d) = %v, want ErrSettings", dim, err)
		}
		if _, err := oracle.NewKieferWolfowitz(f, dim, oracle.KieferWolfowitzSettings{Sizes: sizes}); !errors.Is(err, oracle.ErrSettings) {
			t.Errorf("NewKieferWolfowitz(dim %d) = %v, want ErrSettings", dim, err)
		}
	}
	if _, err := oracle.NewSPSA(f, 1<<20, oracle.SPSASettings{Sizes: sizes, Perturbations: 1 << 20}); !errors.Is(err, oracle.ErrSettings) {
		t.Errorf("NewSPSA(2^20 × 2^20 perturbations) = %v, want ErrSettings", err)
	}
}

func TestContractNilFunctionAdapters(t *testing.T) {
	s := sa.Settings{Gain: schedule.Constant(0.1), MaxSteps: 5}
	for name, h := range map[string]oracle.Field{
		"FieldFunc":        oracle.FieldFunc(nil),
		"GradientFunc":     oracle.GradientFunc(nil),
		"ContextFieldFunc": oracle.ContextFieldFunc(nil),
	} {
		if _, err := sa.RobbinsMonro(context.Background(), h, []float64{1}, s); !errors.Is(err, oracle.ErrSettings) {
			t.Errorf("RobbinsMonro(%s(nil)) = %v, want oracle.ErrSettings", name, err)
		}
	}
	if _, err := oracle.PilotGradientSize(bowl([]float64{0}, 0), []float64{1}, 0.1, 3, nil); !errors.Is(err, oracle.ErrSettings) {
		t.Errorf("PilotGradientSize(nil rng) = %v, want ErrSettings", err)
	}
}

func TestContractStartingPointRule(t *testing.T) {
	// One rule for the pull drivers and the tuner: x0 finite (else
	// ErrSettings), within MaxAbs and inside the projection set (else
	// ErrOutOfBounds).
	h := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error { dst[0] = x[0]; return nil })
	box := sa.Box{Lower: []float64{0}, Upper: []float64{2}}
	for _, tc := range []struct {
		name string
		x0   float64
		s    sa.Settings
		want error
	}{
		{"NaN", math.NaN(), sa.Settings{}, sa.ErrSettings},
		{"+Inf", math.Inf(1), sa.Settings{}, sa.ErrSettings},
		{"outside box", 3, sa.Settings{Projection: box}, sa.ErrOutOfBounds},
		{"beyond MaxAbs", 3, sa.Settings{MaxAbs: 2}, sa.ErrOutOfBounds},
		{"outside ball", 3, sa.Settings{Projection: sa.Ball{Radius: 1}}, sa.ErrOutOfBounds},
	} {
		t.Run(tc.name, func(t *testing.T) {
			tc.s.Gain, tc.s.MaxSteps = schedule.Constant(0.1), 3
			x0 := []float64{tc.x0}
			r, err := sa.RobbinsMonro(context.Background(), h, x0, tc.s)
			if !errors.Is(err, tc.want) || r.Steps != 0 {
				t.Errorf("RobbinsMonro from %v = %d steps, %v; want %v", tc.x0, r.Steps, err, tc.want)
			}
			if !(x0[0] == tc.x0 || math.IsNaN(tc.x0)) {
				t.Errorf("x0 changed to %v", x0)
			}
			b, _ := oracle.NewFullBatch(&blockingSum{n: 2, d: 1, panicAt: -1}, oracle.BatchSettings{Workers: 1})
			if _, err := sa.MinimizeSum(context.Background(), b, x0, tc.s); !errors.Is(err, tc.want) {
				t.Errorf("MinimizeSum from %v = %v, want %v", tc.x0, err, tc.want)
			}
		})
	}
}

func TestContractTypedNilArguments(t *testing.T) {
	model := &blockingSum{n: 4, d: 1, panicAt: -1}
	if _, err := oracle.NewMiniBatch(model, (*sampling.Shuffled)(nil), 2, oracle.BatchSettings{}); !errors.Is(err, oracle.ErrSettings) {
		t.Errorf("NewMiniBatch(typed-nil sampler) = %v, want ErrSettings", err)
	}
	if _, err := oracle.NewFullBatch((*blockingSum)(nil), oracle.BatchSettings{}); !errors.Is(err, oracle.ErrSettings) {
		t.Errorf("NewFullBatch(typed-nil sum) = %v, want ErrSettings", err)
	}
	if _, err := oracle.NewSPSA(oracle.ValueFunc(nil), 2, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.1, Exponent: 0.101}}); !errors.Is(err, oracle.ErrSettings) {
		t.Errorf("NewSPSA(ValueFunc(nil)) = %v, want ErrSettings", err)
	}
}
