// Package noisycheck lets a unit test assert facts about noisy numerical
// code with a stated false-alarm probability: "the expectation of this
// noisy routine is v" ([Mean]) or "the root of this noisy field is x*"
// ([Root]), within a tolerance.
//
// Both run package sa with a fixed seed, so a test gives the same verdict
// every time (it never flakes), and stop as soon as the confidence
// interval is narrower than the tolerance (sa.Precision) or at a step
// budget. The verdict:
//
//   - pass: the interval at Level (default 0.999) contains the claimed
//     value; the tolerance is then met as well;
//   - fail: the interval excludes the claimed value. For a correct routine
//     this happens with probability at most 1 − Level per coordinate (the
//     false-alarm probability, 0.001 by default, under the assumptions
//     stated in the interval's Assumes) — for the one fixed seed, so a
//     failing seed fails for ever and should be investigated, not
//     re-seeded;
//   - inconclusive (also a failure): no interval, an unsettled run, or an
//     interval still wider than the tolerance at the budget.
//
// The failure message carries the estimate, the interval, the steps and
// the reason.
package noisycheck

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// ErrMismatch is wrapped by the error of a check whose interval excludes
// the claimed value.
var ErrMismatch = errors.New("noisycheck: the claimed value is outside the confidence interval")

// ErrInconclusive is wrapped by the error of a check that ended without an
// interval narrow enough to decide.
var ErrInconclusive = errors.New("noisycheck: no conclusive interval")

// DefaultLevel is the confidence level when Options.Level is 0: a false
// alarm probability of 0.001 per coordinate.
const DefaultLevel = 0.999

// DefaultMaxSteps is the step budget when Options.MaxSteps is 0.
const DefaultMaxSteps = 1_000_000

// Options tune a check; the zero value is a sensible default.
type Options struct {
	// Level is the confidence level, 0 < Level < 1; 0 means DefaultLevel.
	Level float64
	// MaxSteps is the step budget; 0 means DefaultMaxSteps.
	MaxSteps int
	// Seed is the fixed seed of the run.
	Seed uint64
	// Gain is the gain of Root; nil means 1/(k+1)^0.6, right for a field
	// whose slope at the root is about 1 (scale it by 1/slope otherwise).
	Gain schedule.Schedule
}

// TB is the part of testing.TB the checks use.
type TB interface {
	Helper()
	Errorf(format string, args ...any)
}

// Mean checks that the expectation of draw is want within tol: it reports
// a failure on t (see the package documentation) and returns whether the
// check passed.
func Mean(t TB, draw func(*rand.Rand) float64, want, tol float64, o Options) bool {
	t.Helper()
	if err := CheckMean(draw, want, tol, o); err != nil {
		t.Errorf("%v", err)
		return false
	}
	return true
}

// Root checks that the root of the noisy field h is want within tol in
// every coordinate.
func Root(t TB, h oracle.Field, want []float64, tol float64, o Options) bool {
	t.Helper()
	if err := CheckRoot(h, want, tol, o); err != nil {
		t.Errorf("%v", err)
		return false
	}
	return true
}

// CheckMean is Mean returning an error (nil when the check passes). The
// expectation is the root of h(m) = m − draw (slope 1), found by
// Robbins–Monro with the gain 1/(k+1)^0.6 and Polyak–Ruppert averaging,
// whose average is asymptotically as efficient as the sample mean (Polyak
// & Juditsky 1992). (The gain 1/(k+1), which gives the sample mean itself,
// keeps a memory as long as the run, and the error bars would be withheld
// as unsettled.)
func CheckMean(draw func(*rand.Rand) float64, want, tol float64, o Options) error {
	h := oracle.Scalar(func(m float64, rng *rand.Rand) (float64, error) { return m - draw(rng), nil })
	if o.Gain == nil {
		o.Gain = schedule.Power{Scale: 1, Exponent: 0.6}
	}
	return CheckRoot(h, []float64{want}, tol, o)
}

// CheckRoot is Root returning an error (nil when the check passes).
func CheckRoot(h oracle.Field, want []float64, tol float64, o Options) error {
	if !(tol > 0) {
		return fmt.Errorf("noisycheck: tolerance %v: must be > 0", tol)
	}
	if o.Level == 0 {
		o.Level = DefaultLevel
	}
	if o.MaxSteps == 0 {
		o.MaxSteps = DefaultMaxSteps
	}
	if o.Gain == nil {
		o.Gain = schedule.Power{Scale: 1, Exponent: 0.6}
	}
	x0 := make([]float64, len(want))
	copy(x0, want) // start at the claim: a wrong claim shows as a drift away from it
	res, err := sa.RobbinsMonro(context.Background(), h, x0, sa.Settings{
		Gain: o.Gain, MaxSteps: o.MaxSteps, Seed: o.Seed,
		Inference: sa.Inference{Level: o.Level},
		Precision: &sa.Precision{Absolute: tol},
	})
	if err != nil {
		return fmt.Errorf("noisycheck: the run failed after %d steps: %w", res.Steps, err)
	}
	eb := res.ErrorBars
	if !eb.Available {
		return fmt.Errorf("%w: after %d steps the estimate is %.6g but there is no interval: %s", ErrInconclusive, res.Steps, res.Estimate(), eb.Why)
	}
	for i, w := range want {
		lo, hi, _ := eb.Interval(i)
		if w < lo || w > hi {
			return fmt.Errorf("%w: coordinate %d: claimed %.6g, estimate %.6g, %.4g%% interval [%.6g, %.6g] after %d steps (false-alarm probability %.2g per coordinate for a correct claim)",
				ErrMismatch, i, w, eb.Center[i], 100*o.Level, lo, hi, res.Steps, 1-o.Level)
		}
		if eb.HalfWidth[i] > tol {
			return fmt.Errorf("%w: coordinate %d: claimed %.6g, estimate %.6g, interval [%.6g, %.6g] still wider than ±%.3g after %d steps (raise Options.MaxSteps or the tolerance)",
				ErrInconclusive, i, w, eb.Center[i], lo, hi, tol, res.Steps)
		}
	}
	return nil
}
