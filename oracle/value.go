package oracle

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"runtime/debug"
)

// Value is a noisy measurement of a scalar function: Value returns
// f̃(x) = f(x) + noise, one simulation run or one observed cost at x, using
// only rng for its randomness. It must not modify or retain x.
//
// The gradient-free adapters [KieferWolfowitz] and [SPSA] call Value from
// worker goroutines when their Workers setting is above 1; Value must then
// be safe for concurrent use (each call has its own rng, so a Value that
// draws only from rng and reads shared data is).
type Value interface {
	Value(x []float64, rng *rand.Rand) (float64, error)
}

// ValueFunc adapts a function to a Value.
type ValueFunc func(x []float64, rng *rand.Rand) (float64, error)

// Value calls f(x, rng). A nil ValueFunc returns an error wrapping
// ErrSettings.
func (f ValueFunc) Value(x []float64, rng *rand.Rand) (float64, error) {
	if f == nil {
		return 0, errNilFunc("ValueFunc")
	}
	return f(x, rng)
}

// ContextValue is a [Value] that can be cancelled: ValueContext is Value
// with the context of the run that asked for it. [KieferWolfowitz] and
// [SPSA] call it, when the Value implements it, with the context handed to
// their MeasureContext; a value that may block should return ctx's error
// promptly once ctx is done.
type ContextValue interface {
	ValueContext(ctx context.Context, x []float64, rng *rand.Rand) (float64, error)
}

// ContextValueFunc adapts a context-aware function to a [ContextValue]
// that is also a [Value].
type ContextValueFunc func(ctx context.Context, x []float64, rng *rand.Rand) (float64, error)

// ValueContext calls f(ctx, x, rng). A nil ContextValueFunc returns an
// error wrapping ErrSettings.
func (f ContextValueFunc) ValueContext(ctx context.Context, x []float64, rng *rand.Rand) (float64, error) {
	if f == nil {
		return 0, errNilFunc("ContextValueFunc")
	}
	return f(ctx, x, rng)
}

// Value calls f with context.Background().
func (f ContextValueFunc) Value(x []float64, rng *rand.Rand) (float64, error) {
	return f.ValueContext(context.Background(), x, rng)
}

// StepAware is implemented by oracles whose measurement depends on the step
// index k of the run, such as the perturbation size c_k of a
// finite-difference or simultaneous-perturbation gradient. For an oracle
// that does not implement [ContextField], the pull drivers of package sa
// call SetStep(k) before every call of Measure, with k the number of
// updates applied so far (k counts from 0, like the gain index of a
// non-adaptive schedule). Code that calls Measure directly must call
// SetStep itself; without it the oracle measures as at step 0. SetStep
// followed by Measure is a two-call protocol and cannot serve two runs at
// once; oracles meant to be shared implement ContextField, which carries k
// with the call.
type StepAware interface {
	SetStep(k int)
}

// Sizes is a sequence of perturbation sizes c_k > 0, k = 0, 1, 2, …, the
// half-width of the differences taken by [KieferWolfowitz] and [SPSA].
// schedule.PowerSizes (c/(k+1)^γ) implements it. Size must be safe for
// concurrent use and depend on nothing but k.
type Sizes interface {
	Size(k int) float64
}

// Errors of the oracle adapters. Test for them with errors.Is.
var (
	// ErrSettings is wrapped by every error about invalid settings or
	// arguments of the adapters and models of this package (gradient-free
	// estimators, batch oracles, regressions); the message names the field
	// or argument and says why.
	ErrSettings = errors.New("oracle: invalid settings")
	// ErrDimension reports a point or destination of the wrong length.
	ErrDimension = errors.New("oracle: dimension mismatch")
	// ErrNotFinite reports a measured value that is NaN or ±Inf.
	ErrNotFinite = errors.New("oracle: measured value is not finite")
	// ErrSize reports a perturbation size c_k that is not a finite value > 0.
	ErrSize = errors.New("oracle: perturbation size is not a finite value > 0")
	// ErrPanic is wrapped by the [*PanicError] of a measurement that
	// panicked.
	ErrPanic = errors.New("oracle: measurement panicked")
	// ErrBusy reports a [MiniBatch] used by two runs (or two goroutines)
	// at once.
	ErrBusy = errors.New("oracle: batch oracle is in use by another run")
)

// PanicError is the error of a measurement that panicked. The adapters
// recover a panic of Value (and [MiniBatch] one of AddGradient), on the
// calling goroutine and on worker goroutines alike, and return it as this error, so that a faulty
// simulation cannot take the whole process down from a goroutine the
// caller does not own, and the run still returns its last iterate. Value
// is what the measurement panicked with; Stack is the stack of the
// panicking goroutine.
type PanicError struct {
	Value any
	Stack []byte
}

// Error describes the panic (without the stack).
func (e *PanicError) Error() string { return fmt.Sprintf("%v: %v", ErrPanic, e.Value) }

// Unwrap returns ErrPanic.
func (e *PanicError) Unwrap() error { return ErrPanic }

// measureOne calls f.ValueContext (if f is a ContextValue) or f.Value and
// turns a panic into a *PanicError.
func measureOne(ctx context.Context, f Value, x []float64, rng *rand.Rand) (v float64, err error) {
	defer func() {
		if p := recover(); p != nil {
			v, err = 0, &PanicError{Value: p, Stack: debug.Stack()}
		}
	}()
	if cf, ok := f.(ContextValue); ok {
		return cf.ValueContext(ctx, x, rng)
	}
	return f.Value(x, rng)
}

var (
	_ Value        = ValueFunc(nil)
	_ Value        = ContextValueFunc(nil)
	_ ContextValue = ContextValueFunc(nil)
)
