package sa

// Reason says why a run stopped. Reaching a budget is the normal end of a
// stochastic-approximation run and is not an error.
type Reason int

const (
	// NotStarted: the run returned before its first step because of an
	// error in its input.
	NotStarted Reason = iota
	// StepLimit: Settings.MaxSteps steps were taken.
	StepLimit
	// MeasurementLimit: another step would exceed Settings.MaxMeasurements.
	MeasurementLimit
	// Cancelled: the context was cancelled or its deadline passed.
	Cancelled
	// Failed: a step failed; the returned error says why.
	Failed
	// Precise: every coordinate's confidence half-width met the tolerance
	// of Settings.Precision.
	Precise
	// EpochLimit: another step would exceed Settings.MaxEpochs passes over
	// the data (finite-sum driver).
	EpochLimit
)

var reasonNames = [...]string{
	NotStarted:       "not started",
	StepLimit:        "step limit reached",
	MeasurementLimit: "measurement budget reached",
	Cancelled:        "cancelled",
	Failed:           "failed",
	Precise:          "confidence intervals within tolerance",
	EpochLimit:       "epoch budget reached",
}

// String returns a short description of the reason.
func (r Reason) String() string {
	if r >= 0 && int(r) < len(reasonNames) && reasonNames[r] != "" {
		return reasonNames[r]
	}
	return "unknown reason"
}
