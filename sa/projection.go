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

// validator is implemented by projections that can check themselves
// against the dimension before a run.
type validator interface {
	validate(d int) error
}

var _ validator = Box{}
