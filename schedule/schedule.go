package schedule

import (
	"errors"
	"fmt"
	"math"
	"reflect"

	"gonum.org/v1/gonum/floats"
)

// Schedule is a gain sequence a_k, k = 0, 1, 2, …
//
// Gain must return a finite value ≥ 0 for every k ≥ 0; the update core in
// package sa stops a run with an error when it does not. Gain must be safe
// for concurrent use and must not depend on anything but k.
type Schedule interface {
	Gain(k int) float64
}

// Adaptive is a schedule whose gain index advances only when the
// measurements say so. The update core keeps a gain index n (starting at 0),
// uses Gain(n) for the current step, and after the step calls
// Advance(y, prev) with the step's measurement y and the previous step's
// measurement prev (nil on the first step); the index moves to n+1 when
// Advance returns true. Advance must not modify or retain y or prev.
type Adaptive interface {
	Schedule
	Advance(y, prev []float64) bool
}

// Validator is implemented by schedules that can check their own parameters.
// The update core calls Validate once before a run.
type Validator interface {
	Validate() error
}

// ErrInvalid is wrapped by every parameter error of this package.
var ErrInvalid = errors.New("schedule: invalid parameter")

func invalid(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{ErrInvalid}, args...)...)
}

// isNil reports whether v is nil or an interface holding a nil pointer,
// function, map, slice or channel (a typed nil such as Func(nil)), whose
// methods would panic far from the cause.
func isNil(v any) bool {
	if v == nil {
		return true
	}
	switch r := reflect.ValueOf(v); r.Kind() {
	case reflect.Pointer, reflect.Func, reflect.Map, reflect.Slice, reflect.Chan, reflect.Interface:
		return r.IsNil()
	}
	return false
}

// Constant is the constant gain a_k = a. It does not satisfy Σa_k² < ∞, so
// it does not converge to a point: it is a tracking gain, used when the
// target drifts, and the iterate keeps fluctuating around the root with a
// spread that grows with a.
type Constant float64

// Gain returns the constant value.
func (c Constant) Gain(int) float64 { return float64(c) }

// Validate reports an error unless the constant is finite and > 0.
func (c Constant) Validate() error {
	v := float64(c)
	if !(v > 0) || math.IsInf(v, 0) {
		return invalid("Constant = %v: must be finite and > 0", v)
	}
	return nil
}

// Power is the power family of gains
//
//	a_k = Scale / (k + 1 + Offset)^Exponent,   k = 0, 1, 2, …
//
// Exponent 1 with Offset 0 is the classic harmonic gain a/(k+1) of Robbins &
// Monro (1951). Offset (the "stability constant" A of Spall 1998) keeps the
// first steps small without making the tail small. The conditions Σa_k = ∞
// and Σa_k² < ∞ both hold exactly when 1/2 < Exponent ≤ 1, whatever Offset.
//
// The drivers of package sa do not call math.Pow at every step: for
// consecutive k they multiply by the ratio a_{k+1}/a_k from short series,
// restarting from Gain every 1024 steps, so the gain they use is a
// function of k alone and within 5·10⁻¹³ (relative) of Gain(k).
type Power struct {
	Scale    float64 // a > 0
	Offset   float64 // A ≥ 0
	Exponent float64 // α > 0
}

// Harmonic returns the classic gain a/(k+1).
func Harmonic(a float64) Power { return Power{Scale: a, Exponent: 1} }

// Gain returns Scale/(k+1+Offset)^Exponent.
func (p Power) Gain(k int) float64 {
	base := float64(k) + 1 + p.Offset
	switch p.Exponent {
	case 1:
		return p.Scale / base
	case 0.5:
		return p.Scale / math.Sqrt(base)
	}
	return p.Scale / math.Pow(base, p.Exponent)
}

// Validate checks Scale > 0, Offset ≥ 0, Exponent > 0, all finite.
func (p Power) Validate() error {
	switch {
	case !(p.Scale > 0) || math.IsInf(p.Scale, 0):
		return invalid("Power.Scale = %v: must be finite and > 0", p.Scale)
	case !(p.Offset >= 0) || math.IsInf(p.Offset, 0):
		return invalid("Power.Offset = %v: must be finite and ≥ 0", p.Offset)
	case !(p.Exponent > 0) || math.IsInf(p.Exponent, 0):
		return invalid("Power.Exponent = %v: must be finite and > 0", p.Exponent)
	}
	return nil
}

// Kesten is Kesten's adaptive rule (Kesten 1958, "Accelerated stochastic
// approximation", Ann. Math. Statist. 29(1)): the gain index advances only
// when successive increments change direction, so the gain stays large while
// the iterate is still travelling towards the root and shrinks once it
// oscillates around it. In several dimensions a change of direction is
// ⟨Y_k, Y_{k−1}⟩ < 0 (Delyon & Juditsky 1993, "Accelerated stochastic
// approximation", SIAM J. Optim. 3(4)).
//
// With the index n_k used at step k: n_0 = 0, n_1 = 1 (the first two steps
// always advance, as in Kesten's paper), and for k ≥ 1 the index moves on
// after step k iff ⟨Y_k, Y_{k−1}⟩ < 0. The gain is Base.Gain(n_k).
type Kesten struct {
	Base Schedule
}

// Gain returns Base.Gain(n) for gain index n. It panics with a message
// saying so if Base is nil (Validate reports that as an error).
func (s Kesten) Gain(n int) float64 {
	if s.Base == nil {
		panic("schedule: Kesten.Gain: Kesten.Base is nil")
	}
	return s.Base.Gain(n)
}

// Advance reports whether the direction changed: prev is nil (first step) or
// ⟨y, prev⟩ < 0.
func (s Kesten) Advance(y, prev []float64) bool {
	return prev == nil || floats.Dot(y, prev) < 0
}

// Validate checks that Base is set and valid.
func (s Kesten) Validate() error {
	if isNil(s.Base) {
		return invalid("Kesten.Base is nil (%T)", s.Base)
	}
	if v, ok := s.Base.(Validator); ok {
		return v.Validate()
	}
	return nil
}

// Func adapts a function of k to a Schedule. Its conditions are checked
// numerically by [Check].
type Func func(k int) float64

// Gain returns f(k). It panics with a message saying so if f is nil
// (Validate reports that as an error before a run).
func (f Func) Gain(k int) float64 {
	if f == nil {
		panic("schedule: Gain called on a nil schedule.Func")
	}
	return f(k)
}

// Validate reports an error wrapping [ErrInvalid] if f is nil. The values
// f returns are checked by the update core at every step.
func (f Func) Validate() error {
	if f == nil {
		return invalid("schedule.Func is nil: a gain function is required")
	}
	return nil
}

var (
	_ Schedule  = Constant(1)
	_ Schedule  = Power{}
	_ Adaptive  = Kesten{}
	_ Schedule  = Func(nil)
	_ Validator = Func(nil)
	_ Validator = Kesten{}
)
