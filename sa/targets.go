package sa

import (
	"fmt"
	"math"
)

// QuantileTuner tunes a one-dimensional setting θ (a timeout, a threshold,
// a buffer size) so that a fraction P of events fall at or below it: it
// looks for the root of
//
//	h(θ) = F(θ) − P,   F the distribution function of the events,
//
// with the measurement Y = 1{event ≤ θ} − P, whose mean is h(θ) (Robbins &
// Monro 1951, "A stochastic approximation method", Ann. Math. Statist.
// 22(3), §1 names quantile estimation as the motivating case; Tierney 1983,
// "A space-efficient recursive procedure for estimating a quantile of an
// unknown distribution", SIAM J. Sci. Stat. Comput. 4(4)). A timeout is the
// typical use: θ is the timeout, an event is a call's duration, and a call
// that times out is an event above θ. Only the comparison with θ is
// needed, so calls cut off by the timeout still count.
//
// # Choosing the gain
//
// The slope of h at the root is the density f(q) of the events at the
// quantile q. A constant gain a gives a time constant of about 1/(a·f(q))
// events and a stationary standard deviation of about
// √(a·P(1−P)/(2·f(q))) (the derivation is beside TestReferenceQuantileConstantGain).
// Each event moves θ by a·(1−P) down (event at or below θ) or a·P up
// (above). Where the density falls at the quantile (f′(q) < 0, the usual
// latency tail), the second-order term of the same derivation,
// f·E[e] + f′·E[e²]/2 ≈ 0, puts the constant-gain iterate above q on
// average by about |f′(q)|/(2f(q))·V, V the stationary variance: a smaller
// gain sits closer but follows drift more slowly. For P = 0.99 a miss
// moves θ 99 times as far as a hit: bound the step with
// TunerSettings.MaxChange and θ with a Box.
//
// With a nil Gain (and MaxChange set) the tuner learns its gain (see
// TunerSettings.Gain); its warm-up gain is MaxChange/max(P, 1−P) from the
// first report, so a miss moves θ up by MaxChange and a hit down by
// MaxChange·min(P, 1−P)/max(P, 1−P).
//
// A decreasing gain
// a_k = c/(k+1+A)^α, α in (1/2, 1), with the Polyak–Ruppert average
// (Tuner.Average) estimates a fixed quantile with the variance
// P(1−P)/(n·f(q)²) of the sample quantile, without storing the events.
//
// # Error bars
//
// Tuner.ErrorBars of a QuantileTuner are refused, with the reason: the
// random-scaling bars of the average were measured to cover 0.905–0.907
// at nominal 95% (TestTunerErrorBarsCoverage: the median of gonum's
// Exponential{Rate: 0.25}, 100 000 reports, 400 replications with bars,
// hand-set and learned gains), below the band [0.92, 0.98], although the
// average's error itself matches √(P(1−P)/n)/f(q). For an interval, run
// independent tuners (or stretches of one, frozen in between) and use the
// spread of their averages. With a constant gain, Tuner.TrackingNoise
// gives the spread of the setting.
type QuantileTuner struct {
	t *Tuner
	p float64
}

// NewQuantileTuner returns a tuner for the P-quantile (0 < P < 1) starting
// at x0. The settings are those of NewTuner for dimension 1.
func NewQuantileTuner(p, x0 float64, s TunerSettings) (*QuantileTuner, error) {
	if !(p > 0 && p < 1) {
		return nil, settingsErr("quantile level P = %v: must be in (0, 1)", p)
	}
	t, err := NewTuner([]float64{x0}, s)
	if err != nil {
		return nil, err
	}
	t.bars.refuse(quantileBarsRefused)
	if t.learn != nil {
		// Y is −P or 1−P: the warm-up gain starts from the largest |Y|
		// there will be, not from the first one seen (a first hit with
		// |Y| = 1−P = 0.01 would make the first moves 99 times too bold,
		// each still within MaxChange but all in one direction).
		t.learn.ymax = max(p, 1-p)
	}
	return &QuantileTuner{t: t, p: p}, nil
}

// P returns the target fraction.
func (q *QuantileTuner) P() float64 { return q.p }

// Tuner returns the underlying tuner (for Freeze, Override, Snapshot,
// Stats and so on).
func (q *QuantileTuner) Tuner() *Tuner { return q.t }

// Param returns the current setting and its version (lock-free).
func (q *QuantileTuner) Param() (float64, uint64) { return q.t.Param1() }

// Observe reports one event seen while the setting of the given version
// was in force: atOrBelow says whether it fell at or below that setting
// (a call that finished within its timeout). It returns what Report
// returns.
func (q *QuantileTuner) Observe(version uint64, atOrBelow bool) (Outcome, error) {
	y := -q.p
	if atOrBelow {
		y = 1 - q.p
	}
	return q.t.Report1(version, y)
}

// quantileBarsRefused is why a QuantileTuner reports no error bars.
const quantileBarsRefused = "QuantileTuner: the random-scaling error bars of the average covered 0.905–0.907 at nominal 95% in the package's check " +
	"(median of an exponential distribution, 100 000 reports, 400 replications), below the band [0.92, 0.98], so they are refused; " +
	"for an interval use the spread of the averages of independent tuners"

// Direction says how the measured level responds to the knob.
type Direction int

const (
	// Rising: the level grows when the knob grows (a concurrency limit and
	// the latency it causes; a cache size and its hit rate).
	Rising Direction = iota + 1
	// Falling: the level shrinks when the knob grows (a cache size and its
	// miss rate; a worker count and the queue length).
	Falling
)

// SetpointTuner drives a measured level m(θ) to a target through a
// monotone knob θ: it looks for the root of
//
//	h(θ) = s·(m(θ) − Target),   s = +1 for Rising, −1 for Falling,
//
// with the measurement Y = s·(level − Target) (Robbins & Monro 1951). The
// slope of h near the root is |m′(θ*)|; a gain of about 1/|m′(θ*)| moves
// most of the way in one step on noiseless data, and a smaller constant
// gain averages the noise over about 1/(a·|m′|) reports.
type SetpointTuner struct {
	t      *Tuner
	target float64
	sign   float64
}

// NewSetpointTuner returns a tuner that drives the level to target (finite)
// through a knob starting at x0. The settings are those of NewTuner for
// dimension 1.
func NewSetpointTuner(target float64, dir Direction, x0 float64, s TunerSettings) (*SetpointTuner, error) {
	if math.IsNaN(target) || math.IsInf(target, 0) {
		return nil, settingsErr("setpoint target = %v: must be finite", target)
	}
	var sign float64
	switch dir {
	case Rising:
		sign = 1
	case Falling:
		sign = -1
	default:
		return nil, settingsErr("setpoint direction = %d: must be Rising or Falling", int(dir))
	}
	t, err := NewTuner([]float64{x0}, s)
	if err != nil {
		return nil, err
	}
	return &SetpointTuner{t: t, target: target, sign: sign}, nil
}

// Target returns the setpoint.
func (s *SetpointTuner) Target() float64 { return s.target }

// Tuner returns the underlying tuner.
func (s *SetpointTuner) Tuner() *Tuner { return s.t }

// Param returns the current knob setting and its version (lock-free).
func (s *SetpointTuner) Param() (float64, uint64) { return s.t.Param1() }

// Observe reports a level measured while the knob of the given version was
// in force. A non-finite level is rejected (ErrNotFinite) and counted. It
// returns what Report returns.
func (s *SetpointTuner) Observe(version uint64, level float64) (Outcome, error) {
	if math.IsNaN(level) || math.IsInf(level, 0) {
		return s.t.Report1(version, level) // rejected and counted by Report
	}
	return s.t.Report1(version, s.sign*(level-s.target))
}

// String describes the direction.
func (d Direction) String() string {
	switch d {
	case Rising:
		return "rising"
	case Falling:
		return "falling"
	}
	return fmt.Sprintf("Direction(%d)", int(d))
}
