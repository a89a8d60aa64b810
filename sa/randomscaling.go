package sa

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// Method chooses the estimator behind the error bars of a run.
type Method int

const (
	// MethodAuto, the zero value, is random scaling (MethodRandomScaling)
	// when its critical value is known at Inference.Level (0.90, 0.95,
	// 0.99) and batch means (MethodBatchMeans) at other levels.
	//
	// Why random scaling by default: measured side by side on the same
	// seeds (TestCoverageTable, 400 runs per row, nominal 95%), the runs
	// that showed random-scaling bars covered 0.926 and 0.949 on NIST StRD
	// NoInt1 with SGD and mini-batches of 4 (sampling.Uniform), where
	// batch means covered 0.900 and 0.882 on fewer runs; both were in band
	// on streaming least squares (d = 5); random scaling gave bars with a
	// Kiefer–Wolfowitz gain k^−0.8 (0.921) and with SPSA (0.950) by 2·10^4
	// steps, where batch means had not yet closed ten batches, and on the
	// README's median by 10^4 steps (0.940). Overlapping batch means (Zhu,
	// Chen & Wu 2023), computed on the same paths with the batch starts of
	// the batch-means schedule (TestEstimatorComparison), covered 0.72–0.84
	// where random scaling covered 0.91 or more, and is not offered.
	MethodAuto Method = iota
	// MethodRandomScaling is the random-scaling statistic of Lee, Liao,
	// Seo & Shin (2022, "Fast and robust online inference with stochastic
	// gradient descent via random scaling", AAAI 36(7)): with x̄_s the
	// running average after s averaged iterates,
	//
	//	V_n = (1/n²) Σ_{s=1}^{n} s² (x̄_s − x̄_n)(x̄_s − x̄_n)ᵀ,
	//
	// and √n(x̄_n,i − x*_i)/√V_n,ii converges to the pivotal law of
	// W(1)/(∫₀¹ (W(r) − rW(1))² dr)^{1/2} for a Brownian motion W, so the
	// interval is x̄_n,i ± q·√(V_n,ii/n) with q a quantile of that law
	// (see RandomScalingQuantile). No batch length is chosen: the whole
	// path of the average is used, which is why it is available early
	// (from RandomScalingMinSteps averaged iterates, once the run has
	// settled) and does not depend on the batch lengths. V_n/n is reported
	// as ErrorBars.Covariance when the full covariance is kept
	// (Inference.Covariance).
	//
	// The sum over s is taken on a grid: every s up to
	// randomScalingGrid, then every m-th s with weight m, m the largest
	// power of two ≤ s/randomScalingGrid (a Riemann sum of the same
	// integral with relative spacing at most 1/randomScalingGrid, checked
	// against the exact sum in TestRandomScalingGrid). So the full matrix
	// costs O(d²) at a vanishing share of the steps and an ordinary step
	// adds O(1) work. Levels 0.90, 0.95 and 0.99 are supported.
	MethodRandomScaling
	// MethodBatchMeans is the on-line batch-means estimator described at
	// Inference (Chen, Lee, Tong & Zhang 2020).
	MethodBatchMeans
	// MethodReplications marks the bars of Replicate: Student's t
	// interval of the mean of independent runs.
	MethodReplications
)

// String names the method in plain words ("random scaling", "batch
// means", "replications", "automatic"), for printing beside an interval.
func (m Method) String() string {
	switch m {
	case MethodAuto:
		return "automatic"
	case MethodRandomScaling:
		return "random scaling"
	case MethodBatchMeans:
		return "batch means"
	case MethodReplications:
		return "replications"
	}
	return fmt.Sprintf("Method(%d)", int(m))
}

// RandomScalingMinSteps is the number of averaged iterates before
// random-scaling error bars are reported.
const RandomScalingMinSteps = 1000

// randomScalingGrid is the number of grid points per doubling of s in the
// random-scaling sum (see MethodRandomScaling).
const randomScalingGrid = 1024

// randomScalingCorrGrid is the number of grid points per doubling of s of
// the accumulator that carries the off-diagonal covariances when the full
// matrix is kept. Its d² work per grid point made the default inference
// cost 9.4–9.8 times a step at d = 100 over 2^14 steps (BenchmarkSGDStep)
// with the fine grid, where 5 120 of the 16 384 steps are grid points; on
// this coarse grid they are 352. The variances, and so the half-widths and
// the precision stop, keep the fine grid; the reported covariance takes
// its correlations from the coarse sum (Riemann spacing at most 1/32 of s,
// small beside the sampling error of a correlation estimated from one
// path) and its diagonal from the fine one.
const randomScalingCorrGrid = 32

// RandomScalingQuantile returns q with P(|W(1)|/(∫₀¹(W(r) − rW(1))² dr)^{1/2}
// ≤ q) = level, for level 0.90, 0.95 or 0.99, and ok = false for other
// levels.
//
// Sources: 6.747 at 0.95 is the value tabulated by Abadir & Paruolo (1997,
// "Two mixed normal densities from cointegration analysis", Econometrica
// 65(3)) and used by Kiefer, Vogelsang & Bunzel (2000, Econometrica 68(3))
// and Lee et al. (2022, Table 1); all from memory. 5.31 (0.90) and 10.0
// (0.99) come from our own simulation of the limit (400 000 Brownian paths
// of 2000 steps; Monte Carlo standard errors about 0.02 and 0.1), which
// also gives 6.72 ± 0.03 at 0.95; TestRandomScalingQuantiles repeats a
// smaller simulation.
func RandomScalingQuantile(level float64) (q float64, ok bool) {
	switch level {
	case 0.90:
		return 5.31, true
	case 0.95:
		return 6.747, true
	case 0.99:
		return 10.0, true
	}
	return 0, false
}

// randomScaling accumulates V_n on line. To avoid cancellation the sums
// are kept about a centre r, moved to the current average whenever the
// count doubles:
//
//	A = Σ w_s (x̄_s − r)(x̄_s − r)ᵀ,  B = Σ w_s (x̄_s − r),  C = Σ w_s,
//	n²·V_n = A − (x̄_n − r)Bᵀ − B(x̄_n − r)ᵀ + C(x̄_n − r)(x̄_n − r)ᵀ,
//
// with w_s = m·s² on the grid points s (see MethodRandomScaling). A is
// the upper triangle of a d×d row-major matrix when full, its diagonal
// otherwise.
type randomScaling struct {
	d        int
	full     bool
	grid     float64 // grid points per doubling of s
	s        float64 // averaged iterates seen
	step     int     // grid spacing m
	nextGrid float64 // next grid point
	// corr, if not nil, is a full accumulator on the coarse grid
	// randomScalingCorrGrid that supplies the correlations of the
	// reported covariance of this (diagonal) accumulator.
	corr     *randomScaling
	next     float64 // count at which the centre moves next
	r, a, bb []float64
	c        float64
	q        float64
}

// newRandomScalingOf returns an accumulator on the fine grid, keeping the
// full matrix when full is set.
func newRandomScalingOf(d int, full bool, level float64) *randomScaling {
	return newRandomScalingGrid(d, full, level, randomScalingGrid)
}

func newRandomScalingGrid(d int, full bool, level float64, grid int) *randomScaling {
	na := d
	if full {
		na = d * d
	}
	buf := make([]float64, 2*d+na)
	q, _ := RandomScalingQuantile(level)
	return &randomScaling{d: d, full: full, grid: float64(grid), step: 1, nextGrid: 1, next: 1,
		r: buf[:d:d], bb: buf[d : 2*d : 2*d], a: buf[2*d:], q: q}
}

// newRandomScalingBars returns the accumulator whose bars are reported:
// the variances on the fine grid and, when full, the correlations from a
// full accumulator on the coarse grid (see randomScalingCorrGrid).
func newRandomScalingBars(d int, full bool, level float64) *randomScaling {
	rs := newRandomScalingOf(d, false, level)
	if full {
		rs.corr = newRandomScalingGrid(d, true, level, randomScalingCorrGrid)
	}
	return rs
}

// randomScalingBytes returns the bytes of the buffers of the accumulator
// newRandomScalingBars builds.
func randomScalingBytes(d int, full bool) uint64 {
	n := mulBytes(3, count(d))
	if full {
		n = addBytes(n, addBytes(mulBytes(2, count(d)), mulBytes(count(d), count(d))))
	}
	return mulBytes(n, 8)
}

// add feeds the running average after one more averaged iterate. Off the
// grid it only counts.
func (rs *randomScaling) add(avg []float64) {
	rs.s++
	if rs.corr != nil {
		rs.corr.add(avg)
	}
	if rs.s < rs.nextGrid {
		return
	}
	rs.addGrid(avg)
}

// addGrid folds in the grid point rs.s.
func (rs *randomScaling) addGrid(avg []float64) {
	d := rs.d
	avg = avg[:d]
	if rs.s >= rs.next {
		// Move the centre to avg: with δ = avg − r,
		// A' = A − δBᵀ − Bδᵀ + C·δδᵀ and B' = B − C·δ (exact algebra).
		dl := rs.r // reuse r as δ while A is updated
		for i, v := range avg {
			dl[i] = v - rs.r[i]
		}
		if rs.full {
			for i := range d {
				row := rs.a[i*d : (i+1)*d]
				for k := i; k < d; k++ {
					row[k] += -dl[i]*rs.bb[k] - rs.bb[i]*dl[k] + rs.c*dl[i]*dl[k]
				}
			}
		} else {
			for i, v := range dl {
				rs.a[i] += -2*v*rs.bb[i] + v*v*rs.c
			}
		}
		for i, v := range dl {
			rs.bb[i] -= v * rs.c
		}
		copy(rs.r, avg)
		rs.next *= 2
	}
	w := float64(rs.step) * rs.s * rs.s
	if rs.full {
		for i := range d {
			yi := w * (avg[i] - rs.r[i])
			rs.bb[i] += yi
			row := rs.a[i*d : (i+1)*d]
			for k := i; k < d; k++ {
				row[k] += yi * (avg[k] - rs.r[k])
			}
		}
	} else {
		for i, v := range avg {
			y := v - rs.r[i]
			rs.a[i] += w * y * y
			rs.bb[i] += w * y
		}
	}
	rs.c += w
	// The next grid point: spacing m = the largest power of two ≤ s/grid.
	for 2*float64(rs.step)*rs.grid <= rs.s {
		rs.step *= 2
	}
	rs.nextGrid = rs.s + float64(rs.step)
}

// cov returns n²·V_n[i][k] (see randomScaling) for the average avg.
func (rs *randomScaling) cov(i, k int, avg []float64) float64 {
	yi, yk := avg[i]-rs.r[i], avg[k]-rs.r[k]
	a := rs.a[i]
	if rs.full {
		a = rs.a[min(i, k)*rs.d+max(i, k)]
	} else if i != k {
		return 0
	}
	return a - yi*rs.bb[k] - rs.bb[i]*yk + yi*yk*rs.c
}

// variance returns V_n,ii / n, the estimated variance of x̄_n,i.
func (rs *randomScaling) variance(i int, avg []float64) float64 {
	v := rs.cov(i, i, avg) / (rs.s * rs.s)
	return math.Max(v, 0) / rs.s
}

func (rs *randomScaling) available() bool { return rs.s >= RandomScalingMinSteps }

// randomScalingAssumes is the plain statement attached to random-scaling
// error bars.
const randomScalingAssumes = "Random scaling (Lee, Liao, Seo & Shin 2022): the interval divides the error of the " +
	"Polyak–Ruppert average by a scale computed from the whole path of the running average, whose ratio has a " +
	"known limit law (critical value 6.747 at 95%). It assumes the run has settled near one root, the gain decays " +
	"more slowly than 1/k, the noise has finite variance and is independent from step to step given the past, and " +
	"the path of the average satisfies a functional central limit theorem. It covers the random error only."

// errorBars builds random-scaling error bars of avg (nAvg iterates); rs is
// bm.rs, and the settledness verdict and the degenerate check come from
// bm.
func (rs *randomScaling) errorBars(avg []float64, level float64, bm *batchMeans) ErrorBars {
	e := ErrorBars{Level: level, Count: int(rs.s), Assumes: randomScalingAssumes, Method: MethodRandomScaling}
	if !rs.available() {
		e.Why = fmt.Sprintf("random scaling needs %d averaged iterates, %d so far", RandomScalingMinSteps, int(rs.s))
		return e
	}
	d := rs.d
	zero := true
	for i := range d {
		zero = zero && rs.variance(i, avg) == 0
	}
	if zero {
		e.Deterministic = true
		e.Why = "the running average has not moved: the run shows no sampling error (a deterministic run, or one stuck at a point); a zero-width interval would claim an exact answer"
		return e
	}
	if bm.memory() == 0 {
		e.Why = fmt.Sprintf("random scaling: the noise memory of the run is not estimated yet (it needs one complete batch; %d averaged iterates so far)", int(rs.s))
		return e
	}
	if why, unsettled := bm.refusal(); why != "" {
		e.Unsettled = unsettled
		e.Why = why
		return e
	}
	e.StdErr = make([]float64, d)
	e.HalfWidth = make([]float64, d)
	for i := range d {
		e.StdErr[i] = math.Sqrt(rs.variance(i, avg))
		e.HalfWidth[i] = rs.q * e.StdErr[i]
	}
	e.Available = true
	e.Center = append([]float64(nil), avg...)
	e.Quantile = rs.q
	switch {
	case rs.full:
		sc := 1 / (rs.s * rs.s * rs.s)
		data := make([]float64, d*d)
		for i := range d {
			data[i*d+i] = e.StdErr[i] * e.StdErr[i]
			for k := i + 1; k < d; k++ {
				data[i*d+k] = rs.cov(i, k, avg) * sc
				data[k*d+i] = data[i*d+k]
			}
		}
		e.Covariance = mat.NewSymDense(d, data)
	case rs.corr != nil:
		// Correlations from the coarse full sum, variances from the fine
		// one: D^½·R·D^½ is positive semi-definite whenever the coarse
		// matrix is.
		cr := rs.corr
		data := make([]float64, d*d)
		for i := range d {
			data[i*d+i] = e.StdErr[i] * e.StdErr[i]
			vi := cr.cov(i, i, avg)
			for k := i + 1; k < d; k++ {
				var c float64
				if den := math.Sqrt(math.Max(vi, 0) * math.Max(cr.cov(k, k, avg), 0)); den > 0 {
					c = cr.cov(i, k, avg) / den * e.StdErr[i] * e.StdErr[k]
				}
				data[i*d+k] = c
				data[k*d+i] = c
			}
		}
		e.Covariance = mat.NewSymDense(d, data)
	}
	return e
}

// preciseBars reports whether the error bars of the method in use are
// available, settled and meet the precision stop.
func (c *core) preciseBars() bool {
	b := c.inf
	rs := b.rs
	if rs == nil {
		return b.available() && b.precise(c.prec, c.avg, c.nAvg)
	}
	if why, _ := b.refusal(); !rs.available() || b.memory() == 0 || why != "" {
		return false
	}
	p := c.prec
	for i, a := range c.avg {
		h := rs.q * math.Sqrt(rs.variance(i, c.avg))
		if !(h > 0) || !(h <= p.Absolute || h <= p.Relative*math.Abs(a)) {
			return false
		}
	}
	return true
}
