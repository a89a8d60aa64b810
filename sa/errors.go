package sa

import (
	"errors"
	"fmt"
)

// Errors reported by the drivers. Test for them with errors.Is; errors that
// happen during a step arrive wrapped in a *StepError.
var (
	// ErrSettings is wrapped by every invalid-settings error; the message
	// names the field and says why.
	ErrSettings = errors.New("sa: invalid settings")
	// ErrDimension reports a zero dimension or mismatched lengths.
	ErrDimension = errors.New("sa: dimension mismatch")
	// ErrNilOracle reports a nil oracle.
	ErrNilOracle = errors.New("sa: oracle is nil")
	// ErrNotFinite reports a measurement with a NaN or ±Inf entry.
	ErrNotFinite = errors.New("sa: measurement is not finite")
	// ErrDiverged reports an update that would make the iterate non-finite
	// or larger in magnitude than Settings.MaxAbs.
	ErrDiverged = errors.New("sa: iterate diverged")
	// ErrGain reports a gain a_k that is negative, NaN or infinite.
	ErrGain = errors.New("sa: gain is not a finite value ≥ 0")
	// ErrProjection reports a projection that returned a non-finite point,
	// or a point that its own membership test ([Membership]) rejects.
	ErrProjection = errors.New("sa: projection returned a point that is not finite or not in its set")
	// ErrOutOfBounds reports a starting point (of a pull run or a tuner)
	// or a tuner override outside the projection set or beyond MaxAbs.
	ErrOutOfBounds = errors.New("sa: parameter outside its bounds")
)

// StepError is the error of a step that could not be applied. Step counts
// from 0 (the first update is step 0); the iterate is left as it was before
// the step.
type StepError struct {
	Step int
	Err  error
}

// Error returns "sa: step N: " followed by the cause.
func (e *StepError) Error() string { return fmt.Sprintf("sa: step %d: %v", e.Step, e.Err) }

// Unwrap returns the cause.
func (e *StepError) Unwrap() error { return e.Err }

func settingsErr(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{ErrSettings}, args...)...)
}
