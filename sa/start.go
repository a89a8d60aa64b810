package sa

import (
	"fmt"
	"math"
)

// checkInside is the one rule for a point that a run starts from or that a
// caller sets (a pull driver's x0, a tuner's x0, an override, a restored
// snapshot): every coordinate finite, |x_i| ≤ maxAbs when maxAbs > 0, and
// x inside the projection's set (for a Membership projection its own test,
// otherwise a projection of a copy that must not move it). name says what
// x is in the messages. A non-finite coordinate wraps notFinite (ErrSettings
// for a starting point, ErrNotFinite for a value set at run time); the
// bounds wrap ErrOutOfBounds. It allocates only for a projection without a
// membership test.
func checkInside(name string, x []float64, proj Projection, maxAbs float64, notFinite error) error {
	for i, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%w: %s[%d] = %v is not finite", notFinite, name, i, v)
		}
		if maxAbs > 0 && math.Abs(v) > maxAbs {
			return fmt.Errorf("%w: %s: |%s[%d]| = %v exceeds MaxAbs = %v", ErrOutOfBounds, name, name, i, math.Abs(v), maxAbs)
		}
	}
	if proj == nil {
		return nil
	}
	if m, ok := proj.(Membership); ok {
		if !m.Contains(x) {
			return fmt.Errorf("%w: %s = %v is outside the projection's set", ErrOutOfBounds, name, x)
		}
		return nil
	}
	p := append([]float64(nil), x...)
	if proj.Project(p) {
		return fmt.Errorf("%w: the projection moves %s = %v to %v", ErrOutOfBounds, name, x, p)
	}
	return nil
}
