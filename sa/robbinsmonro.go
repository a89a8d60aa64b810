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
// With s.Gain nil the run first spends a short calibration pilot on a slope
// estimate and chooses its gain from it (see Calibration, reported on
// Result.Calibration); the pilot's calls count against the budgets.
//
// The run stops on the first of: s.MaxSteps steps, the measurement budget
// s.MaxMeasurements, the precision stop s.Precision (Reason Precise),
// cancellation of ctx (checked before every step), or a failed step (an
// oracle error, a non-finite measurement, a bad gain, a diverging iterate).
// Budgets and the precision stop are not errors: err is nil and
// Result.Reason says which rule ended the run. On cancellation err wraps
// ctx.Err(). Result.ErrorBars holds the batch-means error bars of the
// average (see Inference) and Result.Trace the trace asked for by s.Trace.
//
// The Result is filled in on every return, with the last accepted iterate.
// x0 is copied and never modified. The oracle receives the stream
// rand.NewPCG(s.Seed, streamMeasure) and must not modify or retain x; one
// that writes a NaN or ±Inf into x fails the step with an error wrapping
// ErrNotFinite that says the oracle modified x, and the Result keeps the
// iterate as it was before that measurement.
//
// Every measurement is taken with oracle.MeasureStep: an oracle that
// implements oracle.ContextField receives ctx and the step index k (the
// number of updates applied so far), so that a cancelled run abandons a
// blocking measurement as soon as the oracle returns ctx's error (the run
// then ends with Reason Cancelled); an oracle that only implements
// oracle.StepAware is told k with SetStep. An oracle that ignores ctx is
// not interrupted: cancellation then takes effect before the next step.
// The gradient-free adapters oracle.KieferWolfowitz and oracle.SPSA use k
// for their perturbation size c_k, so that
//
//	g, _ := oracle.NewSPSA(f, p, oracle.SPSASettings{Sizes: c})
//	res, err := sa.RobbinsMonro(ctx, g, x0, s)
//
// is SPSA minimisation of f, and Result.Measurements counts the 2 (or 2p
// for Kiefer–Wolfowitz) function values each step uses.
func RobbinsMonro(ctx context.Context, h oracle.Field, x0 []float64, s Settings) (Result, error) {
	sv, err := newSolver(ctx, h, x0, s)
	if err != nil {
		return sv.Result(), err
	}
	return sv.Run(ctx)
}

// Solver is a Robbins–Monro run that the caller may drive one step at a
// time ([Solver.Step]) or run to a stop rule ([Solver.Run]); RobbinsMonro is
// NewSolver followed by Run. A Solver owns its buffers: Step allocates
// nothing. It is not safe for concurrent use.
type Solver struct {
	c       *core
	h       oracle.Field
	rng     *rand.Rand
	y       []float64
	perCall int
	pilot   int // oracle calls of the calibration pilot, counted as steps
	r       Result
}

// NewSolver validates its input and prepares a run from x0 (copied). On
// error the returned Solver cannot step, but its Result holds x0, the seed
// and the settings as given. With a nil Settings.Gain, NewSolver runs the
// calibration pilot (see Calibration), which measures h.
func NewSolver(h oracle.Field, x0 []float64, s Settings) (*Solver, error) {
	return newSolver(context.Background(), h, x0, s)
}

// newSolver is NewSolver with the context the calibration pilot measures
// under.
func newSolver(ctx context.Context, h oracle.Field, x0 []float64, s Settings) (*Solver, error) {
	sv := &Solver{r: Result{X: append([]float64(nil), x0...), Seed: s.Seed, Settings: s}}
	if h == nil {
		return sv, ErrNilOracle
	}
	d := len(x0)
	if err := checkStart(h, x0); err != nil {
		return sv, err
	}
	rs, err := s.resolve(d)
	if err != nil {
		return sv, err
	}
	if err := checkInside("x0", x0, rs.Projection, rs.MaxAbs, ErrSettings); err != nil {
		return sv, err
	}
	sv.r.Settings = rs
	if rs.MaxEpochs != 0 {
		return sv, settingsErr("Settings.MaxEpochs = %d: RobbinsMonro has no data set to count passes over; use MaxSteps or MaxMeasurements", rs.MaxEpochs)
	}
	sv.perCall, err = perCall(h)
	if err != nil {
		return sv, err
	}
	if rs.Gain == nil {
		if err := checkStops(ctx, rs); err != nil {
			return sv, err
		}
		cal, err := calibratePilot(ctx, h, x0, rs, sv.perCall, pilotBudget(rs, sv.perCall, 0))
		sv.r.Calibration = cal
		sv.r.Measurements = cal.PilotMeasurements
		sv.pilot = cal.PilotCalls
		if err != nil {
			sv.r.Reason = Failed
			return sv, err
		}
		if rs, err = withGain(s, cal.Gain, d); err != nil {
			return sv, err
		}
		sv.r.Settings = rs
	}
	sv.h = h
	sv.c = newCore(x0, rs.Gain, rs.BurnIn, rs.Projection, rs.MaxAbs)
	sv.c.trusted = leavesXAlone(h)
	sv.c.configure(rs, sv.perCall) // error bars and trace also for Step
	sv.rng = rand.New(rand.NewPCG(rs.Seed, streamMeasure))
	sv.y = make([]float64, d)
	return sv, nil
}

// Run steps until a stop rule of the settings fires, ctx is cancelled, or a
// step fails, and returns the Result (see RobbinsMonro). Budgets count from
// the start of the Solver, including steps taken with Step.
func (sv *Solver) Run(ctx context.Context) (Result, error) {
	if sv.c == nil {
		return sv.Result(), fmt.Errorf("%w: the solver was not constructed successfully", ErrSettings)
	}
	rs := sv.r.Settings
	if err := checkStops(ctx, rs); err != nil {
		return sv.Result(), err
	}
	err := runPullWith(ctx, sv.c, sv.h, sv.y, sv.rng, sv.perCall, &sv.r, pullLimits{pilotSteps: sv.pilot})
	return sv.Result(), err
}

// Step takes one measurement at the current iterate and applies the update,
// ignoring the budgets. On error the iterate is unchanged.
func (sv *Solver) Step() error {
	if sv.c == nil {
		return fmt.Errorf("%w: the solver was not constructed successfully", ErrSettings)
	}
	err := sv.c.measure(context.Background(), sv.h, sv.y, sv.rng)
	sv.r.Measurements += sv.perCall
	if err != nil {
		if merr := sv.c.restore(); merr != nil {
			return merr
		}
		return &StepError{Step: sv.c.steps, Err: fmt.Errorf("measurement: %w", err)}
	}
	if err := sv.c.step(sv.y); err != nil {
		if merr := sv.c.restore(); merr != nil {
			return merr
		}
		return err
	}
	return nil
}

// X returns the current iterate. The slice is owned by the Solver and is
// valid only until the next Step or Run; copy it to keep it.
func (sv *Solver) X() []float64 {
	if sv.c == nil {
		return sv.r.X
	}
	return sv.c.x
}

// Result returns the state so far as a Result with freshly allocated
// slices.
func (sv *Solver) Result() Result {
	r := sv.r
	r.X, r.Average = nil, nil
	if sv.c == nil {
		r.X = append([]float64(nil), sv.r.X...)
		return r
	}
	sv.c.fill(&r)
	noteAverage(&r)
	return r
}

// checkStart checks the starting point of a pull run against the oracle:
// dimension ≥ 1 and equal to the oracle's own dimension where it declares
// one (oracle.Dimensioned). Finiteness and bounds are checked by
// checkInside once the settings are resolved.
func checkStart(h oracle.Field, x0 []float64) error {
	d := len(x0)
	if d == 0 {
		return fmt.Errorf("%w: starting point has dimension 0", ErrDimension)
	}
	if od, ok := h.(oracle.Dimensioned); ok && od.Dim() != d {
		return fmt.Errorf("%w: oracle has dimension %d, starting point %d", ErrDimension, od.Dim(), d)
	}
	return nil
}

// perCall returns the measurements one call of h uses: 1, or what an
// oracle.Counted reports, which must be ≥ 1 (0 or fewer would make every
// measurement budget unreachable, or the count negative).
func perCall(h oracle.Field) (int, error) {
	c, ok := h.(oracle.Counted)
	if !ok {
		return 1, nil
	}
	n := c.MeasurementsPerCall()
	if n < 1 {
		return 0, settingsErr("the oracle (%T) reports %d measurements per call (oracle.Counted): must be ≥ 1", h, n)
	}
	return n, nil
}

// checkStops rejects resolved settings under which a pull run could never
// stop: no step, measurement or epoch budget and a context that is never
// cancelled.
func checkStops(ctx context.Context, rs Settings) error {
	if rs.MaxSteps == NoLimit && rs.MaxMeasurements == 0 && rs.MaxEpochs == 0 && ctx.Done() == nil {
		return settingsErr("Settings.MaxSteps is NoLimit with no measurement or epoch budget and a context that is never cancelled: the run would never stop")
	}
	return nil
}

// runPull is the pull loop shared by the drivers: check the stop rules,
// measure at the current iterate, apply the update.
func runPull(ctx context.Context, c *core, h oracle.Field, y []float64, rng *rand.Rand, perCall int, r *Result) error {
	return runPullWith(ctx, c, h, y, rng, perCall, r, pullLimits{})
}

// pullLimits are stop rules of runPullWith beyond those in Settings that
// every driver shares.
type pullLimits struct {
	// epochMeasurements > 0 stops the run with EpochLimit before a step
	// that would take Measurements above it (MaxEpochs·n for finite sums).
	epochMeasurements int
	// pilotSteps is the number of oracle calls a calibration pilot used
	// before the run; they count against MaxSteps.
	pilotSteps int
}

// stopBefore applies the stop rules checked before every step of the pull
// loops (runPullWith and the fused runSum): the step and measurement
// budgets, the epoch budget in lim and cancellation (done is ctx.Done(),
// read once per run). It reports whether the run stops, with r.Reason set
// and the error to return.
func (lim pullLimits) stopBefore(ctx context.Context, done <-chan struct{}, c *core, r *Result, perCall int) (bool, error) {
	if ms := r.Settings.MaxSteps; ms != NoLimit && c.steps+lim.pilotSteps >= ms {
		r.Reason = StepLimit
		return true, nil
	}
	if mm := r.Settings.MaxMeasurements; mm > 0 && r.Measurements+perCall > mm {
		r.Reason = MeasurementLimit
		return true, nil
	}
	if me := lim.epochMeasurements; me > 0 && r.Measurements+perCall > me {
		r.Reason = EpochLimit
		return true, nil
	}
	if done != nil {
		select {
		case <-done:
			r.Reason = Cancelled
			return true, fmt.Errorf("sa: stopped before step %d: %w", c.steps, context.Cause(ctx))
		default:
		}
	}
	return false, nil
}

// runPullWith is runPull with the extra stop rules in lim.
func runPullWith(ctx context.Context, c *core, h oracle.Field, y []float64, rng *rand.Rand, perCall int, r *Result, lim pullLimits) error {
	c.configure(r.Settings, perCall)
	done := ctx.Done()
	for {
		if stop, err := lim.stopBefore(ctx, done, c, r, perCall); stop {
			return err
		}
		err := c.measure(ctx, h, y, rng)
		r.Measurements += perCall
		if err != nil {
			if merr := c.restore(); merr != nil {
				r.Reason = Failed
				return merr
			}
			if ctx.Err() != nil {
				// The measurement gave up because the run was
				// cancelled (a context-aware oracle): a cancellation,
				// not a failure of the oracle.
				r.Reason = Cancelled
				return fmt.Errorf("sa: stopped during step %d: %w (measurement: %w)", c.steps, context.Cause(ctx), err)
			}
			r.Reason = Failed
			return &StepError{Step: c.steps, Err: fmt.Errorf("measurement: %w", err)}
		}
		if err := c.step(y); err != nil {
			r.Reason = Failed
			if merr := c.restore(); merr != nil {
				return merr
			}
			return err
		}
		if c.precise() {
			r.Reason = Precise
			return nil
		}
	}
}
