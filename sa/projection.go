package sa

import (
	"fmt"
	"math"
)

// Projection maps a point back onto a constraint set, Π in
// x_{k+1} = Π(x_k − a_k·Y_k).
//
// Project replaces x in place by its projection and reports whether x was
// outside the set (the constraint was active). It must not retain x.
type Projection interface {
	Project(x []float64) bool
}

// Box is the projection onto the box Lower ≤ x ≤ Upper (coordinate-wise
// clamping). Use math.Inf(±1) for an unbounded side.
type Box struct {
	Lower, Upper []float64
}

// Project clamps x into the box and reports whether any coordinate moved.
// It panics if the lengths of x, Lower and Upper differ; the drivers check
// the lengths before the first step.
func (b Box) Project(x []float64) bool {
	if len(b.Lower) != len(x) || len(b.Upper) != len(x) {
		panic("sa: Box length mismatch")
	}
	active := false
	for i, v := range x {
		if v < b.Lower[i] {
			x[i], active = b.Lower[i], true
		} else if v > b.Upper[i] {
			x[i], active = b.Upper[i], true
		}
	}
	return active
}

// Contains reports whether Lower ≤ x ≤ Upper coordinate-wise. It panics if
// the lengths differ.
func (b Box) Contains(x []float64) bool {
	if len(b.Lower) != len(x) || len(b.Upper) != len(x) {
		panic("sa: Box length mismatch")
	}
	for i, v := range x {
		if !(v >= b.Lower[i] && v <= b.Upper[i]) {
			return false
		}
	}
	return true
}

// validate checks the bounds for dimension d.
func (b Box) validate(d int) error {
	if len(b.Lower) != d || len(b.Upper) != d {
		return fmt.Errorf("%w: Box has %d lower and %d upper bounds for dimension %d", ErrDimension, len(b.Lower), len(b.Upper), d)
	}
	for i := range d {
		lo, hi := b.Lower[i], b.Upper[i]
		if math.IsNaN(lo) || math.IsNaN(hi) || lo > hi || math.IsInf(lo, 1) || math.IsInf(hi, -1) {
			return settingsErr("Box bound %d is [%v, %v]: need Lower ≤ Upper, no NaN", i, lo, hi)
		}
	}
	return nil
}

// Membership is implemented by projections that can test whether a point
// is in their set. The update core checks every projected point with it
// and stops the run with [ErrProjection] when the projection returned a
// point outside its own set. Box, Ball and Set implement it.
type Membership interface {
	Contains(x []float64) bool
}

// Ball is the projection onto the closed Euclidean ball
// ‖x − Center‖₂ ≤ Radius: a point outside is moved radially onto the
// sphere, x ← Center + Radius·(x − Center)/‖x − Center‖₂. A nil Center is
// the origin.
type Ball struct {
	Center []float64
	Radius float64
}

// ballTol is the relative slack of Ball.Contains: the radial scaling of
// Project is exact up to a few roundings, which can leave a projected point
// a few ulps outside the sphere.
const ballTol = 1e-12

// Project moves x onto the ball if it is outside and reports whether it
// moved. It panics if Center is not nil and its length differs from x's.
func (b Ball) Project(x []float64) bool {
	b.check(x)
	n := b.dist(x)
	if n <= b.Radius {
		return false
	}
	s := b.Radius / n
	for i, v := range x {
		ci := b.center(i)
		x[i] = ci + (v-ci)*s
	}
	return true
}

// Contains reports whether ‖x − Center‖₂ ≤ Radius, allowing a relative
// rounding slack of 1e-12. It panics like Project.
func (b Ball) Contains(x []float64) bool {
	b.check(x)
	cmax := 0.0
	for i := range x {
		cmax = max(cmax, math.Abs(b.center(i)))
	}
	return b.dist(x) <= b.Radius*(1+ballTol)+ballTol*cmax
}

func (b Ball) check(x []float64) {
	if b.Center != nil && len(b.Center) != len(x) {
		panic("sa: Ball length mismatch")
	}
}

func (b Ball) center(i int) float64 {
	if b.Center == nil {
		return 0
	}
	return b.Center[i]
}

// dist returns ‖x − Center‖₂ without overflow for large entries.
func (b Ball) dist(x []float64) float64 {
	scale := 0.0
	for i, v := range x {
		scale = max(scale, math.Abs(v-b.center(i)))
	}
	if scale == 0 || math.IsInf(scale, 0) || math.IsNaN(scale) {
		return scale
	}
	sum := 0.0
	for i, v := range x {
		d := (v - b.center(i)) / scale
		sum += d * d
	}
	return scale * math.Sqrt(sum)
}

func (b Ball) validate(d int) error {
	if b.Center != nil && len(b.Center) != d {
		return fmt.Errorf("%w: Ball has a center of dimension %d for dimension %d", ErrDimension, len(b.Center), d)
	}
	if !(b.Radius > 0) || math.IsInf(b.Radius, 0) {
		return settingsErr("Ball.Radius = %v: must be finite and > 0", b.Radius)
	}
	for i, v := range b.Center {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return settingsErr("Ball.Center[%d] = %v: must be finite", i, v)
		}
	}
	return nil
}

// Set is a caller's own constraint set, given by a membership test and a
// projection onto it; it adapts two functions to a [Projection] with
// [Membership], so that the update core can check the projection: a
// projected point that is not finite or that In rejects stops the run with
// [ErrProjection], before the point is accepted.
type Set struct {
	// In reports whether x is in the set. It must not modify or retain x.
	In func(x []float64) bool
	// Onto replaces x, which is not in the set, by its projection onto the
	// set (usually the nearest point of the set). It must not retain x.
	Onto func(x []float64)
}

// Project leaves x alone and returns false if In(x); otherwise it calls
// Onto(x) and returns true.
func (s Set) Project(x []float64) bool {
	if s.In(x) {
		return false
	}
	s.Onto(x)
	return true
}

// Contains returns In(x).
func (s Set) Contains(x []float64) bool { return s.In(x) }

func (s Set) validate(int) error {
	if s.In == nil || s.Onto == nil {
		return settingsErr("Set needs both In and Onto")
	}
	return nil
}

// validator is implemented by projections that can check themselves
// against the dimension before a run.
type validator interface {
	validate(d int) error
}

var (
	_ validator  = Box{}
	_ validator  = Ball{}
	_ validator  = Set{}
	_ Membership = Box{}
	_ Membership = Ball{}
	_ Membership = Set{}
)
