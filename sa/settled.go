package sa

import (
	"fmt"
	"math"
)

// TrendFalseAlarm is the probability, for a run that has settled (batch
// means independent and normal about one value), that the settledness
// check of the batch-means error bars reports a trend at a given batch
// close, summed over the coordinates (a Bonferroni bound). Measured rates
// on settled runs are in the tests (TestSettlednessFalseAlarm).
const TrendFalseAlarm = 0.001

// trendVerdict is the outcome of the settledness check at the last batch
// close.
type trendVerdict struct {
	unsettled bool
	why       string
}

// checkTrend is the settledness check of the batch-means error bars.
//
// A transient that is still in the Polyak–Ruppert average shows as a
// drift of the batch means: early batches sit on one side of the later
// ones. Geweke (1992, "Evaluating the accuracy of sampling-based approaches
// to the calculation of posterior moments", Bayesian Statistics 4)
// compares the mean of an early and a late part of simulation output in
// units of their standard errors; we use the continuous form of that
// comparison, the weighted least-squares slope of the batch means
// x̄⁽ᵐ⁾ (weights the batch lengths n_m, m = 1…M, batch 0 left out) on
// t_m = log(midpoint of batch m). Under a settled run the batch means
// are independent with variances σ_i²/n_m, and
//
//	T_i = S_tx,i / √(S_tt · s_i²),   s_i² = (S_xx,i − S_tx,i²/S_tt)/(M − 2),
//
// follows Student's t with M − 2 degrees of freedom (the t test of a
// regression slope; common practice). The run is marked unsettled when
// |T_i| exceeds the 1 − TrendFalseAlarm/(2d) quantile for some i. The log
// time axis gives the geometric batches of a long run comparable leverage,
// and a decaying transient (exponential in Σ a_k, or a power of k) is
// monotone in it.
func (b *batchMeans) checkTrend() trendVerdict {
	m := b.batches()
	if m < 4 || !(b.ctt > 0) {
		return trendVerdict{}
	}
	q := tQuantile(m-2, 1-TrendFalseAlarm/float64(b.d))
	worst, wi := 0.0, -1
	for i := range b.d {
		sxx := b.cov[i]
		if b.full {
			sxx = b.cov[i*b.d+i]
		}
		stx := b.ctx[i]
		ss := sxx - stx*stx/b.ctt
		if !(ss > 0) {
			if stx != 0 { // a perfect trend
				return trendVerdict{true, fmt.Sprintf("unsettled: the batch means of coordinate %d lie on a line in log(step) (a transient still in the average; increase BurnIn or the gain, or run longer)", i)}
			}
			continue
		}
		t := stx / math.Sqrt(b.ctt*ss/float64(m-2))
		if math.Abs(t) > q && math.Abs(t) > worst {
			worst, wi = math.Abs(t), i
		}
	}
	if wi < 0 {
		return trendVerdict{}
	}
	return trendVerdict{true, fmt.Sprintf("unsettled: the batch means of coordinate %d drift with log(step) (slope t = %.3g with %d degrees of freedom, threshold %.3g at false-alarm probability %g): "+
		"a transient is still in the average, so its interval would be too narrow about a biased point; increase BurnIn or the gain, or run longer", wi, worst, m-2, q, TrendFalseAlarm)}
}

// degenerate reports that every coordinate's batch-means scatter is
// exactly zero: all batch means are equal.
func (b *batchMeans) degenerate() bool {
	for i := range b.d {
		c := b.cov[i]
		if b.full {
			c = b.cov[i*b.d+i]
		}
		if c != 0 {
			return false
		}
	}
	return true
}

// MaxProjectedShare is the largest share of the averaged iterates that
// the projection may have moved for error bars to be reported.
//
// At an optimum on the boundary of the constraint set the projected
// iterates pile up on the boundary and their average lies inside the
// set, on one side of the root: it is not normal about the root, and an
// interval built as if it were does not cover it (common practice: the
// asymptotic normality of Polyak & Juditsky 1992 needs an interior root).
// A run whose projection is active in more than this share of its
// averaged steps gets no error bars, with the reason.
const MaxProjectedShare = 0.001

// refusal returns why the error bars must not be reported although enough
// data may exist ("" when nothing stands in the way), and whether the
// reason is that the run has not settled: an active constraint, an
// averaged stretch shorter than SettledMemories noise memories, or a
// trend in the batch means.
func (b *batchMeans) refusal() (why string, unsettled bool) {
	if b.j > 0 && float64(b.projected) > MaxProjectedShare*float64(b.j) {
		return fmt.Sprintf("constraint active: the projection moved %d of the %d averaged iterates (more than %g of them); "+
			"the average of a run held on the boundary is not normal about the root, so no interval is given", b.projected, b.j, MaxProjectedShare), false
	}
	if tau := b.memory(); math.IsInf(tau, 1) {
		return "unsettled: the steps show no restoring force toward a root yet in some coordinate (the run may still be drifting); increase the gain or run longer", true
	} else if tau > 0 && float64(b.j) < SettledMemories*tau {
		return fmt.Sprintf("unsettled: the %d averaged iterates span %.3g noise memories (estimated memory %.3g steps at the current gain), %d needed: "+
			"the run has not yet forgotten its start, so a transient may still be in the average; increase the gain or run longer", b.j, float64(b.j)/tau, tau, SettledMemories), true
	}
	if b.trend.unsettled {
		return b.trend.why, true
	}
	return "", false
}

// settled reports whether refusal would return "" (without building the
// message; it allocates nothing).
func (b *batchMeans) settled() bool {
	if b.j > 0 && float64(b.projected) > MaxProjectedShare*float64(b.j) {
		return false
	}
	if tau := b.memory(); math.IsInf(tau, 1) || (tau > 0 && float64(b.j) < SettledMemories*tau) {
		return false
	}
	return !b.trend.unsettled
}

// trendTime is the time axis t_m of the settledness check: the log of the
// batch midpoint (measured false-alarm rates with log, square-root and
// linear time on the least-squares problem were alike: 2, 1 and 2 of 400
// runs).
func trendTime(mid float64) float64 { return math.Log(mid) }
