package sa

import (
	"fmt"
	"math"

	"github.com/stochroot/stochroot/schedule"
)

// Error bars and tracking noise of a Tuner.
//
// A decreasing gain: the Polyak–Ruppert average converges to the root, and
// its error bars come from the package's estimators fed with the tuner's
// own iterates (batch means, inference.go; random scaling,
// randomscaling.go), exactly as a pull run's: the settledness check and
// the noise-memory rule apply.
//
// A constant gain: the iterate never settles, and the average of a
// tracking run has no fixed target to cover. What an operator needs is the
// size of the wobble: the stationary standard deviation of the parameter
// about the target it follows (trackNoise).

// tunerBars holds the error-bar state of a tuner; mu is held for every
// call.
type tunerBars struct {
	d   int
	in  Inference // resolved
	ok  bool      // the gain allows bars (a learned gain: after its warm-up)
	why string    // non-empty: no bars for this tuner or for now, and why
	// refused, if not empty, withholds the bars of this kind of tuner
	// for good (the estimators still run).
	refused string
	bm      *batchMeans
}

// learnedBarsRefused is why a tuner with a decreasing learned gain
// reports no error bars.
const learnedBarsRefused = "learned gain: the random-scaling error bars of the average covered 0.917 (setpoint, linear level) and 0.907 " +
	"(quantile) at nominal 95% in the package's check (100 000 reports, 400 replications), below the band [0.92, 0.98], so they are refused; " +
	"a hand-set decreasing gain (schedule.Power) gets them on a Tuner or SetpointTuner"

// decays reports whether g is a gain that decays more slowly than 1/k
// (schedule.Power with exponent in (1/2, 1), possibly under Kesten's
// rule), the condition of the error bars, and otherwise says why not.
func decays(g schedule.Schedule) (bool, string) {
	base := g
	if k, ok := g.(schedule.Kesten); ok {
		base = k.Base
	}
	switch p := base.(type) {
	case schedule.Power:
		if p.Exponent > 0.5 && p.Exponent < 1 {
			return true, ""
		}
		return false, fmt.Sprintf("the gain's exponent is %v: the error bars of the Polyak–Ruppert average need a gain decaying as (k+1)^−α with 1/2 < α < 1", p.Exponent)
	case schedule.Constant:
		return false, "constant gain: the parameter keeps moving with the noise and follows the target rather than converging to it, so the average gets no interval; Tuner.TrackingNoise gives the stationary spread of the parameter"
	}
	return false, "the gain is not a schedule.Power with 1/2 < Exponent < 1 (or Kesten's rule over one), so this package cannot tell whether it decays as the error bars of the average require"
}

// newTunerBars prepares the error bars for a tuner of dimension d with the
// resolved settings s; learned reports a learned gain.
func newTunerBars(d int, s TunerSettings, learned bool) (*tunerBars, error) {
	g := s.Gain
	if learned {
		g = schedule.Power{Scale: 1, Exponent: learnedExponent}
	}
	in := s.Inference
	in.Method = MethodRandomScaling // see Tuner.ErrorBars
	in, err := in.resolve(d, g)
	if err != nil {
		return nil, fmt.Errorf("TunerSettings.%w", err)
	}
	b := &tunerBars{d: d, in: in}
	switch {
	case !in.on():
		b.why = "inference is off (TunerSettings.Inference.Covariance = CovarianceOff)"
	case learned && s.Memory > 0:
		b.why = "constant learned gain (TunerSettings.Memory > 0): the parameter follows the target rather than converging to it, so the average gets no interval; Tuner.TrackingNoise gives the stationary spread of the parameter"
	case learned:
		b.why = "learned gain: the error bars start when the warm-up ends (the average restarts there)"
	default:
		if ok, why := decays(g); !ok {
			b.why = why
		} else {
			b.ok = true
			b.restart()
		}
	}
	return b, nil
}

// averageRestarted is called when the average starts again (Override, the
// end of a learned warm-up, a Restore with nothing averaged).
func (b *tunerBars) averageRestarted() {
	if b.ok {
		b.restart()
	}
}

// refuse withholds the bars of this tuner for good, with the reason.
// The estimators keep running (the coverage check reads them).
func (b *tunerBars) refuse(why string) {
	b.refused = why
}

// restored is called after a Restore of a state with n averaged iterates.
func (b *tunerBars) restored(n int) {
	switch {
	case !b.ok:
	case n == 0:
		b.restart()
	default:
		b.stop("restored from a snapshot with an average of " + fmt.Sprint(n) + " iterates: the snapshot does not carry the error bars' state, so they are withheld until the average restarts (Override)")
	}
}

// restart starts the estimators again for an average that restarts now.
func (b *tunerBars) restart() {
	b.why = ""
	b.bm = newBatchMeans(b.d, b.in) // with its random-scaling sums (in.Method)
}

// stop withholds the bars with the reason why until the next restart.
func (b *tunerBars) stop(why string) {
	b.why = why
	b.bm = nil
}

// after feeds the iterate of a step just applied (projected tells whether
// the projection moved it) when it entered the average.
func (b *tunerBars) after(c *core, averaged, projected bool) {
	if b.bm == nil || !averaged {
		return
	}
	b.bm.gain = c.lastGain
	if projected {
		b.bm.projected++
	}
	b.bm.add(c.x, c.next, c.avg) // a step leaves the previous iterate in c.next
}

// bars builds the error bars of the average avg of n iterates.
func (b *tunerBars) bars(avg []float64, n int) ErrorBars {
	switch {
	case b.refused != "":
		return ErrorBars{Level: b.in.Level, Method: b.in.Method, Why: b.refused}
	case b.bm == nil:
		return ErrorBars{Level: b.in.Level, Method: b.in.Method, Why: b.why}
	case n == 0:
		return ErrorBars{Level: b.in.Level, Method: b.in.Method, Why: "no iterate has been averaged yet"}
	case b.bm.rs != nil:
		return b.bm.rs.errorBars(avg, b.in.Level, b.bm)
	}
	return b.bm.errorBars(avg, n)
}

// ErrorBars returns the error bars of the tuner's Polyak–Ruppert average
// (the value Average copies), built as for a pull run (see Inference and
// ErrorBars) from the tuner's own iterates with TunerSettings.Inference.
// They exist only for a gain that decays more slowly than 1/k — a
// schedule.Power with 1/2 < Exponent < 1, or a learned gain with Memory = 0
// after its warm-up — and only once the estimator has enough data and
// finds the run settled; otherwise Available is false and Why says why (a
// constant gain is pointed to TrackingNoise). They restart with the
// average (Override, the end of a learned warm-up). The snapshot does not
// carry their state: after a Restore of a snapshot with averaged iterates
// they are withheld until the average restarts.
//
// Measured coverage decides where they are offered (TestTunerErrorBarsCoverage,
// 100 000 reports, 400 replications with bars, nominal 95%, band
// [0.92, 0.98]): a SetpointTuner on a linear level with normal noise and
// the gain 1.5/(k+1)^0.7 covered 0.930, so Tuner and SetpointTuner with a
// hand-set decreasing gain report them; the same with the learned gain
// covered 0.915 and a QuantileTuner (median of an exponential law) 0.915
// with a hand-set and 0.912 with the learned gain, so a learned gain and
// a QuantileTuner refuse them, with the reason. The error of the average
// itself matched its asymptotic standard error in those checks: it is the
// interval that is slightly too short, so treat 95% bars of a tuner as
// about 92–93%.
//
// The estimator is always the random-scaling statistic of Lee, Liao, Seo
// & Shin (2022; see MethodRandomScaling), whatever Inference.Method says,
// so Inference.Level must be 0.90, 0.95 or 0.99; the settledness check of
// the batch means still runs behind it. Batch means were measured and
// refused: for the median of gonum's Exponential{Rate: 0.25} (a
// QuantileTuner from 1.5 times the median, 200 000 reports, 400
// replications) their nominal 95% intervals covered 0.904 (gain
// (1/f)/(k+1)^0.7) and 0.910 (learned gain), below the band [0.92, 0.98]
// of 400 binomial replications.
func (t *Tuner) ErrorBars() ErrorBars {
	t.mu.Lock()
	defer t.mu.Unlock()
	return t.bars.bars(t.c.avg, t.c.nAvg)
}

// TrackingNoise is the size of the wobble of a tuner with a constant
// gain: the stationary standard deviation of the parameter about the
// target it follows, estimated on line from the tuner's own iterates.
//
// With a constant gain a, near a root of slope s the error e_k = x_k − x*
// is about an AR(1) sequence, e_{k+1} = (1 − a·s)·e_k − a·ξ_k, whose
// stationary variance is a²σ²/(1 − (1 − a·s)²) ≈ a·σ²/(2s) (σ² the noise
// variance of Y; Kushner & Yin 2003, ch. 10, from memory; derived for the
// quantile case beside TestReferenceQuantileConstantGain). The estimate
// needs neither s nor σ: the iterates are cut into blocks of L reports,
// the spread is the pooled variance of the parameter about each block's
// mean over the last TrackingBlocks blocks, divided by 1 − τ/L to undo
// the part of the spread that the block means absorb (τ = (1+ρ)/(1−ρ) is
// the integrated autocorrelation time of an AR(1) sequence with the lag-1
// autocorrelation ρ measured in the same blocks; common practice), and L
// grows to the next power of two above 3·TrackingBlockMemories·τ (and the
// blocks start again) whenever L < TrackingBlockMemories·τ.
//
// The estimate reads every TrackingStride-th iterate (a subsampled AR(1)
// sequence is again AR(1), with the same stationary variance), which keeps
// its cost per report to a counter; Memory and Block are converted back to
// reports.
//
// What it does not contain: the bias of the iterate (for example the
// second-order offset of a quantile under a constant gain, see
// QuantileTuner) and the lag behind a drifting target; a drift within a
// block adds to the spread instead.
type TrackingNoise struct {
	// Available reports whether Spread is backed by enough blocks.
	Available bool
	// Why says, when Available is false, what is missing.
	Why string
	// Spread[i] is the estimated stationary standard deviation of
	// coordinate i of the parameter.
	Spread []float64
	// Memory is the largest estimated integrated autocorrelation time τ
	// of the coordinates, in reports (TrackingStride times that of the
	// subsampled sequence): about 2/(a·s) for a small a·s.
	Memory float64
	// Block is the block length L in reports; Blocks the number of
	// blocks behind Spread (TrackingBlocks when available).
	Block, Blocks int
}

// Constants of the tracking-noise estimate.
const (
	// TrackingBlocks is the number of recent blocks pooled into the
	// spread: with blocks of at least 20 memories it gives a relative
	// standard error of the variance of about √(2τ/(8L)) ≤ 11% (the
	// variance of a sample variance of a Gaussian AR(1), Bartlett's
	// formula; common practice).
	TrackingBlocks = 8
	// TrackingBlockMemories is the least block length, in estimated
	// memories τ, for the spread to be reported.
	TrackingBlockMemories = 20
	// TrackingStride: the estimate reads every TrackingStride-th iterate.
	TrackingStride     = 8
	trackingFirstBlock = 64
)

// trackNoise is the on-line estimate behind TrackingNoise.
type trackNoise struct {
	d     int
	L     int // block length
	n     int // iterates in the current block
	first []float64
	prev  []float64 // last iterate of the current block
	sum   []float64 // Σ (x − first) over the block
	sq    []float64 // Σ (x − first)²
	lag   []float64 // Σ (x_k − first)(x_{k−1} − first) over consecutive pairs
	lsum  []float64 // Σ (x_{k−1} − first) over the pairs (for the lag-1 centring)
	// Closed blocks: ring of the last TrackingBlocks within-block
	// variances and lag-1 autocovariances per coordinate.
	v, c  []float64 // TrackingBlocks × d
	done  int       // blocks closed since the last restart
	grown int       // times L doubled
}

func newTrackNoise(d int) *trackNoise {
	buf := make([]float64, 6*d+2*TrackingBlocks*d)
	return &trackNoise{
		d: d, L: trackingFirstBlock,
		first: buf[:d:d], prev: buf[d : 2*d : 2*d], sum: buf[2*d : 3*d : 3*d], sq: buf[3*d : 4*d : 4*d],
		lag: buf[4*d : 5*d : 5*d], lsum: buf[5*d : 6*d : 6*d],
		v: buf[6*d : 6*d+TrackingBlocks*d : 6*d+TrackingBlocks*d], c: buf[6*d+TrackingBlocks*d:],
	}
}

// restart discards every block (the parameter jumped or the gain changed).
func (tn *trackNoise) restart() {
	tn.n, tn.done = 0, 0
}

// add feeds the next iterate.
func (tn *trackNoise) add(x []float64) {
	if tn.n == 0 {
		copy(tn.first, x)
		clear(tn.sum)
		clear(tn.sq)
		clear(tn.lag)
		clear(tn.lsum)
	}
	for i, v := range x[:tn.d] {
		e := v - tn.first[i]
		if tn.n > 0 {
			p := tn.prev[i] - tn.first[i]
			tn.lag[i] += e * p
			tn.lsum[i] += p
		}
		tn.sum[i] += e
		tn.sq[i] += e * e
		tn.prev[i] = v
	}
	tn.n++
	if tn.n == tn.L {
		tn.close()
	}
}

// close ends the current block.
func (tn *trackNoise) close() {
	n := float64(tn.n)
	slot := tn.done % TrackingBlocks
	v, c := tn.v[slot*tn.d:(slot+1)*tn.d], tn.c[slot*tn.d:(slot+1)*tn.d]
	for i := range tn.d {
		m := tn.sum[i] / n
		v[i] = tn.sq[i]/n - m*m
		// Σ (x_k − m)(x_{k−1} − m) over the n−1 pairs, with the sums kept
		// about first: Σ e_k p_k − m·Σ p_k − m·Σ e_k(pairs) + (n−1)m²,
		// where Σ e_k over the pairs is sum − e_0 = sum (e_0 = 0).
		c[i] = (tn.lag[i] - m*tn.lsum[i] - m*tn.sum[i] + (n-1)*m*m) / (n - 1)
	}
	tn.done++
	tn.n = 0
	if tn.done >= TrackingBlocks {
		if tau := tn.memory(); tau*TrackingBlockMemories > float64(tn.L) && tn.L < math.MaxInt32 {
			// The next power of two that spans 3 times the memories
			// needed: a margin, because τ̂ from blocks too short comes out
			// low (the block means absorb part of the correlation) and the
			// noise in τ̂ must not lengthen the blocks again (at most 2³¹;
			// an infinite τ doubles L).
			for tn.L < math.MaxInt32 && float64(tn.L) < 3*tau*TrackingBlockMemories {
				tn.L *= 2
				if math.IsInf(tau, 1) {
					break
				}
			}
			tn.grown++
			tn.done = 0
		}
	}
}

// memory returns the largest τ = (1+ρ)/(1−ρ) over the coordinates from
// the pooled blocks (+Inf when some ρ ≥ 1 or a spread is 0).
func (tn *trackNoise) memory() float64 {
	k := min(tn.done, TrackingBlocks)
	worst := 0.0
	for i := range tn.d {
		var v, c float64
		for b := range k {
			v += tn.v[b*tn.d+i]
			c += tn.c[b*tn.d+i]
		}
		if !(v > 0) {
			continue
		}
		rho := c / v
		if rho >= 1 {
			return math.Inf(1)
		}
		worst = max(worst, (1+rho)/(1-rho))
	}
	return worst
}

// noise returns the current TrackingNoise.
func (tn *trackNoise) noise() TrackingNoise {
	r := TrackingNoise{Block: tn.L * TrackingStride, Blocks: min(tn.done, TrackingBlocks)}
	if tn.done < TrackingBlocks {
		r.Why = fmt.Sprintf("%d of %d blocks of %d reports complete", tn.done, TrackingBlocks, tn.L*TrackingStride)
		if tn.grown > 0 {
			r.Why += fmt.Sprintf(" (the blocks were lengthened %d times to span %d memories of the parameter)", tn.grown, TrackingBlockMemories)
		}
		return r
	}
	tau := tn.memory()
	r.Memory = tau * TrackingStride
	if math.IsInf(tau, 1) {
		r.Why = "the parameter shows no restoring force within the blocks (it drifts): no stationary spread to report"
		return r
	}
	r.Spread = make([]float64, tn.d)
	zero := true
	for i := range tn.d {
		var v float64
		for b := range TrackingBlocks {
			v += tn.v[b*tn.d+i]
		}
		v /= TrackingBlocks
		r.Spread[i] = math.Sqrt(v / (1 - tau/float64(tn.L)))
		zero = zero && v == 0
	}
	if zero {
		r.Spread = nil
		r.Why = "the parameter has not moved within the blocks"
		return r
	}
	r.Available = true
	return r
}

// TrackingNoise returns the tracking-noise estimate of a tuner with a
// constant gain (schedule.Constant, or a learned gain with Memory > 0
// after its warm-up). For any other gain, Available is false and Why says
// why (ErrorBars then describe the average). The estimate restarts after
// Override, Restore and the end of a learned warm-up.
func (t *Tuner) TrackingNoise() TrackingNoise {
	t.mu.Lock()
	defer t.mu.Unlock()
	if t.track == nil {
		return TrackingNoise{Why: t.trackWhy}
	}
	if t.learn != nil && t.learn.phase == phaseWarmUp {
		return TrackingNoise{Why: "learned gain: the tracking noise starts when the warm-up ends"}
	}
	return t.track.noise()
}
