package sa

import (
	"fmt"
	"math"
)

// Method chooses the estimator behind the error bars of a run.
type Method int

const (
	// MethodBatchMeans is the on-line batch-means estimator described at
	// Inference (Chen, Lee, Tong & Zhang 2020).
	MethodBatchMeans Method = iota
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
	// (from RandomScalingMinSteps averaged iterates) and does not depend
	// on the memory of the iterates. Only the diagonal is kept (O(d)
	// work per step); Covariance is nil. Levels 0.90, 0.95 and 0.99 are
	// supported.
	MethodRandomScaling
)

// RandomScalingMinSteps is the number of averaged iterates before
// random-scaling error bars are reported.
const RandomScalingMinSteps = 1000

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
//	A = Σ s²(x̄_s − r)²,  B = Σ s²(x̄_s − r),  C = Σ s²,
//	n²·V_n,ii = A − 2(x̄_n − r)B + (x̄_n − r)²C.
type randomScaling struct {
	d        int
	s        float64
	next     float64 // count at which the centre moves next
	r, a, bb []float64
	c        float64
	q        float64
}

func newRandomScaling(d int, level float64) *randomScaling {
	buf := make([]float64, 3*d)
	q, _ := RandomScalingQuantile(level)
	return &randomScaling{d: d, next: 1, r: buf[:d:d], a: buf[d : 2*d : 2*d], bb: buf[2*d:], q: q}
}

// add feeds the running average after one more averaged iterate.
func (rs *randomScaling) add(avg []float64) {
	rs.s++
	if rs.s >= rs.next {
		// Move the centre to avg: with δ = avg − r,
		// A' = A − 2δB + δ²C and B' = B − δC (exact algebra).
		for i, v := range avg[:rs.d] {
			dl := v - rs.r[i]
			rs.a[i] += -2*dl*rs.bb[i] + dl*dl*rs.c
			rs.bb[i] -= dl * rs.c
			rs.r[i] = v
		}
		rs.next *= 2
	}
	w := rs.s * rs.s
	for i, v := range avg[:rs.d] {
		y := v - rs.r[i]
		rs.a[i] += w * y * y
		rs.bb[i] += w * y
	}
	rs.c += w
}

// variance returns V_n,ii / n, the estimated variance of x̄_n,i.
func (rs *randomScaling) variance(i int, avg []float64) float64 {
	y := avg[i] - rs.r[i]
	v := (rs.a[i] - 2*y*rs.bb[i] + y*y*rs.c) / (rs.s * rs.s)
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

// errorBars builds random-scaling error bars of avg (nAvg iterates); the
// settledness verdict and the degenerate check come from bm.
func (rs *randomScaling) errorBars(avg []float64, level float64, bm *batchMeans) ErrorBars {
	e := ErrorBars{Level: level, Count: int(rs.s), Assumes: randomScalingAssumes, Method: MethodRandomScaling}
	if !rs.available() {
		e.Why = fmt.Sprintf("random scaling needs %d averaged iterates, %d so far", RandomScalingMinSteps, int(rs.s))
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
	d := rs.d
	e.StdErr = make([]float64, d)
	e.HalfWidth = make([]float64, d)
	zero := true
	for i := range d {
		e.StdErr[i] = math.Sqrt(rs.variance(i, avg))
		e.HalfWidth[i] = rs.q * e.StdErr[i]
		zero = zero && e.StdErr[i] == 0
	}
	if zero {
		return ErrorBars{Level: level, Method: MethodRandomScaling, Deterministic: true,
			Why: "the running average has not moved: the run shows no sampling error (a deterministic run, or one stuck at a point)"}
	}
	e.Available = true
	e.Center = append([]float64(nil), avg...)
	e.Quantile = rs.q
	return e
}

// preciseBars reports whether the error bars of the method in use are
// available, settled and meet the precision stop.
func (c *core) preciseBars() bool {
	b := c.inf
	if c.rs == nil {
		return b.available() && b.precise(c.prec, c.avg, c.nAvg)
	}
	if why, _ := b.refusal(); !c.rs.available() || b.memory() == 0 || why != "" {
		return false
	}
	p := c.prec
	for i, a := range c.avg {
		h := c.rs.q * math.Sqrt(c.rs.variance(i, c.avg))
		if !(h > 0) || !(h <= p.Absolute || h <= p.Relative*math.Abs(a)) {
			return false
		}
	}
	return true
}
