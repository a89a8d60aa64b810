package sa

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/schedule"
)

// streamCalibrate is the random stream of the calibration pilot: its
// directions and the oracle's measurements during the pilot.
const streamCalibrate uint64 = 0x5eed_0a01

// Calibration reports how a run chose its own gain when Settings.Gain was
// nil. It is on Result.Calibration.
type Calibration struct {
	// Gain is the schedule the run used (also in Result.Settings.Gain).
	Gain schedule.Schedule
	// Method names the rule, Source the publication it comes from.
	Method, Source string
	// Slope is the slope scale the gain was built from: the pilot's
	// estimate of the mean eigenvalue of the Jacobian (pilot methods), the
	// curvature of the loss along its mean gradient at x0 (the
	// Kiefer–Wolfowitz and SPSA adapters), or the bound on the curvature
	// of the sampled gradient (data methods).
	Slope float64
	// RowNormSquared and Curvature are the data measurements of the
	// regression methods: R² = Σ‖ã_i‖⁴/Σ‖ã_i‖² (ã_i the row with the
	// intercept's 1, times the loss's largest second derivative; see
	// oracle.Regression.CurvatureBounds) and the largest eigenvalue of the
	// mean Hessian bound, by power iteration.
	// They are 0 for the pilot methods.
	RowNormSquared, Curvature float64
	// Pilot lists the pilot's levels (empty for the data methods).
	Pilot []PilotLevel
	// PilotCalls is the number of oracle calls the pilot used and
	// PilotMeasurements their measurements. Both count against the run's
	// budgets: each call as one step of MaxSteps, its measurements against
	// MaxMeasurements, and Result.Measurements includes them.
	PilotCalls, PilotMeasurements int
	// How says in a sentence how the gain was chosen.
	How string
}

// PilotLevel is one perturbation size of the calibration pilot: Pairs
// pairs of measurements at x0 ± Delta·u (u random with entries ±1) gave the
// slope quotients ⟨h(x0+δu) − h(x0−δu), 2δu⟩/‖2δu‖² with mean Slope and
// standard error StdErr. For the Kiefer–Wolfowitz and SPSA adapters u is
// the unit mean gradient at x0, and Pairs triples of loss values gave the
// second differences [f(x0+δu) − 2f(x0) + f(x0−δu)]/δ².
type PilotLevel struct {
	Delta, Slope, StdErr float64
	Pairs                int
}

// Defaults of the calibrated gains.
const (
	// calibExponent is the exponent α of the pilot-calibrated gain
	// a/(k+1)^α: between 1/2 and 1, where Polyak–Ruppert averaging attains
	// the optimal asymptotic covariance whatever the scale a (Polyak &
	// Juditsky 1992, SIAM J. Control Optim. 30(4), Theorem 2); 0.7 is
	// common practice.
	calibExponent = 0.7
	// pilotShare is the largest share of the budget the pilot may use.
	pilotShare = 0.1
	// pilotPairs is the number of measurement pairs per pilot level, and
	// pilotT the t-statistic a level's mean slope must reach to be taken.
	// With 8 pairs (7 degrees of freedom) a level of pure noise passes
	// t > 5 with probability below 0.001 (Student t table, common
	// practice).
	pilotPairs = 8
	pilotT     = 5.0
	pilotMore  = 4
	// pilotLevels perturbation sizes δ = base·10^(j−3), j = 0, …, 9, base
	// = max(1, ‖x0‖∞): nine decades around the scale of x0.
	pilotLevels = 10
	// pilotMaxCalls caps the pilot's oracle calls.
	pilotMaxCalls = 1000
)

// pilotBudget returns the number of oracle calls the pilot may use: a
// pilotShare of the tightest budget in calls, at most pilotMaxCalls, at
// least 4 (2 pairs).
func pilotBudget(rs Settings, perCall, epochMeas int) int {
	calls := math.MaxInt
	if rs.MaxSteps != NoLimit {
		calls = rs.MaxSteps
	}
	if rs.MaxMeasurements > 0 {
		calls = min(calls, rs.MaxMeasurements/perCall)
	}
	if epochMeas > 0 {
		calls = min(calls, epochMeas/perCall)
	}
	b := pilotMaxCalls
	if calls != math.MaxInt {
		b = min(b, int(pilotShare*float64(calls)))
	}
	return max(b, 0)
}

// calibratePilot chooses a gain for the field h from a short pilot at x0:
// it estimates the slope scale of h near x0 from symmetric differences of
// averaged measurements along random ±1 directions, the finite-difference
// slope estimate of Venter (1967, "An extension of the Robbins–Monro
// procedure", Ann. Math. Statist. 38(1)) taken along a simultaneous random
// direction as in Spall (2000, "Adaptive stochastic approximation by the
// simultaneous perturbation method", IEEE Trans. Automat. Control 45(10)).
// The perturbation size grows a decade at a time from 10⁻³ of the scale of
// x0 until the mean quotient stands clear of its noise (t > pilotT); a
// level with some signal gets more pairs first, and the level below the
// one taken is re-measured in case the field saturates (see the code).
// The gain is then the Polyak–Juditsky averaged gain (1/ŝ)/(k+1)^0.7.
// The gradient-free adapters oracle.KieferWolfowitz and oracle.SPSA,
// whose loss values can be measured, get calibrateGradientFree instead.
//
// Its measurements are those of one gradient-like call per point; it
// probes up to 10⁶·max(1, ‖x0‖∞) from x0 (inside Projection and MaxAbs
// when set), which a caller whose system must not be driven that far
// avoids by setting the gain.
//
// It uses at most maxCalls calls; it returns the calibration, the calls
// and measurements used, or an oracle error.
func calibratePilot(ctx context.Context, h oracle.Field, x0 []float64, rs Settings, perCall, maxCalls int) (*Calibration, error) {
	if gf, ok := h.(gradientFree); ok {
		return calibrateGradientFree(ctx, gf, x0, rs, perCall, maxCalls)
	}
	d := len(x0)
	rng := rand.New(rand.NewPCG(rs.Seed, streamCalibrate))
	base := 1.0
	for _, v := range x0 {
		base = math.Max(base, math.Abs(v))
	}
	cal := &Calibration{
		Method: "pilot slope by symmetric differences along random directions, then the averaged gain (1/ŝ)/(k+1)^0.7",
		Source: "Venter 1967, Ann. Math. Statist. 38(1) (slope from differences); Spall 2000, IEEE TAC 45(10) (simultaneous random directions); Polyak & Juditsky 1992, SIAM J. Control Optim. 30(4) (averaging)",
	}
	pairs := pilotPairs
	if maxCalls < 2*pairs*pilotLevels {
		pairs = max(2, maxCalls/(2*pilotLevels))
	}
	xp, xm := make([]float64, d), make([]float64, d)
	yp, ym := make([]float64, d), make([]float64, d)
	u := make([]float64, d)
	// more appends n measured pairs at size delta to q; it reports false
	// when a point lies beyond MaxAbs.
	more := func(q []float64, delta float64, n int) ([]float64, bool, error) {
		for range n {
			if pilotPoints(x0, delta, rs, rng, u, xp, xm) {
				return q, false, nil
			}
			if err := pilotMeasure(ctx, h, delta, rng, xp, xm, yp, ym); err != nil {
				return q, false, err
			}
			cal.PilotCalls += 2
			if v, ok := quotient(xp, xm, yp, ym); ok {
				q = append(q, v)
			}
		}
		return q, true, nil
	}
	var qs [][]float64 // the quotients of each level
	slope, best, chosen := 0.0, -1, -1
	bestT := math.Inf(-1)
	for j := range pilotLevels {
		if cal.PilotCalls+2*pairs > maxCalls {
			break
		}
		delta := base * math.Pow(10, float64(j-3))
		q, inside, err := more(nil, delta, pairs)
		if err != nil {
			return cal, err
		}
		if !inside || len(q) < 2 {
			break
		}
		mean, se := meanSE(q)
		// A level whose slope shows but is not yet clear gets more pairs,
		// up to pilotMore times the first count: bounded fields (a
		// quantile's indicator) need them before δ grows past the region
		// where the slope is (sequential sampling, common practice).
		for mean > 0 && se > 0 && mean/se > pilotT/2 && mean/se <= pilotT && len(q) < pilotMore*pairs && cal.PilotCalls+2*len(q) <= maxCalls {
			if q, _, err = more(q, delta, len(q)); err != nil {
				return cal, err
			}
			mean, se = meanSE(q)
		}
		qs = append(qs, q)
		cal.Pilot = append(cal.Pilot, PilotLevel{Delta: delta, Slope: mean, StdErr: se, Pairs: len(q)})
		t := math.Inf(1)
		if se > 0 {
			t = mean / se
		}
		// Without a clear level, the fallback is the cautious one: the
		// largest slope any level allows (mean + 2 standard errors), so
		// the smallest gain; a gain too small stalls, one too large can
		// diverge.
		if up := mean + 2*se; up > 0 && up > bestT {
			best, bestT = len(cal.Pilot)-1, up
		}
		if mean > 0 && t > pilotT {
			slope, chosen = mean, j
			break
		}
	}
	// A field that saturates (a bounded field such as a quantile's
	// indicator) gives a smaller quotient the larger δ is, so the first
	// clear level can sit past the region of the slope. The level below
	// it gets the rest of the pilot's pairs (up to 2·pilotMore times the
	// first count); where it now shows a larger slope at t > 3 (a slope is
	// known to be there, so the test is less strict), it is taken instead.
	if chosen > 0 {
		j := chosen - 1
		q := qs[j]
		for len(q) < 2*pilotMore*pairs && cal.PilotCalls+2*len(q) <= maxCalls {
			var err error
			if q, _, err = more(q, cal.Pilot[j].Delta, len(q)); err != nil {
				return cal, err
			}
		}
		mean, se := meanSE(q)
		cal.Pilot[j].Slope, cal.Pilot[j].StdErr, cal.Pilot[j].Pairs = mean, se, len(q)
		if mean > slope && mean > 3*se {
			slope, chosen = mean, j
		}
	}
	cal.PilotMeasurements = cal.PilotCalls * perCall
	switch {
	case slope > 0:
		l := cal.Pilot[chosen]
		cal.How = fmt.Sprintf("a pilot of %d measurements at x0 ± δ·u found the slope ŝ = %.3g ± %.2g at δ = %.3g (the smallest of the sizes tried whose slope stood clear of the noise), so the gain is (1/ŝ)/(k+1)^%.1g with averaging", cal.PilotMeasurements, l.Slope, l.StdErr, l.Delta, calibExponent)
	case best >= 0:
		l := cal.Pilot[best]
		slope = bestT
		cal.How = fmt.Sprintf("a pilot of %d measurements found no slope clear of the noise (t > %g); to be cautious the gain (1/ŝ)/(k+1)^%.1g uses the largest slope the levels allow, ŝ = %.3g + 2 × %.2g = %.3g at δ = %.3g, so it may be too small: set Settings.Gain if you know the slope better", cal.PilotMeasurements, pilotT, calibExponent, l.Slope, l.StdErr, slope, l.Delta)
	default:
		slope = 1
		cal.How = fmt.Sprintf("a pilot of %d measurements found no positive slope (is h pointing away from the root? see RobbinsMonro's sign convention), so the gain falls back to 1/(k+1)^%.1g; set Settings.Gain", cal.PilotMeasurements, calibExponent)
	}
	cal.Slope = slope
	cal.Gain = schedule.Power{Scale: 1 / slope, Exponent: calibExponent}
	return cal, nil
}

// pilotPoints draws a random ±1 direction u and writes the pilot points
// x0 ± δ·u (projected) into xp and xm; it reports true when one lies
// beyond MaxAbs.
func pilotPoints(x0 []float64, delta float64, rs Settings, rng *rand.Rand, u, xp, xm []float64) bool {
	for i := range u {
		u[i] = 1
		if rng.Uint64()&1 == 1 {
			u[i] = -1
		}
		xp[i] = x0[i] + delta*u[i]
		xm[i] = x0[i] - delta*u[i]
	}
	if rs.Projection != nil {
		rs.Projection.Project(xp)
		rs.Projection.Project(xm)
	}
	if rs.MaxAbs > 0 {
		for i := range xp {
			if math.Abs(xp[i]) > rs.MaxAbs || math.Abs(xm[i]) > rs.MaxAbs {
				return true
			}
		}
	}
	return false
}

// pilotMeasure measures h at xp and xm into yp and ym.
func pilotMeasure(ctx context.Context, h oracle.Field, delta float64, rng *rand.Rand, xp, xm, yp, ym []float64) error {
	if err := oracle.MeasureStep(ctx, h, 0, yp, xp, rng); err != nil {
		return fmt.Errorf("sa: calibration pilot (Settings.Gain is nil), measurement at x0 + %g·u: %w", delta, err)
	}
	if err := oracle.MeasureStep(ctx, h, 0, ym, xm, rng); err != nil {
		return fmt.Errorf("sa: calibration pilot (Settings.Gain is nil), measurement at x0 − %g·u: %w", delta, err)
	}
	return nil
}

// quotient returns the slope quotient ⟨yp − ym, xp − xm⟩/‖xp − xm‖², and
// false when the points coincide or the quotient is not finite.
func quotient(xp, xm, yp, ym []float64) (float64, bool) {
	num, den := 0.0, 0.0
	for i := range xp {
		dx := xp[i] - xm[i]
		num += (yp[i] - ym[i]) * dx
		den += dx * dx
	}
	v := num / den
	return v, den > 0 && !math.IsNaN(v) && !math.IsInf(v, 0)
}

// meanSE returns the mean of q and its standard error.
func meanSE(q []float64) (mean, se float64) {
	n := float64(len(q))
	for _, v := range q {
		mean += v
	}
	mean /= n
	ss := 0.0
	for _, v := range q {
		ss += (v - mean) * (v - mean)
	}
	return mean, math.Sqrt(ss / (n - 1) / n)
}

// calibrateRegression chooses the gain of a finite-sum run on a ready-made
// regression model from its data (Bach & Moulines 2013, "Non-strongly-
// convex smooth stochastic approximation with convergence rate O(1/n)",
// NeurIPS): with R² the constant of their condition E[‖ã‖²ããᵀ] ≼ R²·H in
// its trace form Σ‖ã_i‖⁴/Σ‖ã_i‖² (see oracle.Regression.CurvatureBounds),
// L the largest curvature of the mean, and batches of m samples drawn with
// replacement,
// the curvature of the batch gradient is bounded by R²_m = L + (R² − L)/m
// (the variance of a mean of m draws). Least squares uses the constant
// step 1/(4R²_m) of their Theorem 1 with averaging; the logistic loss the
// averaged step 1/(2R²_m·√(k+1)) (their decaying-step variant,
// Bach & Moulines 2011, NeurIPS, "Non-asymptotic analysis of stochastic
// approximation algorithms for machine learning"); a full batch the step
// 1/L of gradient descent (common practice). ok is false for a model the
// rule does not cover (pinball loss).
func calibrateRegression(r *oracle.Regression, batch int, full bool) (*Calibration, bool) {
	R2, L, ok := r.CurvatureBoundsOf(curvatureRows)
	if !ok || !(L > 0) || !(R2 > 0) {
		return nil, false
	}
	cal := &Calibration{RowNormSquared: R2, Curvature: L}
	switch {
	case full:
		cal.Slope = L
		cal.Gain = schedule.Constant(1 / L)
		cal.Method = "gradient descent step 1/L, L the largest curvature of the mean loss"
		cal.Source = "common practice (step 1/L of gradient descent for an L-smooth objective); L by power iteration"
		cal.How = fmt.Sprintf("full batch: L = %.4g from a power iteration on the data, so the constant step is 1/L = %.4g; gradient descent converges in its last iterate, so report Result.X (the average lags behind)", L, 1/L)
	case r.Loss() == oracle.SquaredLoss:
		m := float64(batch)
		rm := L + (R2-L)/m
		cal.Slope = rm
		cal.Gain = schedule.Constant(1 / (4 * rm))
		cal.Method = "constant-step averaged SGD, step 1/(4R²_m)"
		cal.Source = "Bach & Moulines 2013, NeurIPS, Theorem 1 (least squares)"
		cal.How = fmt.Sprintf("from the data: R² = %.4g (Σ‖ã_i‖⁴/Σ‖ã_i‖² over the rows), L = %.4g (largest curvature), batches of %d give R²_m = L + (R² − L)/m = %.4g, so the constant step is 1/(4R²_m) = %.4g with averaging", R2, L, batch, rm, 1/(4*rm))
	default:
		m := float64(batch)
		rm := L + (R2-L)/m
		cal.Slope = rm
		cal.Gain = schedule.Power{Scale: 1 / (2 * rm), Exponent: 0.5}
		cal.Method = "averaged SGD with step 1/(2R²_m·√(k+1))"
		cal.Source = "Bach & Moulines 2013, NeurIPS (step 1/(2R²√N) for logistic regression); Bach & Moulines 2011, NeurIPS (decaying step C/√n with averaging)"
		cal.How = fmt.Sprintf("from the data: R² = %.4g (¼·Σ‖ã_i‖⁴/Σ‖ã_i‖², ¼ the logistic loss's largest curvature), L = %.4g, batches of %d give R²_m = %.4g, so the step is %.4g/√(k+1) with averaging", R2, L, batch, rm, 1/(2*rm))
	}
	return cal, true
}

// curvatureRows is the most rows calibrateRegression reads for R² and L
// (a systematic sample; see oracle.Regression.CurvatureBoundsOf), so that
// the calibration costs the same on 10⁴ rows as on 10⁷.
const curvatureRows = 10000

// noteAverage fills r.NotAveraged when the estimate is not an average.
func noteAverage(r *Result) {
	if r.Average != nil {
		r.NotAveraged = ""
		return
	}
	switch {
	case r.Steps == 0:
		r.NotAveraged = "no step was taken, so Estimate returns the starting point"
	default:
		r.NotAveraged = fmt.Sprintf("no iterate was averaged: Settings.BurnIn = %d covers all %d steps taken, so Estimate returns the last iterate X, which carries the full noise of the last steps and has no error bars; lower BurnIn or raise the budget", r.Settings.BurnIn, r.Steps)
	}
}

// withGain resolves the caller's settings s again with the calibrated gain.
func withGain(s Settings, g schedule.Schedule, d int) (Settings, error) {
	s.Gain = g
	return s.resolve(d)
}

// calibrateSum chooses the gain of a MinimizeSum run: from the data for a
// ready-made least-squares or logistic model, by the pilot otherwise.
func calibrateSum(ctx context.Context, g *oracle.MiniBatch, x0 []float64, rs Settings, epochMeas int) (*Calibration, error) {
	if r, ok := g.Sum().(*oracle.Regression); ok {
		if cal, ok := calibrateRegression(r, g.BatchSize(), g.Full()); ok {
			return cal, nil
		}
	}
	per := g.MeasurementsPerCall()
	return calibratePilot(ctx, g, x0, rs, per, pilotBudget(rs, per, epochMeas))
}
