package sa

// Result is the outcome of a run. It is filled in on every return, also
// when an error is returned: X is then the last iterate that was accepted
// (never a non-finite one).
type Result struct {
	// X is the last iterate x_n.
	X []float64
	// Average is the Polyak–Ruppert average of x_{BurnIn+1}, …, x_n, or nil
	// when no iterate has been averaged yet (Steps ≤ BurnIn).
	Average []float64
	// Averaged is the number of iterates in Average.
	Averaged int
	// Steps is the number of updates applied.
	Steps int
	// Measurements is the number of underlying measurements used, including
	// those of a step that failed.
	Measurements int
	// Epochs is the work in passes over the data of a finite-sum run
	// (MinimizeSum): sample gradients evaluated divided by the number of
	// samples n. It is 0 for drivers without a data set.
	Epochs float64
	// Active reports whether the constraint was active at the end: the
	// last iterate x_n is a point the projection produced (it moved the
	// iterate in the step that gave x_n, or in an earlier step after which
	// the iterate has not moved). With noisy measurements near a boundary
	// optimum, inward noise can leave x_n just inside the set, so also look
	// at Projected; note that the Polyak–Ruppert average of points on a
	// curved boundary (a Ball) lies strictly inside the set.
	Active bool
	// Projected is the number of steps in which the projection moved the
	// iterate.
	Projected int
	// ErrorBars are the standard errors, covariance and confidence
	// intervals of Average (random scaling by default; see Inference).
	// Check Available (or Err) before use: they are withheld, with the
	// reason in Why, until there are data enough and the run has settled,
	// and refused where no interval can hold.
	ErrorBars ErrorBars
	// Trace is the record of the run when Settings.Trace asked for one,
	// and nil otherwise.
	Trace *Trace
	// Reason says why the run stopped.
	Reason Reason
	// Seed is the seed the run used; Settings holds the resolved settings.
	Seed     uint64
	Settings Settings
	// Calibration says how the run chose its own gain when Settings.Gain
	// was nil (see Calibration), and is nil when the caller set the gain.
	Calibration *Calibration
	// NotAveraged is empty when Estimate returns the Polyak–Ruppert
	// average, and otherwise says in a sentence why it returns the last
	// iterate X instead (for example a BurnIn that covers every step taken).
	NotAveraged string
}

// Estimate returns Average when it exists and X otherwise: the estimate to
// report for a decreasing gain with averaging.
func (r *Result) Estimate() []float64 {
	if r.Average != nil {
		return r.Average
	}
	return r.X
}
