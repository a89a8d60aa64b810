package sa

import (
	"fmt"
	"math"
	"slices"

	"github.com/stochroot/stochroot/schedule"
)

// core is the one update of the library,
//
//	x_{k+1} = Π( x_k − a_k·Y_k ),
//
// with the Polyak–Ruppert average of the iterates after a burn-in. Every
// driver (pull drivers that call an oracle, the push tuner that is handed
// measurements) owns one core and feeds it measurements through step; no
// other code applies the recursion.
//
// The core owns its buffers; step allocates nothing.
type core struct {
	x, next []float64 // current iterate and scratch for the next one
	avg     []float64 // running mean of the averaged iterates
	nAvg    int       // number of iterates in avg
	burnIn  int       // iterates x_1..x_burnIn are not averaged

	steps   int // updates applied so far (k of the next step)
	gainIdx int // index n passed to Gain; equals steps unless adaptive
	gain    schedule.Schedule
	adapt   schedule.Adaptive // non-nil for adaptive schedules
	prev    []float64         // previous measurement, adaptive only
	hasPrev bool

	proj   Projection
	member Membership // proj's membership test, if it has one
	// active: x was put where it is by the projection, and no step has
	// moved it since (see Result.Active); projected counts the steps in
	// which the projection moved the iterate.
	active    bool
	projected int
	maxAbs    float64 // > 0: |x_i| above it is divergence
}

// newCore copies x0 and prepares a core. The arguments must already be
// validated.
func newCore(x0 []float64, gain schedule.Schedule, burnIn int, proj Projection, maxAbs float64) *core {
	d := len(x0)
	buf := make([]float64, 3*d)
	c := &core{
		x: buf[:d:d], next: buf[d : 2*d : 2*d], avg: buf[2*d:],
		burnIn: burnIn, gain: gain, proj: proj, maxAbs: maxAbs,
	}
	copy(c.x, x0)
	c.member, _ = proj.(Membership)
	if a, ok := gain.(schedule.Adaptive); ok {
		c.adapt = a
		c.prev = make([]float64, d)
	}
	return c
}

// step applies one update with measurement y (len(y) == len(x), checked by
// the callers). On error nothing changes: the iterate, the average, the
// counters and the gain index stay as they were.
func (c *core) step(y []float64) error {
	a := c.gain.Gain(c.gainIdx)
	if !(a >= 0) || math.IsInf(a, 1) {
		return &StepError{Step: c.steps, Err: fmt.Errorf("%w: a_%d = %v", ErrGain, c.gainIdx, a)}
	}
	x, next := c.x, c.next[:len(c.x)]
	y = y[:len(x)]
	// nan stays 0 while every next[i] is finite: v*0 is NaN for ±Inf and NaN.
	nan := 0.0
	for i, yi := range y {
		v := x[i] - a*yi
		next[i] = v
		nan += v * 0
	}
	if nan != 0 { // NaN compares unequal to 0
		for i, yi := range y {
			if math.IsNaN(yi) || math.IsInf(yi, 0) {
				return &StepError{Step: c.steps, Err: fmt.Errorf("%w: Y[%d] = %v", ErrNotFinite, i, yi)}
			}
		}
		return &StepError{Step: c.steps, Err: fmt.Errorf("%w: x − a·Y overflows (a = %v)", ErrDiverged, a)}
	}
	active := false
	if c.proj != nil {
		active = c.proj.Project(next)
		if err := c.checkProjected(next); err != nil {
			return &StepError{Step: c.steps, Err: err}
		}
	}
	if c.maxAbs > 0 {
		for i, v := range next {
			if math.Abs(v) > c.maxAbs {
				return &StepError{Step: c.steps, Err: fmt.Errorf("%w: |x[%d]| = %v exceeds MaxAbs = %v", ErrDiverged, i, math.Abs(v), c.maxAbs)}
			}
		}
	}
	// Commit.
	c.x, c.next = next, x
	switch {
	case active:
		c.projected++
	case c.active && slices.Equal(next, x):
		// A step that did not move the iterate (a zero measurement, or an
		// SPSA perturbation orthogonal to the gradient) leaves it on the
		// boundary where the projection put it.
		active = true
	}
	c.active = active
	if c.adapt != nil {
		var prev []float64
		if c.hasPrev {
			prev = c.prev
		}
		if c.adapt.Advance(y, prev) {
			c.gainIdx++
		}
		copy(c.prev, y)
		c.hasPrev = true
	} else {
		c.gainIdx++
	}
	c.steps++
	if c.steps > c.burnIn {
		c.nAvg++
		w := 1 / float64(c.nAvg)
		avg := c.avg[:len(next)]
		for i, v := range next {
			avg[i] += (v - avg[i]) * w
		}
	}
	return nil
}

// fill copies the core's state into r.
func (c *core) fill(r *Result) {
	r.X = append(r.X[:0], c.x...)
	if c.nAvg > 0 {
		r.Average = append(r.Average[:0], c.avg...)
	} else {
		r.Average = nil
	}
	r.Averaged = c.nAvg
	r.Steps = c.steps
	r.Active = c.active
	r.Projected = c.projected
}

// checkProjected detects a projection that returned a non-finite point or,
// when it can test membership, a point outside its own set.
func (c *core) checkProjected(x []float64) error {
	nan := 0.0
	for _, v := range x {
		nan += v * 0
	}
	if nan != 0 {
		for i, v := range x {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("%w: Π(x)[%d] = %v is not finite", ErrProjection, i, v)
			}
		}
	}
	if c.member != nil && !c.member.Contains(x) {
		return fmt.Errorf("%w: Π(x) is outside the projection's own set (Contains reports false)", ErrProjection)
	}
	return nil
}
