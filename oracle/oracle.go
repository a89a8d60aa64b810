// Package oracle defines what a caller supplies to the stochastic
// approximation drivers in package sa: noisy measurements taken at a point
// x, as small interfaces with function adapters so that a closure is enough.
//
// A [Field] measures a vector field h at x with noise, Y = h(x) + ε; the
// Robbins–Monro driver looks for a root h(x*) = 0. A [Gradient] is the same
// contract where h = ∇f, used by the minimisation drivers.
//
// # Finite sums
//
// A [FiniteSum] is an objective f(x) = (1/n) Σ f_i(x) that hands out one
// sample gradient at a time. [NewMiniBatch] and [NewFullBatch] turn it into
// a [Gradient] that averages the gradients of a batch of samples drawn by a
// sampler of package sampling, or of every sample; large batches are
// evaluated on several goroutines with the same result bit for bit.
// [NewLeastSquares], [NewLogistic] and [NewQuantile] are ready-made finite
// sums of linear models over row-major [Dense] data, with an optional L2
// penalty and standardisation of the columns.
//
// # Randomness
//
// Every measurement receives the random stream it must use. The drivers
// derive that stream from their one seed, so a run with the same seed
// repeats bit for bit. An oracle that draws from any other source (the
// global generator, time, a shared generator) breaks that guarantee.
//
// # Contract
//
// Measure writes len(x) values into dst. It must not modify or retain x or
// dst. It returns an error when the measurement could not be taken; the
// drivers stop and report it. A measurement with NaN or ±Inf entries is
// detected by the drivers and is an error too.
//
// # Cancellation and the step index
//
// A measurement that can take long (a simulation run, a request to another
// machine) should implement [ContextField] (or, for values, [ContextValue]):
// the drivers of package sa then hand it the run's context and the step
// index k with every measurement, and a cancelled run abandons the
// measurement as soon as it returns the context's error. [MeasureStep] is
// how the drivers call any Field: the context-aware method where there is
// one, otherwise [StepAware].SetStep followed by Measure. A plain closure
// ([FieldFunc], [ValueFunc]) keeps working; it is simply not interrupted.
//
// # Sharing an oracle between runs
//
// The function adapters hold no state of their own, and [KieferWolfowitz]
// and [SPSA] keep their scratch per call when called through
// MeasureContext: one adapter may serve several concurrent runs (as
// sa.Replicate does) provided the caller's Value is safe for concurrent
// use. A [MiniBatch] owns a sampler whose position is part of a run and
// cannot be shared: concurrent use is detected and fails with [ErrBusy].
//
// # Gradient-free measurements
//
// When only a noisy value f̃(x) can be measured (one simulation run, one
// observed cost), a [Value] supplies it, and [KieferWolfowitz] (central
// finite differences, 2p values per gradient) or [SPSA] (simultaneous
// perturbation, 2 or 1 values per gradient whatever p) turn it into a
// [Gradient] for the drivers. They implement [StepAware] to learn the step
// index k for their perturbation size c_k, [Counted] so that measurement
// budgets count function values, and [Dimensioned]. On request the two
// values of a pair share common random numbers, and the values of one
// step are taken on worker goroutines with results that do not depend on
// the number of workers. A panicking Value is recovered into a
// [*PanicError] on every goroutine.
//
// The measurement points x ± c_k·e_i and x ± c_k·Δ are not projected onto
// the constraint set of the run: keep the set at least c_0 (in every
// coordinate) inside the region where f̃ can be measured. On a live system
// the perturbed settings are applied for real, so bound c_k as well as x,
// watch both, and keep a manual override.
package oracle

import (
	"context"
	"fmt"
	"math/rand/v2"
)

// Field is a noisy measurement of a vector field: Measure writes
// h(x) + noise into dst, len(dst) == len(x).
type Field interface {
	Measure(dst, x []float64, rng *rand.Rand) error
}

// FieldFunc adapts a function to a Field.
type FieldFunc func(dst, x []float64, rng *rand.Rand) error

// Measure calls f(dst, x, rng). A nil FieldFunc returns an error wrapping
// ErrSettings.
func (f FieldFunc) Measure(dst, x []float64, rng *rand.Rand) error {
	if f == nil {
		return errNilFunc("FieldFunc")
	}
	return f(dst, x, rng)
}

// Gradient is a noisy gradient estimate: Measure writes ∇f(x) + noise into
// dst. It has the same contract as Field (a gradient is a vector field), so
// every Gradient is a Field and vice versa; the separate name documents
// intent at the drivers.
type Gradient interface {
	Measure(dst, x []float64, rng *rand.Rand) error
}

// GradientFunc adapts a function to a Gradient.
type GradientFunc func(dst, x []float64, rng *rand.Rand) error

// Measure calls f(dst, x, rng). A nil GradientFunc returns an error
// wrapping ErrSettings.
func (f GradientFunc) Measure(dst, x []float64, rng *rand.Rand) error {
	if f == nil {
		return errNilFunc("GradientFunc")
	}
	return f(dst, x, rng)
}

// errNilFunc is the error of a nil function adapter.
func errNilFunc(name string) error {
	return fmt.Errorf("%w: the %s is nil", ErrSettings, name)
}

// Scalar adapts a one-dimensional noisy function, Y = h(x) + noise for
// scalar x, to a Field of dimension 1.
type Scalar func(x float64, rng *rand.Rand) (float64, error)

// Measure sets dst[0] = f(x[0], rng). It panics if len(x) or len(dst) is
// not 1. A nil Scalar returns an error wrapping ErrSettings.
func (f Scalar) Measure(dst, x []float64, rng *rand.Rand) error {
	if len(x) != 1 || len(dst) != 1 {
		panic("oracle: Scalar used with dimension other than 1")
	}
	if f == nil {
		return errNilFunc("Scalar")
	}
	y, err := f(x[0], rng)
	dst[0] = y
	return err
}

// Dim returns 1.
func (Scalar) Dim() int { return 1 }

// Dimensioned is implemented by oracles that know the dimension of the
// points they measure at; the drivers then check the starting point against
// it before the first step.
type Dimensioned interface {
	Dim() int
}

// Counted is implemented by oracles whose one Measure call uses more than
// one underlying measurement (a mini-batch of m sample gradients, the 2p
// function values of a finite-difference gradient). The drivers count
// MeasurementsPerCall() measurements per step against a measurement budget;
// an oracle that does not implement Counted counts as 1. The count must be
// at least 1: the drivers reject an oracle that reports 0 or fewer (it
// would make the measurement budget unreachable) with a settings error.
type Counted interface {
	MeasurementsPerCall() int
}

// ContextField is the context-aware measurement contract: MeasureContext
// is Measure with the run's context and the step index k (the number of
// updates applied so far, counting from 0, as in the gain index). The
// drivers of package sa call it, when an oracle implements it, instead of
// Measure, with the context given to the run; a measurement that may block
// (a simulation, a remote call) should watch ctx and return its error
// (ctx.Err() or context.Cause(ctx)) promptly once it is done. The run then
// ends with reason Cancelled and an error wrapping the context's.
//
// Why an optional interface and not a change of Field: a closure that
// measures in microseconds gains nothing from a context, and every Field
// written so far keeps working unchanged; the step index travels with the
// call, so an adapter that needs it (a perturbation size c_k) holds no
// per-run state and can be shared by concurrent runs, which the older
// [StepAware].SetStep followed by Measure cannot offer.
type ContextField interface {
	MeasureContext(ctx context.Context, k int, dst, x []float64, rng *rand.Rand) error
}

// ContextFieldFunc adapts a context-aware function to a [ContextField]
// that is also a [Field] (and so a [Gradient]).
type ContextFieldFunc func(ctx context.Context, k int, dst, x []float64, rng *rand.Rand) error

// MeasureContext calls f(ctx, k, dst, x, rng). A nil ContextFieldFunc
// returns an error wrapping ErrSettings.
func (f ContextFieldFunc) MeasureContext(ctx context.Context, k int, dst, x []float64, rng *rand.Rand) error {
	if f == nil {
		return errNilFunc("ContextFieldFunc")
	}
	return f(ctx, k, dst, x, rng)
}

// Measure calls f with context.Background() and step 0.
func (f ContextFieldFunc) Measure(dst, x []float64, rng *rand.Rand) error {
	return f.MeasureContext(context.Background(), 0, dst, x, rng)
}

// MeasureStep takes one measurement of f at x for step k of a run, the way
// the drivers of package sa do: through [ContextField].MeasureContext when
// f implements it; otherwise, if f implements [StepAware], SetStep(k) and
// then Measure; otherwise Measure. It does not check ctx itself: an oracle
// without MeasureContext is not interrupted.
func MeasureStep(ctx context.Context, f Field, k int, dst, x []float64, rng *rand.Rand) error {
	if cf, ok := f.(ContextField); ok {
		return cf.MeasureContext(ctx, k, dst, x, rng)
	}
	if st, ok := f.(StepAware); ok {
		st.SetStep(k)
	}
	return f.Measure(dst, x, rng)
}

var (
	_ ContextField = ContextFieldFunc(nil)
	_ Field        = ContextFieldFunc(nil)
	_ Field        = FieldFunc(nil)
	_ Gradient     = GradientFunc(nil)
	_ Field        = Scalar(nil)
	_ Dimensioned  = Scalar(nil)
)
