package sa

import (
	"math"
	"math/bits"

	"github.com/stochroot/stochroot/schedule"
)

// MaxBufferBytes is the most memory, in bytes, that settings may ask one
// buffer of a run to hold: the covariance of the error bars
// (Inference.Covariance), the trace (Settings.Trace) and the bookkeeping of
// a replication study (Replications.Runs). Settings that would need more are
// refused with an error wrapping ErrSettings that names the field and the
// bytes it would need, instead of failing with an out-of-memory crash. The
// caller's own slices (x0, the data) are not counted.
const MaxBufferBytes = 1 << 30

// mulBytes returns a·b saturated at math.MaxInt64 instead of overflowing.
func mulBytes(a, b uint64) uint64 {
	hi, lo := bits.Mul64(a, b)
	if hi != 0 || lo > math.MaxInt64 {
		return math.MaxInt64
	}
	return lo
}

// count converts a size to uint64 for mulBytes and addBytes; a negative
// size (rejected elsewhere) counts as 0.
func count(n int) uint64 {
	if n < 0 {
		return 0
	}
	return uint64(n)
}

// addBytes returns a + b saturated at math.MaxInt64.
func addBytes(a, b uint64) uint64 {
	if a > math.MaxInt64-b || b > math.MaxInt64 {
		return math.MaxInt64
	}
	return a + b
}

// NoLimit switches off a budget in Settings (MaxSteps).
const NoLimit = -1

// DefaultMaxSteps is the step budget used when Settings.MaxSteps is 0.
const DefaultMaxSteps = 10000

// Settings configures a pull-style run. The zero value of every field except
// Gain is a sensible default, stated in the field's comment. The drivers
// never write to the caller's Settings; Result.Settings holds the resolved
// copy.
type Settings struct {
	// Gain is the gain sequence a_k. nil (the default) lets the run choose
	// its own gain for its budget and report how on Result.Calibration:
	// MinimizeSum on a ready-made least-squares or logistic model
	// (oracle.Regression) takes the step from the data (Bach & Moulines
	// 2013); runs with the oracle.KieferWolfowitz and oracle.SPSA adapters
	// take the robust constant step D̂/(M̂·√N) with averaging (Nemirovski,
	// Juditsky, Lan & Shapiro 2009) from a pilot at x0; every other run
	// spends a short pilot, at most a tenth of its budget and at most 1000
	// oracle calls, on a slope estimate ŝ and uses (1/ŝ)/(k+1)^0.7 with
	// averaging (see Calibration). Pilots count against the budgets. Set a
	// gain yourself when you know the slope of the field near the root
	// (the right scale is then about 1/slope), when the pilot's
	// measurements far from x0 are costly or unsafe, when the run must
	// track a moving target (a constant gain), or when the run is
	// continued from an earlier one. The push-style tuners have their own
	// rule (TunerSettings.Gain).
	Gain schedule.Schedule

	// MaxSteps is the step budget. 0 means DefaultMaxSteps, unless
	// MaxMeasurements or MaxEpochs is set: then 0 means no step budget, so
	// that the budget the caller set is the one that binds (a run given
	// only MaxEpochs = 3 makes 3 passes, not DefaultMaxSteps steps). NoLimit
	// means no step budget (another stop rule or the context must end the
	// run). When several budgets are set, the first one reached ends the
	// run and Result.Reason names it.
	MaxSteps int

	// MaxMeasurements is the budget of underlying measurements (see
	// oracle.Counted). 0 means no measurement budget. A run stops before a
	// step that would exceed it.
	MaxMeasurements int

	// BurnIn is the number of iterates left out of the Polyak–Ruppert
	// average: the average is taken over x_{BurnIn+1}, …, x_n. 0 averages
	// every iterate after the first step. A run that stops after BurnIn
	// steps or fewer has no average: Result.Estimate then returns the last
	// iterate and Result.NotAveraged says so and why.
	BurnIn int

	// Projection, if not nil, is applied after every update. Box, Ball
	// and Set (a caller's own set) are provided. A projected point that is
	// not finite, or that the projection's own Membership test rejects,
	// stops the run with ErrProjection.
	Projection Projection

	// MaxAbs, if > 0, stops the run with ErrDiverged when an update would
	// give a coordinate with |x_i| > MaxAbs. 0 checks only for non-finite
	// iterates.
	MaxAbs float64

	// Inference configures the error bars of the average (random scaling
	// by default, batch means selectable; see Inference), reported in
	// Result.ErrorBars. The zero value gives 95% intervals; CovarianceOff
	// switches them off.
	Inference Inference

	// Precision, if not nil, stops the run with Reason Precise once every
	// coordinate's confidence half-width is within tolerance (see
	// Precision). It needs inference on.
	Precision *Precision

	// Trace, if not nil, records the run every Trace.Every steps into
	// Result.Trace.
	Trace *Tracing

	// MaxEpochs is the budget of passes over the data for the finite-sum
	// driver MinimizeSum: the run stops before a step that would evaluate
	// more than MaxEpochs·n sample gradients. 0 means no epoch budget.
	// Drivers without a data set reject a value other than 0.
	MaxEpochs int

	// Seed is the one seed of the run; every random stream is derived from
	// it (see the package documentation). The same seed gives the same
	// result bit for bit. Zero is a valid seed.
	Seed uint64
}

// resolve validates s for dimension d and returns the copy with defaults
// filled in.
func (s Settings) resolve(d int) (Settings, error) {
	if v, ok := s.Gain.(schedule.Validator); ok {
		if err := v.Validate(); err != nil {
			return s, settingsErr("Settings.Gain: %v", err)
		}
	}
	switch {
	case s.MaxSteps == 0 && (s.MaxMeasurements > 0 || s.MaxEpochs > 0):
		s.MaxSteps = NoLimit // the budget the caller set binds
	case s.MaxSteps == 0:
		s.MaxSteps = DefaultMaxSteps
	case s.MaxSteps < 0 && s.MaxSteps != NoLimit:
		return s, settingsErr("Settings.MaxSteps = %d: must be ≥ 0 or NoLimit", s.MaxSteps)
	}
	if s.MaxMeasurements < 0 {
		return s, settingsErr("Settings.MaxMeasurements = %d: must be ≥ 0 (0 means no budget)", s.MaxMeasurements)
	}
	if s.MaxEpochs < 0 {
		return s, settingsErr("Settings.MaxEpochs = %d: must be ≥ 0 (0 means no budget)", s.MaxEpochs)
	}
	if s.BurnIn < 0 {
		return s, settingsErr("Settings.BurnIn = %d: must be ≥ 0", s.BurnIn)
	}
	if !(s.MaxAbs >= 0) || math.IsInf(s.MaxAbs, 0) {
		return s, settingsErr("Settings.MaxAbs = %v: must be finite and ≥ 0", s.MaxAbs)
	}
	if v, ok := s.Projection.(validator); ok {
		if err := v.validate(d); err != nil {
			return s, err
		}
	}
	in, err := s.Inference.resolve(d, s.Gain)
	if err != nil {
		return s, err
	}
	s.Inference = in
	if s.Precision != nil {
		if err := s.Precision.validate(); err != nil {
			return s, err
		}
		if !in.on() {
			return s, settingsErr("Settings.Precision is set but Inference.Covariance is CovarianceOff: a precision stop needs error bars")
		}
		p := *s.Precision // never share the caller's struct
		s.Precision = &p
	}
	if s.Trace != nil {
		t, err := s.Trace.resolve(d)
		if err != nil {
			return s, err
		}
		s.Trace = &t
	}
	return s, nil
}
