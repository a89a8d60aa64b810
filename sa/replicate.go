package sa

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"sync"
	"sync/atomic"

	"gonum.org/v1/gonum/mat"
)

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
// Result. Result.Estimate() is the run's estimate. It is called from
// several goroutines at once, so what it shares must be safe for
// concurrent use (the oracles, schedules and projections of this module
// are).
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
// On cancellation of ctx the error wraps ctx.Err(). In both cases the
// returned Replicated has no error bars (Available is false). All runs must
// return estimates of one length.
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
				results[i], errs[i] = run(ctx, i, seeds[i])
				ran[i] = true
				if errs[i] != nil {
					failed.Store(true)
				}
			}
		}()
	}
	wg.Wait()

	out.Seeds = seeds
	out.ErrorBars = ErrorBars{Level: level, Assumes: replicationAssumes}
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
	out.Estimates = make([][]float64, R)
	out.Reasons = make([]Reason, R)
	d := len(results[0].Estimate())
	for i := range results {
		r := &results[i]
		est := r.Estimate()
		if len(est) != d {
			out.ErrorBars.Why = "runs returned estimates of different lengths"
			return out, &ReplicationError{Run: i, Seed: seeds[i], Err: fmt.Errorf("%w: estimate has length %d, run 0 had %d", ErrDimension, len(est), d)}
		}
		out.Estimates[i] = append([]float64(nil), est...)
		out.Reasons[i] = r.Reason
		out.Steps += r.Steps
		out.Measurements += r.Measurements
	}
	out.ErrorBars = meanErrorBars(out.Estimates, level)
	return out, nil
}

// meanErrorBars returns the t error bars of the mean of xs (len ≥ 2), with
// every sum taken in index order.
func meanErrorBars(xs [][]float64, level float64) ErrorBars {
	R, d := len(xs), len(xs[0])
	e := ErrorBars{
		Available: true, Level: level, DF: R - 1, Count: R, Assumes: replicationAssumes,
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
