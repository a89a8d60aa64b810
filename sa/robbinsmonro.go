package sa

import (
	"context"
	"fmt"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
)

// Random streams derived from Settings.Seed: stream s is
// rand.NewPCG(Seed, s). Each consumer of randomness has its own stream so
// that, for example, changing how many numbers one consumer draws does not
// shift another's.
const (
	streamMeasure uint64 = 0x5eed_0001 // the oracle's measurements
)

// RobbinsMonro looks for a root of a vector field h that can only be
// measured with noise (Robbins & Monro 1951, "A stochastic approximation
// method", Ann. Math. Statist. 22(3)). Starting from x0 it iterates
//
//	x_{k+1} = Π( x_k − a_k·Y_k ),   Y_k = h(x_k) + noise,   k = 0, 1, …
//
// and keeps the Polyak–Ruppert average of the iterates (Polyak & Juditsky
// 1992, SIAM J. Control Optim. 30(4)). The sign convention is that of a
// gradient: h should point away from the root (h(x) > 0 for x > x* in one
// dimension); measure −h otherwise.
//
// The run stops on the first of: s.MaxSteps steps, the measurement budget
// s.MaxMeasurements, cancellation of ctx (checked before every step), or a
// failed step (an oracle error, a non-finite measurement, a bad gain, a
// diverging iterate). Budgets are not errors: err is nil and Result.Reason
// says which budget ended the run. On cancellation err wraps ctx.Err().
//
// The Result is filled in on every return, with the last accepted iterate.
// x0 is copied and never modified. The oracle receives the stream
// rand.NewPCG(s.Seed, streamMeasure) and must not modify or retain x.
//
// An oracle that implements oracle.StepAware is told the step index k
// (the number of updates applied so far) before every measurement; the
// gradient-free adapters oracle.KieferWolfowitz and oracle.SPSA use it for
// their perturbation size c_k, so that
//
//	g, _ := oracle.NewSPSA(f, p, oracle.SPSASettings{Sizes: c})
//	res, err := sa.RobbinsMonro(ctx, g, x0, s)
//
// is SPSA minimisation of f, and Result.Measurements counts the 2 (or 2p
// for Kiefer–Wolfowitz) function values each step uses.
func RobbinsMonro(ctx context.Context, h oracle.Field, x0 []float64, s Settings) (Result, error) {
	r := Result{X: append([]float64(nil), x0...), Seed: s.Seed, Settings: s}
	d := len(x0)
	if h == nil {
		return r, ErrNilOracle
	}
	if d == 0 {
		return r, fmt.Errorf("%w: starting point has dimension 0", ErrDimension)
	}
	if od, ok := h.(oracle.Dimensioned); ok && od.Dim() != d {
		return r, fmt.Errorf("%w: oracle has dimension %d, starting point %d", ErrDimension, od.Dim(), d)
	}
	rs, err := s.resolve(d)
	if err != nil {
		return r, err
	}
	r.Settings = rs
	if rs.MaxSteps == NoLimit && rs.MaxMeasurements == 0 && ctx.Done() == nil {
		return r, settingsErr("Settings.MaxSteps is NoLimit with no measurement budget and a context that is never cancelled: the run would never stop")
	}
	perCall := 1
	if c, ok := h.(oracle.Counted); ok {
		perCall = c.MeasurementsPerCall()
	}
	c := newCore(x0, rs.Gain, rs.BurnIn, rs.Projection, rs.MaxAbs)
	rng := rand.New(rand.NewPCG(rs.Seed, streamMeasure))
	y := make([]float64, d)
	err = runPull(ctx, c, h, y, rng, perCall, &r)
	c.fill(&r)
	return r, err
}

// runPull is the pull loop shared by the drivers: check the stop rules,
// measure at the current iterate, apply the update.
func runPull(ctx context.Context, c *core, h oracle.Field, y []float64, rng *rand.Rand, perCall int, r *Result) error {
	maxSteps, maxMeas := r.Settings.MaxSteps, r.Settings.MaxMeasurements
	done := ctx.Done()
	stepper, _ := h.(oracle.StepAware)
	for {
		if maxSteps != NoLimit && c.steps >= maxSteps {
			r.Reason = StepLimit
			return nil
		}
		if maxMeas > 0 && r.Measurements+perCall > maxMeas {
			r.Reason = MeasurementLimit
			return nil
		}
		if done != nil {
			select {
			case <-done:
				r.Reason = Cancelled
				return fmt.Errorf("sa: stopped before step %d: %w", c.steps, context.Cause(ctx))
			default:
			}
		}
		if stepper != nil {
			stepper.SetStep(c.steps)
		}
		err := h.Measure(y, c.x, rng)
		r.Measurements += perCall
		if err != nil {
			r.Reason = Failed
			return &StepError{Step: c.steps, Err: fmt.Errorf("measurement: %w", err)}
		}
		if err := c.step(y); err != nil {
			r.Reason = Failed
			return err
		}
	}
}
