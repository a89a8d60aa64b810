package sa

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/stochroot/stochroot/schedule"
)

// ErrNotAvailable reports error bars asked for before there is enough data
// for them: fewer complete batches than Inference.MinBatches, inference
// switched off, or fewer than two replications. It is never hidden behind
// a NaN.
var ErrNotAvailable = errors.New("sa: error bars not yet available")

// CovarianceMode says how much of the covariance of the Polyak–Ruppert
// average the batch-means estimator keeps.
type CovarianceMode int

const (
	// CovarianceAuto keeps the full d×d matrix when d ≤ MaxFullCovariance
	// and the diagonal otherwise.
	CovarianceAuto CovarianceMode = iota
	// CovarianceFull keeps the full d×d matrix: d² numbers, and O(d²) work
	// each time a batch closes (a vanishing share of the steps). A
	// dimension at which the matrix and the reported copy (2d² float64s)
	// would exceed MaxBufferBytes is refused with ErrSettings: d > 8191
	// with batch means, d > 6687 with random scaling (which keeps a
	// second d×d matrix).
	CovarianceFull
	// CovarianceDiagonal keeps the variances only: standard errors and
	// intervals per coordinate, no correlations, O(d) memory.
	CovarianceDiagonal
	// CovarianceOff switches inference off: no error bars, no precision
	// stop, no per-step cost.
	CovarianceOff
)

// MaxFullCovariance is the largest dimension for which CovarianceAuto keeps
// the full covariance matrix (512 KiB of float64 at this size).
const MaxFullCovariance = 256

// DefaultLevel is the confidence level used when Inference.Level is 0.
const DefaultLevel = 0.95

// DefaultBatchScale is the batch scale N used when Inference.BatchScale
// is 0.
const DefaultBatchScale = 3

// DefaultMinBatches is the number of complete batches needed before error
// bars are reported when Inference.MinBatches is 0.
const DefaultMinBatches = 10

// Inference configures the error bars of the Polyak–Ruppert average. The
// zero value switches them on with 95% random-scaling intervals (see
// Method and MethodAuto) and the batch means below running beside them
// with batches matched to the gain and the noise memory of the run.
//
// # Method
//
// The averaged iterates x_1, …, x_n (after the burn-in, numbered from 1)
// are cut into consecutive batches whose lengths grow with n. Batch m ends
// at iterate
//
//	e_m = ⌈ ((m+1)·N)^(1/(1−α)) ⌉,   m = 0, 1, 2, …
//
// (made strictly increasing), with α = BatchExponent and N = BatchScale.
// This is the increasing-batch schedule of Chen, Lee, Tong & Zhang (2020,
// "Statistical inference for model parameters in stochastic gradient
// descent", Ann. Statist. 48(1), Sect. 4; from memory as to the equation
// number), where α is the exponent of the gain a_k ∝ k^(−α): a batch that
// ends at e is about N·e^α/(1−α) long, in step with the time over which
// the iterates forget their past, which grows like 1/a_k. Batch 0 holds
// the transient and is left out of the variance estimate, as in the paper.
// With M complete batches of lengths n_m and means x̄⁽ᵐ⁾, m = 1…M, and
// their length-weighted mean μ,
//
//	Σ̂ = 1/(M−1) · Σ_m n_m (x̄⁽ᵐ⁾ − μ)(x̄⁽ᵐ⁾ − μ)ᵀ,    Cov(x̄_n) ≈ Σ̂ / n,
//
// and the interval for coordinate i is x̄_n,i ± t_{M−1}((1+Level)/2)·√(Σ̂_ii/n).
// Chen et al. divide by M; we divide by M − 1 and use Student's t with
// M − 1 degrees of freedom, which is exact when the batch means are
// independent and normal (a weighted sum of squares about the weighted mean
// is then σ²·χ²_{M−1}), the finite-sample rule of batch means in
// simulation output analysis (common practice). Both agree as M grows.
//
// The estimator is computed on line, as in Zhu, Chen & Wu (2023, "Online
// covariance matrix estimation in stochastic gradient descent", JASA
// 118(541)): no trajectory is stored, memory is O(d²) (O(d) for
// CovarianceDiagonal), each step adds O(d) work and each batch close adds
// O(d²) (a weighted Welford update; West 1979, "Updating mean and variance
// estimates: an improved method", Comm. ACM 22(9)). Zhu et al.'s
// overlapping batches would cost O(d²) on every step, which is why the
// non-overlapping batches of Chen et al. are used here.
//
// # Noise memory
//
// The batches must be longer than the time the iterates take to forget:
// the run estimates that memory from its own steps (see MemoryRatio) and,
// unless FixedBatches, lengthens the batches and starts the estimate again
// when they turn out too short. Batch lengths so follow the noise memory
// of the run and not only the gain's exponent.
//
// # Settledness
//
// Bars are withheld, with ErrorBars.Unsettled set and the reason in Why,
// when the averaged stretch spans fewer than SettledMemories noise
// memories or the batch means drift (a trend test at false-alarm
// probability TrendFalseAlarm; Geweke 1992 in spirit): in both cases a
// transient may still be in the average. A precision stop never fires on
// such bars. Bars are also withheld when the projection was active in more
// than MaxProjectedShare of the averaged steps, and for deterministic runs
// (ErrorBars.Deterministic).
//
// # Estimators
//
// By default (Method = MethodAuto) the reported bars are those of the
// random-scaling statistic of Lee et al. (2022, MethodRandomScaling),
// which covered better and earlier than batch means in the measurements
// of TestCoverageTable (see MethodAuto). The batch means described above
// run beside it in every case: their batches carry the noise memory and
// the settledness check. Method = MethodBatchMeans reports the batch-means
// interval instead (Student's t, available later).
type Inference struct {
	// Level is the confidence level of the intervals, in (0, 1). 0 means
	// DefaultLevel (0.95).
	Level float64

	// Covariance says how much of the covariance to keep. The zero value is
	// CovarianceAuto.
	Covariance CovarianceMode

	// BatchExponent is α in the batch ends above, in (0, 1). 0 means the
	// gain's exponent when Gain is a schedule.Power (or a schedule.Kesten
	// over one) with 1/2 < Exponent < 1, and 0.6 otherwise.
	BatchExponent float64

	// BatchScale is N in the batch ends above, > 0. 0 means
	// DefaultBatchScale (3). Larger values give longer, fewer batches: less
	// bias from correlated batch means, more variance in Σ̂, and error bars
	// later.
	//
	// The batches must be several times longer than the memory of the
	// iterates, about 1/(a_k·λ) steps near step k for a field of slope λ
	// (the smallest eigenvalue of the Jacobian at the root). For a gain
	// Scale/(k+1+Offset)^α the ratio of batch length to memory is about
	// N·Scale·λ/(1−α), whatever k. Measured on least squares with d = 5
	// (the reference test, Scale·λ ≈ 0.8, α = 0.6), nominal 95% intervals
	// covered 0.91–0.92 with N = 1 (ratio 2), 0.937–0.947 with N = 2 and
	// 0.943–0.953 with N = 3 (ratio 6) at n = 100000 steps; in the bottling
	// demo at ratio 4 they covered about 0.89. When the intervals matter,
	// keep N·Scale·λ/(1−α) ≳ 6 or check them with Replicate.
	BatchScale float64

	// MinBatches is the number of complete batches (after batch 0) needed
	// before error bars are reported and before a precision stop may fire;
	// ≥ 2. 0 means DefaultMinBatches (10).
	MinBatches int

	// FixedBatches keeps the batch ends of BatchScale and BatchExponent
	// as they are. By default the batches are lengthened (and the batches
	// so far discarded) when they turn out shorter than MemoryRatio times
	// the estimated noise memory of the run (see Inference, Noise memory).
	FixedBatches bool

	// Method chooses the estimator: MethodAuto (the zero value: random
	// scaling at levels 0.90, 0.95 and 0.99, batch means at other levels),
	// MethodRandomScaling (levels 0.90, 0.95, 0.99 only) or
	// MethodBatchMeans. The settledness check runs on the batch means
	// under each. Replicate's MethodReplications is not a setting.
	Method Method
}

// on reports whether inference is on in a resolved Inference.
func (in Inference) on() bool { return in.Covariance != CovarianceOff }

// resolve validates in for dimension d and gain g and fills in defaults.
func (in Inference) resolve(d int, g schedule.Schedule) (Inference, error) {
	switch in.Covariance {
	case CovarianceAuto:
		in.Covariance = CovarianceFull
		if d > MaxFullCovariance {
			in.Covariance = CovarianceDiagonal
		}
	case CovarianceFull, CovarianceDiagonal, CovarianceOff:
	default:
		return in, settingsErr("Inference.Covariance = %d: not a CovarianceMode", int(in.Covariance))
	}
	if in.Level == 0 {
		in.Level = DefaultLevel
	}
	if !(in.Level > 0 && in.Level < 1) {
		return in, settingsErr("Inference.Level = %v: a confidence level must lie strictly between 0 and 1", in.Level)
	}
	switch in.Method {
	case MethodAuto:
		in.Method = MethodBatchMeans
		if _, ok := RandomScalingQuantile(in.Level); ok {
			in.Method = MethodRandomScaling
		}
	case MethodBatchMeans:
	case MethodRandomScaling:
		if _, ok := RandomScalingQuantile(in.Level); !ok && in.on() {
			return in, settingsErr("Inference.Level = %v with MethodRandomScaling: its critical values are known for 0.90, 0.95 and 0.99 only", in.Level)
		}
	default:
		return in, settingsErr("Inference.Method = %d: not a Method", int(in.Method))
	}
	if in.BatchExponent == 0 {
		in.BatchExponent = gainExponent(g)
	}
	if !(in.BatchExponent > 0 && in.BatchExponent < 1) {
		return in, settingsErr("Inference.BatchExponent = %v: must lie strictly between 0 and 1", in.BatchExponent)
	}
	if in.BatchScale == 0 {
		in.BatchScale = DefaultBatchScale
	}
	if !(in.BatchScale > 0) || math.IsInf(in.BatchScale, 0) {
		return in, settingsErr("Inference.BatchScale = %v: must be finite and > 0", in.BatchScale)
	}
	switch {
	case in.MinBatches == 0:
		in.MinBatches = DefaultMinBatches
	case in.MinBatches < 2:
		return in, settingsErr("Inference.MinBatches = %d: an interval needs at least 2 batches (1 degree of freedom)", in.MinBatches)
	}
	if in.on() {
		need := batchMeansBytes(d, in.Covariance == CovarianceFull)
		if in.Method == MethodRandomScaling {
			need = addBytes(need, randomScalingBytes(d, in.Covariance == CovarianceFull))
		}
		if need > MaxBufferBytes {
			what := "CovarianceDiagonal"
			if in.Covariance == CovarianceFull {
				what = "CovarianceFull (a d×d matrix)"
			}
			return in, settingsErr("Inference.Covariance = %s at dimension %d needs %d bytes, more than MaxBufferBytes = %d; use CovarianceDiagonal or CovarianceOff", what, d, need, MaxBufferBytes)
		}
	}
	return in, nil
}

// batchMeansBytes returns the bytes of the buffers of a batchMeans of
// dimension d: 4d numbers plus d² (full) or d (diagonal) for the
// covariance. The error bars built from a full one hold another d².
func batchMeansBytes(d int, full bool) uint64 {
	n := mulBytes(5, count(d))
	if full {
		n = addBytes(mulBytes(4, count(d)), mulBytes(2, mulBytes(count(d), count(d))))
	}
	return mulBytes(n, 8)
}

// gainExponent returns the exponent α of a power gain when it lies in
// (1/2, 1), and 0.6 otherwise.
func gainExponent(g schedule.Schedule) float64 {
	if k, ok := g.(schedule.Kesten); ok {
		g = k.Base
	}
	if p, ok := g.(schedule.Power); ok && p.Exponent > 0.5 && p.Exponent < 1 {
		return p.Exponent
	}
	return 0.6
}

// Precision stops a run once the error bars are tight enough: when a batch
// of the batch means closes (so the check costs O(d) per batch, not per
// step), the bars of the method in use would be shown (for batch means: at
// least Inference.MinBatches batches are complete; for either: the run has
// settled), the run stops with Reason Precise if for every coordinate i
// the confidence half-width h_i satisfies
//
//	h_i ≤ Absolute   or   h_i ≤ Relative·|x̄_n,i|.
//
// A tolerance of 0 leaves that side out; at least one must be > 0.
//
// Stopping when an estimated error is small selects runs whose variance
// estimate happened to come out low, so the intervals of a run stopped this
// way cover somewhat less often than their nominal level (with batch
// means a larger MinBatches reduces the effect).
type Precision struct {
	Absolute float64
	Relative float64
}

func (p Precision) validate() error {
	if !(p.Absolute >= 0) || math.IsInf(p.Absolute, 0) {
		return settingsErr("Precision.Absolute = %v: must be finite and ≥ 0", p.Absolute)
	}
	if !(p.Relative >= 0) || math.IsInf(p.Relative, 0) {
		return settingsErr("Precision.Relative = %v: must be finite and ≥ 0", p.Relative)
	}
	if p.Absolute == 0 && p.Relative == 0 {
		return settingsErr("Precision has Absolute = 0 and Relative = 0: at least one tolerance must be > 0")
	}
	return nil
}

// batchMeans is the on-line batch-means estimator described at Inference.
// It is fed the averaged iterates one at a time and allocates nothing after
// construction.
type batchMeans struct {
	d    int
	full bool

	alpha, scale float64 // α and N of the batch ends
	minBatches   int
	level        float64

	j       int // averaged iterates seen
	nextEnd int // index of the last iterate of the current batch
	m       int // index of the current batch (0 = transient batch)

	ref   []float64 // reference point of the current batch (the running mean at its start)
	sum   []float64 // Σ (x_j − ref) over the current batch
	count int       // iterates in the current batch

	w   float64   // total length of complete batches 1…M
	mu  []float64 // length-weighted mean of their batch means
	cov []float64 // Σ n_m (x̄⁽ᵐ⁾ − μ)(x̄⁽ᵐ⁾ − μ)ᵀ: d×d row-major upper triangle, or d diagonal
	dm  []float64 // scratch: batch mean − μ

	closed bool    // a batch closed on the last add
	q      float64 // t quantile for the current M (valid when available)

	// Settledness check (see settled.go): the weighted regression of the
	// batch means on the log of the batch midpoints, kept as co-moments
	// about the running means (the same West 1979 update as cov).
	tbar, ctt float64   // weighted mean of t_m, Σ n_m (t_m − t̄)²
	ctx       []float64 // Σ n_m (t_m − t̄)(x̄⁽ᵐ⁾ − μ), per coordinate
	trend     trendVerdict

	// Noise memory (see memory.go): sq is Σ (x_j − ref)² over the current
	// batch, within the pooled within-batch sum of squares of the complete
	// batches and wdf its degrees of freedom Σ (n_m − 1).
	sq, within []float64
	s0, s1     []float64 // Σ y_k and Σ y_k·(x_k − ref) over the batch, y_k = (x_{k+1} − x_k)/a_k
	wslope     []float64 // pooled Σ y_k·(x_k − x̄⁽ᵐ⁾) of the complete batches
	wbias      []float64 // Σ over them of 2·v̂_m/a_m, the centring bias of wslope (see memory)
	gain       float64   // a_k of the last averaged step
	wdf        float64
	done       int  // complete batches folded in since the last restart
	skip       bool // the current batch is the transient (batch 0): left out
	fixed      bool // Inference.FixedBatches: never lengthen the batches
	restarts   int  // times the batches were lengthened
	projected  int  // averaged iterates that the projection moved
	closes     int  // batches closed in all (batch 0 and restarts included)

	// rs is the random-scaling accumulator when that is the method (nil
	// otherwise), fed by tick.
	rs *randomScaling
}

func newBatchMeans(d int, in Inference) *batchMeans {
	b := &batchMeans{
		d: d, full: in.Covariance == CovarianceFull,
		alpha: in.BatchExponent, scale: in.BatchScale,
		minBatches: in.MinBatches, level: in.Level,
	}
	nc := d
	if b.full {
		nc = d * d
	}
	buf := make([]float64, 11*d+nc)
	b.ref, b.sum, b.mu, b.dm, b.ctx = buf[:d:d], buf[d:2*d:2*d], buf[2*d:3*d:3*d], buf[3*d:4*d:4*d], buf[4*d:5*d:5*d]
	b.sq, b.within, b.s0, b.s1, b.wslope = buf[5*d:6*d:6*d], buf[6*d:7*d:7*d], buf[7*d:8*d:8*d], buf[8*d:9*d:9*d], buf[9*d:10*d:10*d]
	b.wbias = buf[10*d : 11*d : 11*d]
	b.cov = buf[11*d:]
	b.skip, b.fixed = true, in.FixedBatches
	b.nextEnd = b.end(0, 0)
	if in.Method == MethodRandomScaling {
		b.rs = newRandomScalingBars(d, b.full, in.Level)
	}
	return b
}

// end returns e_m, at least prev+1.
func (b *batchMeans) end(m, prev int) int {
	e := math.Ceil(math.Pow(float64(m+1)*b.scale, 1/(1-b.alpha)))
	if !(e < float64(math.MaxInt/2)) {
		return math.MaxInt / 2
	}
	return max(int(e), prev+1)
}

// batches returns the number of complete batches after batch 0.
func (b *batchMeans) batches() int { return b.done }

// available reports whether there are enough batches for error bars.
func (b *batchMeans) available() bool { return b.batches() >= b.minBatches }

// add feeds the next averaged iterate x; avg is the running mean including
// x. (The core does the same work fused into its averaging loop.)
func (b *batchMeans) add(x, prev, avg []float64) {
	b.noteSlope(x, prev)
	sum, ref, sq := b.sum[:len(x)], b.ref[:len(x)], b.sq[:len(x)]
	for i, v := range x {
		dv := v - ref[i]
		sum[i] += dv
		sq[i] += dv * dv
	}
	b.tick(avg)
}

// tick counts an iterate already added to sum and closes the batch when it
// ends. The O(d²) work happens only when a batch closes.
// The fast path is small enough to be inlined into the core's step.
func (b *batchMeans) tick(avg []float64) {
	b.closed = false
	b.j++
	b.count++
	if b.rs != nil {
		b.rs.add(avg)
	}
	if b.j >= b.nextEnd {
		b.rollOver(avg)
	}
}

// rollOver closes the current batch (folding it in unless it is batch 0)
// and starts the next one.
func (b *batchMeans) rollOver(avg []float64) {
	if !b.skip {
		b.closeBatch()
	}
	b.skip = false
	// Start the next batch.
	b.m++
	b.nextEnd = b.end(b.m, b.nextEnd)
	b.checkMemory()
	copy(b.ref, avg)
	clear(b.sum)
	clear(b.sq)
	clear(b.s0)
	clear(b.s1)
	b.count = 0
	b.closed = true
	b.closes++
	if b.available() {
		b.q = tQuantile(b.batches()-1, b.level)
	}
	b.trend = b.checkTrend()
}

// closeBatch folds the current batch into μ and the scatter matrix (the
// weighted Welford update of West 1979).
func (b *batchMeans) closeBatch() {
	n := float64(b.count)
	wNew := b.w + n
	f := n * b.w / wNew
	dm := b.dm
	// t_m: log of the midpoint of the batch (averaged iterates j−count+1 … j).
	dt := trendTime(float64(b.j)-(n-1)/2) - b.tbar
	for i := range dm {
		dm[i] = b.ref[i] + b.sum[i]/n - b.mu[i]
		b.mu[i] += dm[i] * n / wNew
		b.ctx[i] += f * dt * dm[i]
	}
	b.ctt += f * dt * dt
	b.tbar += dt * n / wNew
	b.w = wNew
	b.done++
	if n > 1 {
		for i, s := range b.sum {
			w := b.sq[i] - s*s/n // Σ (x_j − x̄)² = Σ (x_j − ref)² − n(x̄ − ref)²
			b.within[i] += w
			b.wslope[i] += b.s1[i] - s/n*b.s0[i] // Σ y_k (x_k − x̄) = Σ y_k (x_k − ref) − (x̄ − ref)·Σ y_k
			if b.gain > 0 {
				// The centring bias of this batch's slope sum (see memory).
				b.wbias[i] += 2 * w / ((n - 1) * b.gain)
			}
		}
		b.wdf += n - 1
	}
	d := b.d
	if b.full {
		for i := range d {
			s := f * dm[i]
			row := b.cov[i*d : (i+1)*d]
			for k := i; k < d; k++ {
				row[k] += s * dm[k]
			}
		}
	} else {
		for i, v := range dm {
			b.cov[i] += f * v * v
		}
	}
}

// variance returns the estimated variance of coordinate i of the average
// of nAvg iterates: Σ̂_ii / n.
func (b *batchMeans) variance(i, nAvg int) float64 {
	c := b.cov[i]
	if b.full {
		c = b.cov[i*b.d+i]
	}
	return c / float64(b.batches()-1) / float64(nAvg)
}

// halfWidths writes the current half-widths into dst; the caller checks
// available().
func (b *batchMeans) halfWidths(dst []float64, nAvg int) {
	for i := range dst {
		dst[i] = b.q * math.Sqrt(b.variance(i, nAvg))
	}
}

// traceHalfWidths writes into dst the half-widths of the method in use
// and reports whether the bars would be shown: the estimator has the data
// for them and the run has settled (see settled). It allocates nothing.
func (b *batchMeans) traceHalfWidths(dst, avg []float64, nAvg int) bool {
	if !b.settled() {
		return false
	}
	if rs := b.rs; rs != nil {
		if !rs.available() || b.memory() == 0 {
			return false
		}
		for i := range dst {
			dst[i] = rs.q * math.Sqrt(rs.variance(i, avg))
		}
		return true
	}
	if !b.available() {
		return false
	}
	b.halfWidths(dst, nAvg)
	return true
}

// precise reports whether every half-width meets p (see Precision).
func (b *batchMeans) precise(p *Precision, avg []float64, nAvg int) bool {
	if why, _ := b.refusal(); why != "" || b.degenerate() {
		return false // never stop on bars that are not reported
	}
	for i, a := range avg {
		h := b.q * math.Sqrt(b.variance(i, nAvg))
		if !(h <= p.Absolute || h <= p.Relative*math.Abs(a)) {
			return false
		}
	}
	return true
}

// tQuantile returns the (1+level)/2 quantile of Student's t with df degrees
// of freedom (gonum distuv.StudentsT).
func tQuantile(df int, level float64) float64 {
	return distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(df)}.Quantile((1 + level) / 2)
}

// batchMeansAssumes is the plain statement attached to batch-means error
// bars.
const batchMeansAssumes = "Batch means (Chen, Lee, Tong & Zhang 2020): the interval treats the " +
	"Polyak–Ruppert average as normal about the root, with a covariance estimated from the spread " +
	"of the means of growing batches of this run's own iterates and Student's t with (batches − 1) " +
	"degrees of freedom. It assumes the run has settled near one root, the gain decays more slowly " +
	"than 1/k, the noise has finite variance and is independent from step to step given the past, " +
	"the field is smooth near the root, and the batches are long enough to be nearly independent. " +
	"It covers the random error only. Batches too short for the iterates to forget, an active " +
	"projection or a constant gain make it too narrow; a transient from a distant start that is " +
	"still in the average (use BurnIn) biases the estimate and distorts the interval."

// replicationAssumes is the plain statement attached to replication error
// bars.
const replicationAssumes = "Independent replications: the interval treats the estimates of the " +
	"runs (independent seeds) as independent draws from one distribution and their mean as normal, " +
	"with Student's t with (runs − 1) degrees of freedom, exact for normal estimates. It measures " +
	"the spread between runs only: a bias every run shares (a transient that has not died out, too " +
	"few steps, a wrong root) is not in it."

// ErrorBars are the standard errors, covariance and confidence intervals of
// an estimate, with the statement of what they assume. When Available is
// false the slices are nil (never NaN) and Why says what is missing.
//
// The interval for coordinate i is Center[i] ± HalfWidth[i], with
// HalfWidth[i] = Quantile·StdErr[i] and Quantile the (1+Level)/2 quantile
// of Student's t with DF degrees of freedom (batch means, replications) or
// the random-scaling critical value (see Method).
type ErrorBars struct {
	// Available reports whether the error bars below exist.
	Available bool
	// Why says, when Available is false, what is missing.
	Why string
	// Center is the estimate the bars are about (the Polyak–Ruppert
	// average, or the mean of the replications).
	Center []float64
	// StdErr[i] is the estimated standard deviation of Center[i].
	StdErr []float64
	// Covariance is the estimated covariance matrix of Center, or nil when
	// only the diagonal is kept (CovarianceDiagonal).
	Covariance *mat.SymDense
	// Level is the confidence level of HalfWidth.
	Level float64
	// DF is the number of degrees of freedom of the t quantile (0 for
	// random scaling).
	DF int
	// Quantile is the (1+Level)/2 quantile of Student's t with DF degrees
	// of freedom, or for random scaling RandomScalingQuantile(Level).
	Quantile float64
	// HalfWidth[i] is the half-width of the interval for coordinate i.
	HalfWidth []float64
	// Count is the number of batches (batch means), averaged iterates
	// (random scaling) or replications behind the bars.
	Count int
	// Assumes is a plain statement of what the bars assume.
	Assumes string
	// Deterministic reports that the run has no sampling error to put an
	// interval on: a full batch, a sampler without randomness, or batch
	// means that are all identical. Available is then false and Why says
	// which; the error of such a run is an optimisation error.
	Deterministic bool
	// Method is the estimator behind the bars: MethodRandomScaling,
	// MethodBatchMeans, or MethodReplications for the bars of Replicate
	// (MethodAuto when no estimator was set up).
	Method Method
	// Unsettled reports that the settledness check found a trend in the
	// batch means: a transient is still in the average, which biases it
	// and makes the interval too narrow about the wrong point. Available
	// is then false, Why says which coordinate and the test statistic, and
	// a precision stop does not fire. See Inference (Settledness).
	Unsettled bool
}

// Err returns nil when the error bars are available and an error wrapping
// ErrNotAvailable that says why otherwise.
func (e *ErrorBars) Err() error {
	if e.Available {
		return nil
	}
	return fmt.Errorf("%w: %s", ErrNotAvailable, e.Why)
}

// Interval returns the interval for coordinate i at level Level. It
// returns an error wrapping ErrNotAvailable when the bars are not
// available, and panics if i is out of range.
func (e *ErrorBars) Interval(i int) (lo, hi float64, err error) {
	if err := e.Err(); err != nil {
		return 0, 0, err
	}
	return e.Center[i] - e.HalfWidth[i], e.Center[i] + e.HalfWidth[i], nil
}

// HalfWidthsAt writes into dst the half-widths at another confidence level
// and returns dst (allocated when nil). It returns an error wrapping
// ErrSettings when the level is not in (0, 1), one wrapping
// ErrNotAvailable when the bars are not available, and one wrapping
// ErrDimension when dst is not nil and has the wrong length; dst is then
// left unchanged.
func (e *ErrorBars) HalfWidthsAt(dst []float64, level float64) ([]float64, error) {
	if !(level > 0 && level < 1) {
		return dst, settingsErr("HalfWidthsAt: confidence level %v: must lie strictly between 0 and 1", level)
	}
	if err := e.Err(); err != nil {
		return dst, err
	}
	if dst == nil {
		dst = make([]float64, len(e.StdErr))
	}
	if len(dst) != len(e.StdErr) {
		return dst, fmt.Errorf("%w: HalfWidthsAt: dst has length %d, the error bars have dimension %d", ErrDimension, len(dst), len(e.StdErr))
	}
	q := 0.0
	if e.Method == MethodRandomScaling {
		var ok bool
		if q, ok = RandomScalingQuantile(level); !ok {
			return dst, settingsErr("HalfWidthsAt: confidence level %v: random-scaling critical values are known for 0.90, 0.95 and 0.99 only", level)
		}
	} else {
		q = tQuantile(e.DF, level)
	}
	for i, s := range e.StdErr {
		dst[i] = q * s
	}
	return dst, nil
}

// errorBars builds the error bars of the average avg of nAvg iterates.
func (b *batchMeans) errorBars(avg []float64, nAvg int) ErrorBars {
	e := ErrorBars{Level: b.level, Count: b.batches(), Assumes: batchMeansAssumes, Method: MethodBatchMeans}
	// An unsettled run says so first: more batches would not help.
	if why, unsettled := b.refusal(); why != "" {
		e.Unsettled = unsettled
		e.Why = why
		return e
	}
	if !b.available() {
		e.Why = fmt.Sprintf("%d complete batches after the first, %d needed (batch %d ends at averaged iterate %d, now %d)",
			b.batches(), b.minBatches, b.m, b.nextEnd, b.j)
		if b.restarts > 0 {
			e.Why += fmt.Sprintf("; the batches were lengthened %d times to follow the noise memory of the run (estimated %.3g steps)", b.restarts, b.memory())
		}
		return e
	}
	if b.degenerate() {
		e.Deterministic = true
		e.Why = fmt.Sprintf("the %d batch means are identical in every coordinate: the run shows no sampling error "+
			"(a deterministic run, or one stuck at a point); a zero-width interval would claim an exact answer", b.batches())
		return e
	}
	d := b.d
	e.Available = true
	e.Center = append([]float64(nil), avg...)
	e.DF = b.batches() - 1
	e.Quantile = b.q
	e.StdErr = make([]float64, d)
	e.HalfWidth = make([]float64, d)
	for i := range d {
		e.StdErr[i] = math.Sqrt(b.variance(i, nAvg))
		e.HalfWidth[i] = e.Quantile * e.StdErr[i]
	}
	if b.full {
		s := 1 / float64(e.DF) / float64(nAvg)
		data := make([]float64, d*d)
		for i := range d {
			for k := i; k < d; k++ {
				data[i*d+k] = b.cov[i*d+k] * s
				data[k*d+i] = data[i*d+k]
			}
		}
		e.Covariance = mat.NewSymDense(d, data)
	}
	return e
}
