package sa

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"runtime/debug"
	"sync"
	"sync/atomic"
	"unsafe"

	"gonum.org/v1/gonum/mat"

	"github.com/stochroot/stochroot/oracle"
)

// ErrInvalidResult reports a run of a replication study that returned a
// Result that cannot be used as an estimate: an empty X, an Average whose
// length differs from X's, an estimate of another length than run 0's
// (then ErrDimension is wrapped as well), or a non-finite entry. It
// arrives wrapped in a *ReplicationError that names the run.
var ErrInvalidResult = errors.New("sa: replication returned an unusable result")

// streamReplicate is the stream from which Replicate draws the seeds of
// its runs.
const streamReplicate uint64 = 0x5eed_0005

// Replications configures Replicate.
type Replications struct {
	// Runs is the number R of independent runs, ≥ 2 (an interval needs at
	// least one degree of freedom).
	Runs int
	// Workers is the number of goroutines running them. 0 means
	// runtime.GOMAXPROCS(0). The answer does not depend on it.
	Workers int
	// Level is the confidence level of the intervals, in (0, 1). 0 means
	// DefaultLevel (0.95).
	Level float64
	// Seed is the seed from which the runs' seeds are derived: run r gets
	// the (r+1)-th number of rand.NewPCG(Seed, streamReplicate).
	Seed uint64
}

// RunFunc is run number run (0 ≤ run < R) of a replication study: it runs
// with the given seed
// (typically by setting Settings.Seed and calling a driver) and returns its
// Result. Result.Estimate() is the run's estimate; it must be non-empty,
// finite and of the same length in every run (ErrInvalidResult otherwise).
// A panic in a RunFunc is recovered into an *oracle.PanicError and
// reported as the failure of that run.
//
// A RunFunc is called from several goroutines at once, so what the runs
// share must be safe for concurrent use. Of this module's, the schedules,
// the projections, the function adapters (oracle.FieldFunc,
// oracle.GradientFunc, oracle.ValueFunc, oracle.ContextFieldFunc,
// oracle.ContextValueFunc) and the gradient-free adapters
// oracle.KieferWolfowitz and oracle.SPSA may be shared between concurrent
// runs, provided the caller's functions they wrap are safe for concurrent
// use. An oracle.MiniBatch (or oracle.NewFullBatch) may not: its sampler's
// position belongs to one run, and a second run on the same one fails with
// oracle.ErrBusy. Build one per run inside the RunFunc.
type RunFunc func(ctx context.Context, run int, seed uint64) (Result, error)

// Replicated is the outcome of Replicate.
type Replicated struct {
	// ErrorBars are about the mean of the runs' estimates: Center is the
	// mean, Covariance the sample covariance divided by R (nil when the
	// dimension exceeds MaxFullCovariance), DF = R − 1.
	ErrorBars ErrorBars
	// Estimates[r] is the estimate of run r, Seeds[r] its seed and
	// Reasons[r] why it stopped.
	Estimates [][]float64
	Seeds     []uint64
	Reasons   []Reason
	// Steps and Measurements are the totals over all runs.
	Steps, Measurements int
}

// ReplicationError is the error of a run of a replication study: the run
// with the smallest index among those that failed.
type ReplicationError struct {
	Run  int
	Seed uint64
	Err  error
}

// Error returns "sa: replication N (seed S): " followed by the cause.
func (e *ReplicationError) Error() string {
	return fmt.Sprintf("sa: replication %d (seed %d): %v", e.Run, e.Seed, e.Err)
}

// Unwrap returns the cause.
func (e *ReplicationError) Unwrap() error { return e.Err }

// Replicate performs R = s.Runs independent runs with seeds derived from
// s.Seed on s.Workers goroutines and reports the mean of their estimates
// with Student-t intervals:
//
//	x̄ = (1/R) Σ_r x⁽ʳ⁾,   Ĉ = 1/(R−1) Σ_r (x⁽ʳ⁾ − x̄)(x⁽ʳ⁾ − x̄)ᵀ,
//	x̄_i ± t_{R−1}((1+Level)/2) · √(Ĉ_ii / R),
//
// the t interval for a mean, exact for normal estimates (Student 1908, "The
// probable error of a mean", Biometrika 6(1)); the quantile comes from
// gonum distuv.StudentsT. These error bars need no batch means and no
// assumption about the correlation within a run, at R times the cost.
//
// The answer is the same bit for bit for any number of workers: the seeds
// are drawn in order before any run starts, each run's estimate is stored
// at its index, and the sums are taken in index order.
//
// If a run fails, no new runs are started, the runs already started finish,
// and the error of the failed run with the smallest index is returned as a
// *ReplicationError (that index does not depend on the number of workers).
// A run that panics fails with an *oracle.PanicError; a run whose Result
// is unusable fails with ErrInvalidResult. On cancellation of ctx the error
// wraps ctx.Err(). In all these cases the returned Replicated has no error
// bars (Available is false). Replicate returns only after every goroutine
// it started has finished. A study whose bookkeeping would need more than
// MaxBufferBytes is refused with ErrSettings.
func Replicate(ctx context.Context, s Replications, run RunFunc) (Replicated, error) {
	var out Replicated
	if run == nil {
		return out, settingsErr("Replicate: run is nil")
	}
	if s.Runs < 2 {
		return out, settingsErr("Replications.Runs = %d: an interval needs at least 2 runs", s.Runs)
	}
	level := s.Level
	if level == 0 {
		level = DefaultLevel
	}
	if !(level > 0 && level < 1) {
		return out, settingsErr("Replications.Level = %v: a confidence level must lie strictly between 0 and 1", s.Level)
	}
	if s.Workers < 0 {
		return out, settingsErr("Replications.Workers = %d: must be ≥ 0 (0 means GOMAXPROCS)", s.Workers)
	}
	workers := s.Workers
	if workers == 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	workers = min(workers, s.Runs)
	if need := mulBytes(count(s.Runs), perRunBytes); need > MaxBufferBytes {
		return out, settingsErr("Replications.Runs = %d: the study's bookkeeping needs %d bytes, more than MaxBufferBytes = %d", s.Runs, need, MaxBufferBytes)
	}

	R := s.Runs
	seeds := make([]uint64, R)
	src := rand.NewPCG(s.Seed, streamReplicate)
	for i := range seeds {
		seeds[i] = src.Uint64()
	}
	results := make([]Result, R)
	errs := make([]error, R)
	ran := make([]bool, R)
	var next atomic.Int64
	var failed atomic.Bool
	var wg sync.WaitGroup
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				if failed.Load() || ctx.Err() != nil {
					return
				}
				i := int(next.Add(1) - 1)
				if i >= R {
					return
				}
				results[i], errs[i] = callRun(ctx, run, i, seeds[i])
				ran[i] = true
				if errs[i] != nil {
					failed.Store(true)
				}
			}
		}()
	}
	wg.Wait()

	out.Seeds = seeds
	out.ErrorBars = ErrorBars{Level: level, Assumes: replicationAssumes, Method: MethodReplications}
	for i := range R {
		if errs[i] != nil {
			out.ErrorBars.Why = "a run failed"
			return out, &ReplicationError{Run: i, Seed: seeds[i], Err: errs[i]}
		}
	}
	for i := range R {
		if !ran[i] {
			out.ErrorBars.Why = "the study was cancelled"
			return out, fmt.Errorf("sa: replication study stopped before run %d: %w", i, context.Cause(ctx))
		}
	}
	d := len(results[0].Estimate())
	for i := range results {
		if err := checkRunResult(&results[i], d); err != nil {
			out.ErrorBars.Why = "a run returned an unusable result"
			return out, &ReplicationError{Run: i, Seed: seeds[i], Err: err}
		}
	}
	if need := mulBytes(mulBytes(count(R), count(d)), 8); need > MaxBufferBytes {
		out.ErrorBars.Why = "the estimates are too large to collect"
		return out, settingsErr("Replications.Runs = %d: %d estimates of dimension %d need %d bytes, more than MaxBufferBytes = %d", R, R, d, need, MaxBufferBytes)
	}
	out.Estimates = make([][]float64, R)
	out.Reasons = make([]Reason, R)
	for i := range results {
		r := &results[i]
		out.Estimates[i] = append([]float64(nil), r.Estimate()...)
		out.Reasons[i] = r.Reason
		out.Steps += r.Steps
		out.Measurements += r.Measurements
	}
	eb := meanErrorBars(out.Estimates, level)
	for i := range eb.Center {
		if c, h := eb.Center[i], eb.HalfWidth[i]; math.IsNaN(c) || math.IsInf(c, 0) || math.IsNaN(h) || math.IsInf(h, 0) {
			out.ErrorBars.Why = "the mean or the spread of the estimates overflows"
			return out, fmt.Errorf("%w: the mean (%v) or the half-width (%v) of coordinate %d of the runs' estimates overflows", ErrInvalidResult, c, h, i)
		}
	}
	out.ErrorBars = eb
	return out, nil
}

// perRunBytes is what Replicate holds per run while the runs are going:
// the Result, the seed, the error, the flag, the estimate's slice header
// and the reason.
const perRunBytes = uint64(unsafe.Sizeof(Result{}) + unsafe.Sizeof(uint64(0)) + unsafe.Sizeof(error(nil)) +
	unsafe.Sizeof(false) + unsafe.Sizeof([]float64(nil)) + unsafe.Sizeof(Reason(0)))

// callRun calls run and turns a panic into an *oracle.PanicError, so that
// a faulty run cannot take the process down from a goroutine the caller
// does not own.
func callRun(ctx context.Context, run RunFunc, i int, seed uint64) (r Result, err error) {
	defer func() {
		if p := recover(); p != nil {
			r, err = Result{}, &oracle.PanicError{Value: p, Stack: debug.Stack()}
		}
	}()
	return run(ctx, i, seed)
}

// checkRunResult reports what makes r unusable as the estimate of a run
// of a study whose run 0 has an estimate of length d, or nil.
func checkRunResult(r *Result, d int) error {
	if len(r.X) == 0 {
		return fmt.Errorf("%w: Result.X is empty (length 0)", ErrInvalidResult)
	}
	if r.Average != nil && len(r.Average) != len(r.X) {
		return fmt.Errorf("%w: %w: Result.Average has length %d, Result.X %d", ErrInvalidResult, ErrDimension, len(r.Average), len(r.X))
	}
	if est := r.Estimate(); len(est) != d {
		return fmt.Errorf("%w: %w: estimate has length %d, run 0's had %d", ErrInvalidResult, ErrDimension, len(est), d)
	}
	for _, f := range [...]struct {
		name string
		v    []float64
	}{{"X", r.X}, {"Average", r.Average}} {
		for j, v := range f.v {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("%w: Result.%s[%d] = %v is not finite", ErrInvalidResult, f.name, j, v)
			}
		}
	}
	return nil
}

// meanErrorBars returns the t error bars of the mean of xs (len ≥ 2), with
// every sum taken in index order.
func meanErrorBars(xs [][]float64, level float64) ErrorBars {
	R, d := len(xs), len(xs[0])
	e := ErrorBars{
		Available: true, Level: level, DF: R - 1, Count: R, Assumes: replicationAssumes, Method: MethodReplications,
		Center: make([]float64, d), StdErr: make([]float64, d), HalfWidth: make([]float64, d),
	}
	for _, x := range xs {
		for i, v := range x {
			e.Center[i] += v
		}
	}
	for i := range e.Center {
		e.Center[i] /= float64(R)
	}
	s := 1 / float64(R-1) / float64(R)
	e.Quantile = tQuantile(e.DF, level)
	for i := range d {
		v := 0.0
		for _, x := range xs {
			v += (x[i] - e.Center[i]) * (x[i] - e.Center[i])
		}
		e.StdErr[i] = math.Sqrt(v * s)
		e.HalfWidth[i] = e.Quantile * e.StdErr[i]
	}
	if d > MaxFullCovariance {
		return e // as CovarianceAuto: the variances only
	}
	cov := make([]float64, d*d)
	for _, x := range xs {
		for i := range d {
			di := x[i] - e.Center[i]
			for k := i; k < d; k++ {
				cov[i*d+k] += di * (x[k] - e.Center[k])
			}
		}
	}
	for i := range d {
		for k := i; k < d; k++ {
			cov[i*d+k] *= s
			cov[k*d+i] = cov[i*d+k]
		}
	}
	e.Covariance = mat.NewSymDense(d, cov)
	return e
}
