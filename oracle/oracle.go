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
	"math/rand/v2"
)

// Field is a noisy measurement of a vector field: Measure writes
// h(x) + noise into dst, len(dst) == len(x).
type Field interface {
	Measure(dst, x []float64, rng *rand.Rand) error
}

// FieldFunc adapts a function to a Field.
type FieldFunc func(dst, x []float64, rng *rand.Rand) error

// Measure calls f(dst, x, rng).
func (f FieldFunc) Measure(dst, x []float64, rng *rand.Rand) error { return f(dst, x, rng) }

// Gradient is a noisy gradient estimate: Measure writes ∇f(x) + noise into
// dst. It has the same contract as Field (a gradient is a vector field), so
// every Gradient is a Field and vice versa; the separate name documents
// intent at the drivers.
type Gradient interface {
	Measure(dst, x []float64, rng *rand.Rand) error
}

// GradientFunc adapts a function to a Gradient.
type GradientFunc func(dst, x []float64, rng *rand.Rand) error

// Measure calls f(dst, x, rng).
func (f GradientFunc) Measure(dst, x []float64, rng *rand.Rand) error { return f(dst, x, rng) }

// Scalar adapts a one-dimensional noisy function, Y = h(x) + noise for
// scalar x, to a Field of dimension 1.
type Scalar func(x float64, rng *rand.Rand) (float64, error)

// Measure sets dst[0] = f(x[0], rng). It panics if len(x) or len(dst) is
// not 1.
func (f Scalar) Measure(dst, x []float64, rng *rand.Rand) error {
	if len(x) != 1 || len(dst) != 1 {
		panic("oracle: Scalar used with dimension other than 1")
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
// an oracle that does not implement Counted counts as 1.
type Counted interface {
	MeasurementsPerCall() int
}

var (
	_ Field       = FieldFunc(nil)
	_ Gradient    = GradientFunc(nil)
	_ Field       = Scalar(nil)
	_ Dimensioned = Scalar(nil)
)
