package sa

import (
	"strconv"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sampling"
)

// barsPlan is what a driver knows about the noise of its measurements that
// the batch-means error bars depend on. The zero value is the general case:
// measurements whose noise is independent from step to step given the
// past.
type barsPlan struct {
	// refuse, if not empty, says why this run can have no error bars; the
	// batch-means estimator is then not set up.
	refuse string
	// deterministic reports that the run has no sampling error at all (a
	// full batch, or a sampler that uses no randomness).
	deterministic bool
}

// planFiniteSum returns the plan for MinimizeSum with batch oracle g and
// resolved settings rs, or an error wrapping ErrSettings when rs asks for a
// precision stop that can never fire.
//
//   - A full batch, a sampler that hands out every item in a fixed order
//     (sampling.Sequential), or a without-replacement sampler whose batch is
//     all n items (sampling.Shuffled with batch size n): every step uses the
//     exact gradient (up to the order of summation), so the run is
//     deterministic. Its error is an optimisation error, which error bars of
//     a random estimate do not describe; the bars say so instead of
//     reporting a zero-width interval.
//   - sampling.Shuffled or sampling.BlockShuffled with a smaller batch,
//     and any sampler this package does not know, are refused; for
//     Shuffled: the sampling errors within
//     one epoch sum to zero, so consecutive steps are negatively correlated
//     and the error of the average is far smaller than that of sampling
//     with replacement, with a law no estimator here describes. The bars
//     are refused with the reason.
func planFiniteSum(g *oracle.MiniBatch, rs Settings) (barsPlan, error) {
	var p barsPlan
	n, m := g.Len(), g.BatchSize()
	switch g.Sampler().(type) {
	case nil:
		p.deterministic = true
		p.refuse = "deterministic run: a full batch uses the exact gradient every step, so the iterates carry no sampling error " +
			"and no confidence interval describes their error (it is an optimisation error: watch the change in X or the gradient)"
	case *sampling.Sequential:
		p.deterministic = true
		p.refuse = "deterministic run: sampling.Sequential hands out the items in a fixed order and draws no randomness, " +
			"so the iterates carry no sampling error and no confidence interval describes their error (use sampling.Uniform for error bars)"
	case *sampling.Shuffled, *sampling.BlockShuffled:
		// Both hand out every item once per epoch (BlockShuffled besides
		// keeps the items of a block together).
		name := "sampling.Shuffled"
		if _, ok := g.Sampler().(*sampling.BlockShuffled); ok {
			name = "sampling.BlockShuffled"
		}
		if m == n {
			p.deterministic = true
			// strconv, not fmt: fmt's buffer pool allocates at random under
			// the race detector, which would make run allocations vary.
			p.refuse = "deterministic run: " + name + " with batch size " + strconv.Itoa(m) + " = n hands out every item in every batch, " +
				"so each step uses the exact gradient (up to the order of summation) and the iterates carry no sampling error"
			break
		}
		// Measured (TestCoverageTable, NIST StRD NoInt1, SGD with batch 1,
		// Shuffled): batch means over batches of whole epochs covered 90
		// of 194 runs, random scaling 194 of 194 (not its nominal 95%: the
		// error of the average does not follow the law it assumes).
		// Neither is a valid interval; refuse.
		p.refuse = name + " (without replacement) with batch size " + strconv.Itoa(m) + " < n = " + strconv.Itoa(n) +
			": the sampling errors of one epoch sum to zero, so the steps are not independent given the past and neither batch means " +
			"nor random scaling give a valid interval (measured with sampling.Shuffled: epoch-aligned batch means covered 46%, " +
			"random scaling 100% at 95% nominal); use sampling.Uniform for error bars"
	case *sampling.Uniform:
		// Independent draws with replacement: the general case.
	default:
		// A sampler of the caller's: whether its draws are independent is
		// unknown, and without replacement the bars would be confidently
		// wrong (see Shuffled above). Refuse rather than guess.
		p.refuse = "a sampler other than sampling.Uniform: the error bars assume batches drawn independently with replacement, " +
			"which this library cannot check for a sampler it does not know; use sampling.Uniform for error bars"
	}
	if p.refuse != "" && rs.Precision != nil {
		return p, settingsErr("Settings.Precision is set but this run can have no error bars, so the precision stop could never fire: %s", p.refuse)
	}
	return p, nil
}
