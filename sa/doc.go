// Package sa is the stochastic-approximation engine of stochroot: one
// update core,
//
//	x_{k+1} = Π( x_k − a_k·Y_k ),   x̄_n = mean of x_{b+1}, …, x_n,
//
// and the drivers that feed it measurements Y_k. [RobbinsMonro] pulls
// measurements of a noisy field from an oracle (package oracle) to find its
// root; with the gradient-free adapters of package oracle (Kiefer–Wolfowitz,
// SPSA) the same driver minimises a function that can only be measured
// with noise. [MinimizeSum] minimises a finite sum f(x) = (1/n) Σ f_i(x)
// with the gradients of batches of samples: SGD, mini-batch and batch
// gradient descent are the one driver with different batch oracles
// (oracle.NewMiniBatch, oracle.NewFullBatch). [Tuner] is the push side: a
// long-lived object inside a running service that publishes the current
// parameter to any number of goroutines and is handed the measurements they
// observed at it; [QuantileTuner] and [SetpointTuner] wrap it for the two
// commonest service targets (a timeout at a target quantile, a knob that
// holds a measured level at a setpoint). The gain a_k comes from package
// schedule; Π is an optional [Projection]: a [Box], a [Ball] or a caller's
// own [Set], checked after every step ([ErrProjection]); x̄_n is the
// Polyak–Ruppert average (Polyak &
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
// # Error bars
//
// Every run reports, in Result.ErrorBars, the standard errors, covariance
// and confidence intervals of its Polyak–Ruppert average from on-line batch
// means over growing batches of its own iterates (Chen, Lee, Tong & Zhang
// 2020, Ann. Statist. 48(1); see [Inference]), with a plain statement of
// what they assume. They need no stored trajectory and no Hessian, add O(d)
// work per step, and are "not yet available" ([ErrNotAvailable]) until
// enough batches are complete. [Precision] stops a run once the intervals
// are narrow enough. [Replicate] runs independent seeded copies on several
// goroutines for intervals that assume nothing about the correlation within
// a run. Settings.Trace records the run in bounded memory ([Trace]); the
// sub-package saplot turns a trace into PNG plots without adding a plotting
// dependency to this package.
//
// # Reproducibility
//
// Settings.Seed is the one seed of a run. Every random stream is derived
// from it as rand.NewPCG(Seed, stream) with a fixed stream number per
// consumer, and the oracle receives its stream with every call. The same
// seed, settings, starting point and oracle give the same Result bit for
// bit, on every run and every machine of the same architecture (fused
// multiply–add may change the last bits across architectures). [Replicate]
// gives the same answer whatever the number of workers.
//
// # Cancellation
//
// Every driver checks its context before each step and hands it to every
// measurement of an oracle that implements oracle.ContextField (and the
// gradient-free adapters pass it on to an oracle.ContextValue), so a
// cancelled run abandons a blocking measurement as soon as the oracle
// returns; an oracle without it finishes its measurement first.
//
// # Concurrency
//
// A driver call runs on the calling goroutine. [Replicate] calls its
// RunFunc from several goroutines (and recovers a panic in it into an
// *oracle.PanicError for that run). Oracles, schedules and projections may
// be shared between concurrent runs only if they are safe for concurrent
// use. Of this module's, the schedules, projections, function adapters
// (oracle.FieldFunc, oracle.GradientFunc, oracle.ValueFunc,
// oracle.ContextFieldFunc, oracle.ContextValueFunc) and the gradient-free
// adapters oracle.KieferWolfowitz and oracle.SPSA are, provided the
// caller's functions they wrap are (the drivers call the adapters with the
// step index, never through SetStep); an oracle.MiniBatch (also one from
// oracle.NewFullBatch) is not, since its sampler's position belongs to one
// run: [MinimizeSum] holds it for the whole run, and a second concurrent
// run on the same MiniBatch fails with oracle.ErrBusy. A [Tuner] is safe for concurrent use:
// reads of the parameter take no lock and allocate nothing, reports
// serialise on one short critical section (see Tuner).
//
// # Cautions for live systems
//
// When the parameter being tuned drives a production system:
//
//   - Bound it: a Box projection (TunerSettings.Projection) with limits the
//     system is known to survive, and TunerSettings.MaxChange so that one
//     bad report cannot move it far.
//   - Start conservatively: a starting point that is safe if tuning never
//     moves it (a generous timeout, a low concurrency limit), and a gain
//     small enough that the time constant 1/(a·slope) spans many reports.
//   - Watch it: export Tuner.Stats and the values seen by
//     TunerSettings.OnUpdate; alert on the parameter sitting at a bound, on
//     many rejected (non-finite) or stale reports, and on the measured level
//     itself, not only on the parameter.
//   - Keep a manual override: Tuner.Freeze stops tuning, Tuner.Override sets
//     the value by hand, Tuner.Snapshot and Tuner.Restore carry the state
//     over restarts; practise using them before they are needed.
//
// Stochastic approximation follows noisy measurements by design: a broken
// measurement path moves the parameter just as confidently as a working
// one. Tuning a live system is at the operator's risk.
package sa
