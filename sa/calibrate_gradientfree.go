package sa

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/schedule"
)

// gradientFree is what the calibration of the gradient-free adapters
// (oracle.KieferWolfowitz, oracle.SPSA) uses beyond the gradient: the loss
// values themselves.
type gradientFree interface {
	oracle.Field
	MeasureValue(ctx context.Context, x []float64, rng *rand.Rand) (float64, error)
}

// Pilot sizes of the gradient-free calibration.
const (
	// gfGradCalls is the most gradient estimates the pilot averages at x0
	// (at least 2, at most half the pilot's measurements): with 100, ‖ḡ‖
	// has a relative error of about √(p/100) for SPSA in dimension p.
	gfGradCalls = 100
	// gfTriples is the number of second differences per perturbation size.
	gfTriples = 8
)

// calibrateGradientFree chooses the gain of a Kiefer–Wolfowitz or SPSA run
// (h an oracle.KieferWolfowitz or oracle.SPSA) by the robust stochastic
// approximation of Nemirovski, Juditsky, Lan & Shapiro (2009, "Robust
// stochastic approximation approach to stochastic programming", SIAM J.
// Optim. 19(4), §2.2): for a convex loss, averaged iterates of the constant
// step γ over N steps satisfy
//
//	E[f(x̄_N)] − f* ≤ (D² + γ²M²N)/(2γN),   minimised by γ = D/(M·√N),
//
// with D = ‖x0 − x*‖ and M² = E‖ĝ‖² the mean square of the gradient
// estimate. The bound falls as 1/√N, so the plan gets better with the
// budget (unlike a gain whose last value is a fixed fraction of its
// first). The pilot measures at x0:
//
//   - M² and the mean gradient ḡ from up to gfGradCalls of the run's own
//     gradient estimates (their noise, the SPSA perturbations included, is
//     in M², which is why SPSA's √p larger M gets a smaller step than
//     Kiefer–Wolfowitz's);
//   - the curvature λ̂ of the loss along u = ḡ/‖ḡ‖ from second differences
//     [f(x0+tu) − 2f(x0) + f(x0−tu)]/t² of the loss values, the three taken
//     with one random stream (common random numbers, so that noise the
//     simulation draws the same way cancels), at t = 10⁻³, 10⁻², …
//     times max(1, ‖x0‖∞) until the mean stands clear of its noise (t > 5,
//     as calibratePilot's levels);
//   - D̂ = ‖g‖/λ̂, the distance along −g to the minimum of the quadratic
//     with that curvature (the Cauchy step of trust-region methods;
//     Nocedal & Wright 2006, Numerical Optimization, §4.1), with ‖g‖² the
//     unbiased estimate (r‖ḡ‖² − M̂²)/(r − 1); with a Box of finite
//     bounds or a Ball as Settings.Projection, D̂ is instead the paper's
//     own D_X, the farthest point of the set from x0;
//   - M̂ again where the run spends its steps: with a step or measurement
//     budget, up to gfGradCalls gradient estimates at the Cauchy point
//     x0 − (‖g‖/λ̂)·u (projected; skipped beyond MaxAbs), taken with the
//     perturbation size c_k of the run's middle step k = N/2.
//
// Why the second M̂: the M² of the bound enters its proof only as the
// mean of E‖ĝ_k‖² along the path (the proof sums ‖x_{k+1} − x*‖² ≤
// ‖x_k − x*‖² − 2γ⟨ĝ_k, x_k − x*⟩ + γ²‖ĝ_k‖² over the steps; Nemirovski
// et al. 2009, §2.2, from memory). The estimates satisfy E‖ĝ(x)‖² ≈
// M₀² + m·‖∇f(x)‖², with M₀² the noise of an estimate at the minimum and
// m as below (for SPSA with one perturbation m = p: the perturbation
// term p·‖∇f‖² that makes M̂ at x0 large far from the minimum). For an
// L-smooth convex loss ‖∇f(x)‖² ≤ 2L(f(x) − f*) (Nesterov 2004,
// Introductory Lectures on Convex Optimization, Theorem 2.1.5; the
// number from memory), so with γ ≤ 1/(2mL) the same sum gives
// E[f(x̄_N)] − f* ≤ (D² + γ²M₀²N)/(γN), minimised by γ = D/(M₀·√N): the
// M that sets the step is the noise near the minimum, not M at x0 (our
// own short derivation along that standard argument). M̂ at the Cauchy
// point estimates M₀ from above (‖∇f‖ there is smaller than at x0 but
// not 0), and c_k of the middle step includes the growth of the noise
// as c_k shrinks. Measured on Spall's skewed quartic (p = 10, 100 seeds;
// TestReferenceSkewedQuarticBudgets): SPSA's mean loss at 2 000
// measurements fell from 0.083 (M̂ at x0) to 0.044, and SPSA now needs
// about 6 to 9 times fewer measurements than Kiefer–Wolfowitz for the
// same loss at budgets 2 000 to 32 000 (1.7 to 8.4 before).
//
// The gain is the constant γ = D̂/(M̂·√N) over the N steps left after the
// pilot (M̂ the second one when it was taken), capped at 1/(m·λ̂), half
// the mean-square stability limit of the update along u: m = 1 for
// Kiefer–Wolfowitz and m = 1 + (p−1)/q for SPSA with q perturbations,
// since E[(ΔΔᵀ)²] = p·I for one ±1 perturbation (Spall 1992, IEEE TAC
// 37(3): the simultaneous perturbation's noise). The argument above
// needs γ ≤ 1/(2m·L) with L the largest curvature, which the pilot does
// not measure (λ̂ ≤ L is the curvature along u only): where the loss is
// much more curved across u than along it, set Settings.Gain.
// Without a step or measurement budget N is unknown and the gain is
// (D̂/M̂)/√(k+1+A) (the anytime form, Nemirovski et al. 2009, §2.2), A
// keeping the first step under the same cap.
//
// D̂ measures the distance along the gradient only: where the minimum lies
// mostly along directions the gradient at x0 does not show (a flat valley
// across it), γ is too small and a hand-set gain that knows the distance
// does better. The pilot probes up to 10⁶·max(1, ‖x0‖∞) from x0 along u.
func calibrateGradientFree(ctx context.Context, h gradientFree, x0 []float64, rs Settings, perCall, maxCalls int) (*Calibration, error) {
	d := len(x0)
	rng := rand.New(rand.NewPCG(rs.Seed, streamCalibrate))
	cal := &Calibration{
		Method: "robust stochastic approximation: constant step D̂/(M̂·√N) with averaging, D̂ = ‖g‖/λ̂ from a pilot at x0 and M̂² = mean ‖ĝ‖² at the Cauchy point",
		Source: "Nemirovski, Juditsky, Lan & Shapiro 2009, SIAM J. Optim. 19(4), §2.2 (robust step); Nocedal & Wright 2006, §4.1 (Cauchy step); Spall 1992, IEEE TAC 37(3) (SPSA noise)",
	}
	m := 1.0
	if s, ok := h.(*oracle.SPSA); ok {
		m = 1 + float64(d-1)/float64(s.Perturbations())
	}
	budget := maxCalls * perCall // the pilot's measurements
	rg := min(gfGradCalls, max(2, budget/3/perCall))
	y := make([]float64, d)
	gbar := make([]float64, d)
	m2 := 0.0
	for range rg {
		if err := oracle.MeasureStep(ctx, h, 0, y, x0, rng); err != nil {
			return cal, fmt.Errorf("sa: calibration pilot (Settings.Gain is nil), gradient at x0: %w", err)
		}
		cal.PilotCalls++
		for i, v := range y {
			gbar[i] += v / float64(rg)
			m2 += v * v / float64(rg)
		}
	}
	used := rg * perCall
	gb2 := 0.0
	for _, v := range gbar {
		gb2 += v * v
	}
	r := float64(rg)
	g2 := (r*gb2 - m2) / (r - 1) // unbiased ‖g‖²
	se2 := (m2 - gb2) / (r - 1)  // ≈ tr Cov(ĝ)/r
	// ‖g‖ is floored at the standard error of ḡ: where the gradient does
	// not stand clear of its noise, the noise level is the size it cannot
	// exclude, and the gain must not be 0.
	gnorm := math.Sqrt(max(g2, se2, 0))
	mhat := math.Sqrt(m2)

	// Curvature along u by second differences with common random numbers.
	u := make([]float64, d)
	if n := math.Sqrt(gb2); n > 0 {
		for i, v := range gbar {
			u[i] = v / n
		}
	} else {
		u[0] = 1
	}
	base := 1.0
	for _, v := range x0 {
		base = math.Max(base, math.Abs(v))
	}
	xp, xm := make([]float64, d), make([]float64, d)
	lam, lamSE, lamT, bestUp := 0.0, 0.0, 0.0, math.Inf(1)
	bestSE, bestT := 0.0, 0.0
	values := 0
	for j := range pilotLevels {
		if used+values+3*gfTriples > budget {
			break
		}
		t := base * math.Pow(10, float64(j-3))
		if !secondPoints(x0, u, t, rs, xp, xm) {
			break
		}
		q := make([]float64, 0, gfTriples)
		for range gfTriples {
			seed := rng.Uint64()
			var f [3]float64
			for k, x := range [3][]float64{xp, x0, xm} {
				v, err := h.MeasureValue(ctx, x, rand.New(rand.NewPCG(seed, streamCalibrate)))
				if err != nil {
					cal.PilotCalls += (values + perCall - 1) / perCall
					return cal, fmt.Errorf("sa: calibration pilot (Settings.Gain is nil), loss value at x0 + %g·u: %w", float64(1-k)*t, err)
				}
				f[k] = v
				values++
			}
			q = append(q, (f[0]-2*f[1]+f[2])/(t*t))
		}
		mean, se := meanSE(q)
		cal.Pilot = append(cal.Pilot, PilotLevel{Delta: t, Slope: mean, StdErr: se, Pairs: len(q)})
		// Without a clear level, the cautious curvature is the smallest
		// upper bound mean + 2se of any level: the curvature is at most
		// that where it was measured best (the largest bound would be the
		// noisiest level's, a gain of next to nothing).
		if up := mean + 2*se; up > 0 && up < bestUp {
			bestUp, bestSE, bestT = up, se, t
		}
		if mean > 0 && (se == 0 || mean/se > pilotT) {
			lam, lamSE, lamT = mean, se, t
			break
		}
	}
	cal.PilotCalls += (values + perCall - 1) / perCall
	cal.PilotMeasurements = used + values
	var how string
	switch {
	case lam > 0:
		how = fmt.Sprintf("the curvature along the mean gradient is λ̂ = %.3g ± %.2g (second differences at t = %.3g)", lam, lamSE, lamT)
	case !math.IsInf(bestUp, 1):
		lam = bestUp
		how = fmt.Sprintf("no curvature along the mean gradient stood clear of the noise (t > %g); to be cautious λ̂ = %.3g, the smallest upper bound of the levels (mean + 2 × %.2g at t = %.3g), so the gain may be too small: set Settings.Gain if you know better", pilotT, lam, bestSE, bestT)
	}
	dist := base
	distHow := "D̂ = ‖g‖/λ̂"
	if reach, ok := setReach(x0, rs.Projection); ok {
		// A bounded set: Nemirovski et al.'s D is the farthest the set
		// reaches from x0, which the run can never exceed.
		dist, distHow = reach, "D̂ = the farthest point of the projection's set from x0"
	} else if lam > 0 {
		dist = gnorm / lam
	} else {
		how = fmt.Sprintf("no positive curvature was found along the mean gradient (is the loss concave there, or x0 outside the region the pilot may probe?), so D̂ falls back to max(1, ‖x0‖∞) = %.3g: set Settings.Gain", base)
		distHow = "D̂"
	}
	cal.Slope = lam
	// The steps left after the pilot, under every budget the run has.
	stepsLeft := func() int {
		left := math.MaxInt
		if rs.MaxSteps != NoLimit {
			left = rs.MaxSteps - cal.PilotCalls
		}
		if rs.MaxMeasurements > 0 {
			left = min(left, (rs.MaxMeasurements-cal.PilotMeasurements)/perCall)
		}
		return left
	}
	left := stepsLeft()
	// M̂ where the run spends its steps: at the Cauchy point x0 − (‖g‖/λ̂)·u
	// (projected), with the perturbation size c_k of the middle step.
	mhat0 := mhat
	if lam > 0 && left != math.MaxInt {
		rc := min(gfGradCalls, (budget-cal.PilotMeasurements)/perCall)
		xc := make([]float64, d)
		for i := range xc {
			xc[i] = x0[i] - gnorm/lam*u[i]
		}
		if rs.Projection != nil {
			rs.Projection.Project(xc)
		}
		for _, v := range xc {
			if rs.MaxAbs > 0 && math.Abs(v) > rs.MaxAbs {
				rc = 0
			}
		}
		if rc >= 2 {
			kmid := max(0, left-rc) / 2
			mc := 0.0
			for range rc {
				if err := oracle.MeasureStep(ctx, h, kmid, y, xc, rng); err != nil {
					return cal, fmt.Errorf("sa: calibration pilot (Settings.Gain is nil), gradient at the Cauchy point x0 − %.3g·u: %w", gnorm/lam, err)
				}
				cal.PilotCalls++
				cal.PilotMeasurements += perCall
				for _, v := range y {
					mc += v * v / float64(rc)
				}
			}
			mhat = math.Sqrt(mc)
			left = stepsLeft()
			how += fmt.Sprintf("; at the Cauchy point x0 − %.3g·u, with the size c_k of step %d, %d gradient estimates have root mean square M̂ = %.3g (%.3g at x0)", gnorm/lam, kmid, rc, mhat, mhat0)
		}
	}
	capped := ""
	if left != math.MaxInt {
		n := max(1, left)
		gamma := dist / (mhat * math.Sqrt(float64(n)))
		if lam > 0 && gamma > 1/(m*lam) {
			gamma = 1 / (m * lam)
			capped = fmt.Sprintf(", capped at 1/(m·λ̂) = %.3g with m = %.3g (stability)", gamma, m)
		}
		cal.Gain = schedule.Constant(gamma)
		cal.How = fmt.Sprintf("a pilot of %d measurements found at x0 M̂ = %.3g (root mean square of %d gradient estimates) and ‖g‖ ≈ %.3g; %s; so %s = %.3g and the constant step over the N = %d steps left is γ = D̂/(M̂·√N) = %.3g%s, with averaging", cal.PilotMeasurements, mhat0, rg, gnorm, how, distHow, dist, n, gamma, capped)
		return cal, nil
	}
	a := dist / mhat
	off := 0.0
	if lam > 0 && a > 1/(m*lam) {
		off = math.Pow(a*m*lam, 2) - 1
	}
	cal.Gain = schedule.Power{Scale: a, Offset: off, Exponent: 0.5}
	cal.How = fmt.Sprintf("a pilot of %d measurements at x0 found M̂ = %.3g (root mean square of %d gradient estimates) and ‖g‖ ≈ %.3g; %s; so %s = %.3g; the run has no step or measurement budget, so the gain is (D̂/M̂)/√(k+1+A) = %.3g/√(k+1+%.3g), with averaging", cal.PilotMeasurements, mhat, rg, gnorm, how, distHow, dist, a, off)
	return cal, nil
}

// secondPoints writes x0 ± t·u into xp and xm and reports whether both are
// usable: inside MaxAbs and left in place by the projection (a projected
// point would bend the second difference).
func secondPoints(x0, u []float64, t float64, rs Settings, xp, xm []float64) bool {
	for i := range x0 {
		xp[i] = x0[i] + t*u[i]
		xm[i] = x0[i] - t*u[i]
	}
	for i := range xp {
		if rs.MaxAbs > 0 && (math.Abs(xp[i]) > rs.MaxAbs || math.Abs(xm[i]) > rs.MaxAbs) {
			return false
		}
	}
	if rs.Projection != nil {
		cp, cm := append([]float64(nil), xp...), append([]float64(nil), xm...)
		rs.Projection.Project(cp)
		rs.Projection.Project(cm)
		for i := range cp {
			if cp[i] != xp[i] || cm[i] != xm[i] {
				return false
			}
		}
	}
	return true
}

// setReach returns the largest distance from x0 to a point of the set of a
// Box with finite bounds or a Ball (the D_X of Nemirovski et al. 2009 for
// a start x0), and false for other projections or none.
func setReach(x0 []float64, p Projection) (float64, bool) {
	switch v := p.(type) {
	case Box:
		s := 0.0
		for i, x := range x0 {
			d := max(math.Abs(x-v.Lower[i]), math.Abs(v.Upper[i]-x))
			if math.IsInf(d, 0) || math.IsNaN(d) {
				return 0, false
			}
			s += d * d
		}
		return math.Sqrt(s), true
	case Ball:
		s := 0.0
		for i, x := range x0 {
			c := 0.0
			if v.Center != nil {
				c = v.Center[i]
			}
			s += (x - c) * (x - c)
		}
		return math.Sqrt(s) + v.Radius, true
	}
	return 0, false
}
