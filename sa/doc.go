// Package sa is the stochastic-approximation engine of stochroot: one
// update core,
//
//	x_{k+1} = Π( x_k − a_k·Y_k ),   x̄_n = mean of x_{b+1}, …, x_n,
//
// and the drivers that feed it measurements Y_k. [RobbinsMonro] pulls
// measurements of a noisy field from an oracle (package oracle) to find its
// root; with the gradient-free adapters of package oracle (Kiefer–Wolfowitz,
// SPSA) the same driver minimises a function that can only be measured
// with noise. The gain a_k comes from package schedule; Π is an optional
// [Projection]: a [Box], a [Ball] or a caller's own [Set], checked after
// every step ([ErrProjection]); x̄_n is the Polyak–Ruppert average (Polyak &
// Juditsky 1992, "Acceleration of stochastic approximation by averaging",
// SIAM J. Control Optim. 30(4)), which for gains decaying slower than 1/k
// reaches the best possible asymptotic covariance without knowing the slope
// of the field.
//
// The step counter k starts at 0: the first update uses a_0.
//
// # Outcomes
//
// A run ends for a [Reason]. Exhausting a budget is the normal end and is
// not an error. Errors are reserved for input that cannot be used
// ([ErrSettings], [ErrDimension], [ErrNilOracle]), steps that cannot be
// applied ([ErrNotFinite], [ErrDiverged], [ErrGain], an oracle error, all
// wrapped in a [*StepError] that names the step) and cancellation (wrapping
// the context's error). The [Result] is filled in on every return and holds
// the last accepted iterate, which is never non-finite.
//
// # Reproducibility
//
// Settings.Seed is the one seed of a run. Every random stream is derived
// from it as rand.NewPCG(Seed, stream) with a fixed stream number per
// consumer, and the oracle receives its stream with every call. The same
// seed, settings, starting point and oracle give the same Result bit for
// bit, on every run and every machine of the same architecture (fused
// multiply–add may change the last bits across architectures).
//
// # Concurrency
//
// A driver call runs on the calling goroutine. Oracles, schedules and
// projections may be shared between concurrent runs only if they are safe
// for concurrent use; those of this module are.
//
// # Cautions for live systems
//
// When the parameter being tuned drives a production system, bound it (a
// Box projection, Settings.MaxAbs), start from a conservative value, watch
// the iterate and the measurements, and keep a manual override that takes
// the system out of the loop. Stochastic approximation follows noisy
// measurements by design: a broken measurement path moves the parameter
// just as confidently as a working one. Tuning a live system is at the
// operator's risk.
package sa
