package sa

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/stochroot/stochroot/schedule"
)

// TestReferenceQuantileDecreasingGain estimates the 0.99-quantile of a
// log-normal latency with a decreasing gain and Polyak–Ruppert averaging,
// and compares it with gonum's distuv.LogNormal.Quantile.
//
// Reference: the averaged Robbins–Monro quantile estimate is asymptotically
// normal with variance p(1−p)/(n·f(q)²), f the density at the quantile q —
// the variance of the sample quantile (Tierney 1983, "A space-efficient
// recursive procedure for estimating a quantile of an unknown
// distribution", SIAM J. Sci. Stat. Comput. 4(4), 706–711; Polyak &
// Juditsky 1992, SIAM J. Control Optim. 30(4), Theorem 2, with the noise
// variance p(1−p) of Y = 1{L ≤ θ} − p at the root and the slope f(q)). The
// tolerance is 4 such standard errors with n the number of averaged
// iterates (fixed seed; a normal deviate beyond 4 has probability 6e-5).
func TestReferenceQuantileDecreasingGain(t *testing.T) {
	const p = 0.99
	lat := distuv.LogNormal{Mu: 0, Sigma: 0.5, Src: rand.NewPCG(2026, 1)}
	q := lat.Quantile(p)
	f := lat.Prob(q)
	n := 400_000
	burn := n / 10
	// Any scale of the order of 1/f works with averaging; the offset keeps
	// the first steps (a_0·p ≈ 1) small against q ≈ 3.2.
	qt, err := NewQuantileTuner(p, 10, TunerSettings{
		Gain:       schedule.Power{Scale: 2 / f, Offset: 1000, Exponent: 0.7},
		BurnIn:     burn,
		Projection: Box{Lower: []float64{0.01}, Upper: []float64{100}},
	})
	if err != nil {
		t.Fatal(err)
	}
	for range n {
		x, v := qt.Param()
		if _, err := qt.Observe(v, lat.Rand() <= x); err != nil {
			t.Fatal(err)
		}
	}
	avg := make([]float64, 1)
	m := qt.Tuner().Average(avg)
	if m != n-burn {
		t.Fatalf("averaged %d iterates, want %d", m, n-burn)
	}
	se := math.Sqrt(p*(1-p)/float64(m)) / f
	if d := math.Abs(avg[0] - q); d > 4*se {
		t.Errorf("averaged 0.99-quantile = %.5g, gonum LogNormal quantile = %.5g: |diff| = %.3g > 4 SE = %.3g", avg[0], q, d, 4*se)
	} else {
		t.Logf("averaged 0.99-quantile = %.5g, gonum = %.5g, diff = %.2f SE (SE = %.3g)", avg[0], q, (avg[0]-q)/se, se)
	}
}

// TestReferenceQuantileConstantGain checks the lag and the stationary
// spread of constant-gain quantile tracking after step changes of the true
// quantile against the linearised prediction.
//
// Derivation (derived here, not quoted). With e_k = θ_k − q and the gain a,
//
//	e_{k+1} = e_k − a·(F(q+e_k) − p) − a·ξ_k,   ξ_k = Y_k − E[Y_k | θ_k].
//
// Linearising F(q+e) − p ≈ f·e (f = density at q):
//
//	E e_{k+1} = (1 − a·f)·E e_k          ⇒  E e_k = (1 − a·f)^k · e_0,
//	V_{k+1}   = (1 − a·f)²·V_k + a²·p(1−p)   (Var ξ_k ≈ p(1−p) near q)
//	⇒ V_∞ = a²p(1−p)/(1 − (1−af)²) = a·p(1−p)/(f·(2 − a·f)) ≈ a·p(1−p)/(2f).
//
// The events are uniform on [s, s+1] (f = 1): there F is linear, so the
// mean recursion is exact while θ stays inside the support (it stays
// within 0.25 of it by a margin of 7 standard deviations here), and the
// noise variance F(1−F) = p(1−p) + (1−2p)·f·e − f²e² gives, with E e = 0,
// V_∞ = a²(p(1−p) − f²V_∞)/(2af − a²f²) = a·p(1−p)/(2f) exactly. So the test
// checks the tuner, not the approximation.
//
// The true quantile alternates between q0 = s0 + p and q1 = q0 + Δ every T
// reports (a square wave, M switches in all). For each switch the error
// is aligned so that it starts at +Δ; at step k after a switch its mean
// over the M switches is predicted as Δ·(1−af)^k with standard error
// √(V_∞/M) (Var e_k = V_∞ when e_0 has the stationary spread of the old
// level; switches are T·af = 8 time constants apart, so independent to
// e^-8). The stationary variance is estimated from the second half of each
// period, where the mean is within Δ·e^{-4} of the new quantile, by the mean
// of e²; for an AR(1) series with ρ = 1 − af and n samples its standard
// error is V_∞·√(2(1+ρ²)/(n(1−ρ²))) (Bartlett's formula for the variance of
// a sample variance of a Gaussian AR(1); common practice). Tolerances are 4
// standard errors, fixed seed.
func TestReferenceQuantileConstantGain(t *testing.T) {
	const (
		p     = 0.75
		a     = 0.01 // a·f = 0.01: time constant 100 reports
		f     = 1.0
		delta = 0.06 // ≈ 2 stationary standard deviations
		T     = 800  // reports per level: 8 time constants
		M     = 500  // switches
	)
	lo := [2]float64{0, delta}
	q := [2]float64{}
	for j := range q {
		q[j] = distuv.Uniform{Min: lo[j], Max: lo[j] + 1}.Quantile(p)
	}
	if math.Abs((q[1]-q[0])-delta) > 1e-12 {
		t.Fatalf("quantile step %v, want %v", q[1]-q[0], delta)
	}
	vInf := a * p * (1 - p) / (2 * f)
	rng := rand.New(rand.NewPCG(7, 8))
	qt, err := NewQuantileTuner(p, q[0], TunerSettings{
		Gain:       schedule.Constant(a),
		Projection: Box{Lower: []float64{-1}, Upper: []float64{2}},
	})
	if err != nil {
		t.Fatal(err)
	}
	// Settle at level 0 first.
	for range T {
		x, v := qt.Param()
		qt.Observe(v, lo[0]+rng.Float64() <= x)
	}
	checkAt := []int{25, 50, 100, 200, 400}
	sumAligned := make([]float64, T)
	var sumSq float64
	var nSq int
	for m := range M {
		j := (m + 1) % 2 // level after this switch
		sign := 1.0      // align so that the error starts at +Δ
		if j == 1 {
			sign = -1
		}
		for k := range T {
			x, v := qt.Param()
			e := x - q[j]
			sumAligned[k] += sign * e
			if k >= T/2 {
				sumSq += e * e
				nSq++
			}
			if _, err := qt.Observe(v, lo[j]+rng.Float64() <= x); err != nil {
				t.Fatal(err)
			}
		}
	}
	se := math.Sqrt(vInf / M)
	for _, k := range checkAt {
		got := sumAligned[k] / M
		want := delta * math.Pow(1-a*f, float64(k))
		if math.Abs(got-want) > 4*se {
			t.Errorf("mean error %d reports after a step = %.4g, linearised prediction Δ(1−af)^k = %.4g, |diff| > 4 SE = %.3g", k, got, want, 4*se)
		}
	}
	rho := 1 - a*f
	vHat := sumSq / float64(nSq)
	seV := vInf * math.Sqrt(2*(1+rho*rho)/(float64(nSq)*(1-rho*rho)))
	if math.Abs(vHat-vInf) > 4*seV {
		t.Errorf("stationary variance = %.4g, prediction a·p(1−p)/(2f) = %.4g, |diff| > 4 SE = %.3g", vHat, vInf, 4*seV)
	}
	t.Logf("stationary variance %.4g vs %.4g (%.2f SE); mean error at k=100: %.4g vs %.4g",
		vHat, vInf, (vHat-vInf)/seV, sumAligned[100]/M, delta*math.Pow(rho, 100))
}

// TestReferenceQuantileDelayed repeats TestReferenceQuantileDecreasingGain
// with every measurement reported 12 updates after it was taken (the
// "applied with a bounded delay" rule, MaxLag 16), and holds it to the same
// 4-standard-error band around gonum's quantile.
//
// Why the band does not change (derived here, linearised as in
// TestReferenceQuantileConstantGain): with delay τ and e_k = x_k − q,
//
//	e_{k+1} − e_k = −a_k·f·e_{k−τ} − a_k·ξ_k
//	⇒ e_{k−τ} = −ξ_k/f − (e_{k+1} − e_k)/(a_k·f).
//
// Averaging over k, the first term gives −(1/(n·f))·Σξ_k, the leading term
// of the undelayed average with variance p(1−p)/(n·f²); the second is the
// same remainder as without delay (it vanishes faster than n^{−1/2} for
// gain exponents α in (1/2, 1); Polyak & Juditsky 1992); and the average of
// e_{k−τ} differs from that of e_k by at most τ·max|e_k|/n, here below
// 12·7/360000 ≈ 2e-4, a fiftieth of the standard error. Bounded delays
// leave the limit of stochastic approximation unchanged in general
// (Kushner & Yin 2003, "Stochastic Approximation and Recursive Algorithms
// and Applications", 2nd ed., ch. 12; from memory).
func TestReferenceQuantileDelayed(t *testing.T) {
	const (
		p     = 0.99
		delay = 12
	)
	lat := distuv.LogNormal{Mu: 0, Sigma: 0.5, Src: rand.NewPCG(2026, 2)}
	q := lat.Quantile(p)
	f := lat.Prob(q)
	n := 400_000
	burn := n / 10
	qt, err := NewQuantileTuner(p, 10, TunerSettings{
		Gain:       schedule.Power{Scale: 2 / f, Offset: 1000, Exponent: 0.7},
		BurnIn:     burn,
		Projection: Box{Lower: []float64{0.01}, Upper: []float64{100}},
		MaxLag:     16,
	})
	if err != nil {
		t.Fatal(err)
	}
	type pending struct {
		version uint64
		within  bool
	}
	var queue [delay + 1]pending // ring: a report leaves delay draws after it entered
	for i := range n + delay {
		if i >= delay {
			old := queue[(i-delay)%len(queue)]
			out, err := qt.Observe(old.version, old.within)
			if out != Applied || err != nil {
				t.Fatalf("delayed report %d: %v, %v", i, out, err)
			}
		}
		if i < n {
			x, v := qt.Param()
			queue[i%len(queue)] = pending{v, lat.Rand() <= x}
		}
	}
	if st := qt.Tuner().Stats(); st.Applied != uint64(n) {
		t.Fatalf("applied %d of %d", st.Applied, n)
	}
	avg := make([]float64, 1)
	m := qt.Tuner().Average(avg)
	se := math.Sqrt(p*(1-p)/float64(m)) / f
	if d := math.Abs(avg[0] - q); d > 4*se {
		t.Errorf("delayed: averaged 0.99-quantile = %.5g, gonum = %.5g: |diff| = %.3g > 4 SE = %.3g", avg[0], q, d, 4*se)
	} else {
		t.Logf("delayed by %d: averaged = %.5g, gonum = %.5g, diff = %.2f SE", delay, avg[0], q, (avg[0]-q)/se)
	}
}
