package sa

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
)

// streamSample is the random stream of the batch sampler of MinimizeSum.
const streamSample uint64 = 0x5eed_0301

// MinimizeSum minimises a finite sum f(x) = (1/n) Σ f_i(x) by stochastic
// gradient descent on batches: starting from x0 it iterates
//
//	x_{k+1} = Π( x_k − a_k·Y_k ),   Y_k = (1/|B_k|) Σ_{i∈B_k} ∇f_i(x_k),
//
// with the batches B_k of g, and keeps the Polyak–Ruppert average of the
// iterates (Polyak & Juditsky 1992, SIAM J. Control Optim. 30(4)). The
// batch oracle g decides the method:
//
//   - SGD: oracle.NewMiniBatch(f, sampler, 1, …), one sample per step;
//   - mini-batch gradient descent (MBGD): oracle.NewMiniBatch(f, sampler,
//     m, …), m samples per step;
//   - batch gradient descent (BGD): oracle.NewFullBatch(f, …), the exact
//     gradient every step.
//
// With sampling.Uniform the batches are drawn with replacement, with
// sampling.Shuffled without replacement in a fresh order every epoch. For
// SGD and MBGD use a decreasing gain (schedule.Power with 1/2 < Exponent <
// 1) and report Result.Average (Result.Estimate); for BGD a constant gain
// below 2/L, L the largest curvature of f, converges to the minimiser and
// Result.X is the answer.
//
// With s.Gain nil the run chooses its own gain: from the data for a
// least-squares or logistic *oracle.Regression (Bach & Moulines 2013; no
// measurement is spent), by the calibration pilot otherwise (see
// Calibration, reported on Result.Calibration).
//
// The run stops on the first of: s.MaxSteps steps, the budget of
// s.MaxMeasurements sample gradients, the budget of s.MaxEpochs passes over
// the data (s.MaxEpochs·n sample gradients), cancellation of ctx, or a
// failed step (a non-finite gradient, a bad gain, a diverging iterate).
// Budgets are not errors: err is nil and Result.Reason says which budget
// ended the run. Result.Measurements counts sample gradients and
// Result.Epochs the passes over the data.
//
// The run starts with g.Reset(), so the same seed, settings, x0 and data
// give the same Result bit for bit, whatever the number of workers of g.
// The sampler draws from rand.NewPCG(s.Seed, streamSample). x0 is copied
// and never modified. g is held for the whole run (oracle.MiniBatch.Claim):
// a second run started on the same g meanwhile fails at once with an error
// wrapping oracle.ErrBusy. Give each concurrent run its own MiniBatch.
//
// Without a projection, MaxAbs, trace or adaptive gain, the steps take
// their measurements with oracle.MiniBatch.MeasureRankOne, holding g
// (oracle.MiniBatch.Hold) from the first to the last, so that a Measure
// on g from another goroutine meanwhile fails with ErrBusy; an SGD step
// (a batch of one sample of an *oracle.Regression) then applies the
// gradient without writing it out. The Result is the same bit for bit as
// with separate measurements and updates.
func MinimizeSum(ctx context.Context, g *oracle.MiniBatch, x0 []float64, s Settings) (Result, error) {
	return minimizeSum(ctx, g, x0, s, true)
}

// minimizeSum is MinimizeSum; fuse false keeps it on the general pull loop
// (runPullWith), against which the tests check the fused loop (runSum).
func minimizeSum(ctx context.Context, g *oracle.MiniBatch, x0 []float64, s Settings, fuse bool) (Result, error) {
	r := Result{X: append([]float64(nil), x0...), Seed: s.Seed, Settings: s}
	if g == nil {
		return r, ErrNilOracle
	}
	d := len(x0)
	if err := checkStart(g, x0); err != nil {
		return r, err
	}
	rs, err := s.resolve(d)
	if err != nil {
		return r, err
	}
	if err := checkInside("x0", x0, rs.Projection, rs.MaxAbs, ErrSettings); err != nil {
		return r, err
	}
	r.Settings = rs
	if err := checkStops(ctx, rs); err != nil {
		return r, err
	}
	n := g.Len()
	var lim pullLimits
	if rs.MaxEpochs > 0 {
		if rs.MaxEpochs > math.MaxInt/n {
			lim.epochMeasurements = math.MaxInt
		} else {
			lim.epochMeasurements = rs.MaxEpochs * n
		}
	}
	if err := g.Claim(); err != nil {
		return r, err
	}
	defer g.Release()
	g.Reset()
	if rs.Gain == nil {
		cal, err := calibrateSum(ctx, g, x0, rs, lim.epochMeasurements)
		r.Calibration = cal
		if cal != nil {
			r.Measurements = cal.PilotMeasurements
			lim.pilotSteps = cal.PilotCalls
		}
		if err != nil {
			r.Reason = Failed
			r.Epochs = float64(r.Measurements) / float64(n)
			return r, err
		}
		if rs, err = withGain(s, cal.Gain, d); err != nil {
			return r, err
		}
		r.Settings = rs
	}
	c := newCore(x0, rs.Gain, rs.BurnIn, rs.Projection, rs.MaxAbs)
	c.trusted = true // a MiniBatch leaves x alone
	if c.plan, err = planFiniteSum(g, rs); err != nil {
		return r, err
	}
	rng := rand.New(rand.NewPCG(rs.Seed, streamSample))
	y := make([]float64, d)
	if fuse && c.fusable() {
		err = runSum(ctx, c, g, y, rng, &r, lim)
	} else {
		err = runPullWith(ctx, c, g, y, rng, g.MeasurementsPerCall(), &r, lim)
	}
	c.fill(&r)
	noteAverage(&r)
	r.Epochs = float64(r.Measurements) / float64(n)
	return r, err
}

// runSum is runPullWith for a MiniBatch on a fusable core: the same stop
// rules in the same order, with each measurement and its update taken by
// core.descend (fused by the oracle) instead of measure and step. The
// Result is the same bit for bit (TestFusedMatchesPull). A MiniBatch
// leaves x alone, so there is nothing to restore after a failure.
func runSum(ctx context.Context, c *core, g *oracle.MiniBatch, y []float64, rng *rand.Rand, r *Result, lim pullLimits) error {
	perCall := g.MeasurementsPerCall()
	c.configure(r.Settings, perCall)
	held := false
	defer func() {
		if held {
			g.Unhold()
		}
	}()
	done := ctx.Done()
	for {
		if stop, err := lim.stopBefore(ctx, done, c, r, perCall); stop {
			return err
		}
		var merr, serr error
		if !held {
			// Held from the first measurement to the end of the run:
			// another goroutine's Measure meanwhile fails with ErrBusy,
			// and this one's fails the same way if it came first.
			merr = g.Hold()
			held = merr == nil
		}
		if held {
			merr, serr = c.descend(g, y, rng)
		}
		r.Measurements += perCall
		if merr != nil {
			if ctx.Err() != nil {
				r.Reason = Cancelled
				return fmt.Errorf("sa: stopped during step %d: %w (measurement: %w)", c.steps, context.Cause(ctx), merr)
			}
			r.Reason = Failed
			return &StepError{Step: c.steps, Err: fmt.Errorf("measurement: %w", merr)}
		}
		if serr != nil {
			r.Reason = Failed
			return serr
		}
		if c.precise() {
			r.Reason = Precise
			return nil
		}
	}
}
