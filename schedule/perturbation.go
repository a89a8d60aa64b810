package schedule

import (
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/stat"
)

// Sizes is a sequence of perturbation sizes c_k > 0, k = 0, 1, 2, …: the
// half-width of the differences a Kiefer–Wolfowitz or SPSA gradient takes
// at step k (package oracle). Size must be safe for concurrent use and
// depend on nothing but k.
type Sizes interface {
	Size(k int) float64
}

// PowerSizes is the power family of perturbation sizes
//
//	c_k = Scale / (k + 1)^Exponent,   k = 0, 1, 2, …
//
// Spall (1998) recommends Exponent γ = 0.101 in practice and 1/6 as the
// asymptotically optimal value for SPSA; Exponent 0 is a constant size,
// which does not vanish and leaves a bias of order c² in the limit.
type PowerSizes struct {
	Scale    float64 // c > 0
	Exponent float64 // γ ≥ 0
}

// Size returns Scale/(k+1)^Exponent.
func (p PowerSizes) Size(k int) float64 {
	if p.Exponent == 0 {
		return p.Scale
	}
	return p.Scale / math.Pow(float64(k)+1, p.Exponent)
}

// Validate checks Scale > 0 and Exponent ≥ 0, both finite.
func (p PowerSizes) Validate() error {
	switch {
	case !(p.Scale > 0) || math.IsInf(p.Scale, 0):
		return invalid("PowerSizes.Scale = %v: must be finite and > 0", p.Scale)
	case !(p.Exponent >= 0) || math.IsInf(p.Exponent, 0):
		return invalid("PowerSizes.Exponent = %v: must be finite and ≥ 0", p.Exponent)
	}
	return nil
}

// SizesFunc adapts a function of k to a Sizes. Its conditions are checked
// numerically.
type SizesFunc func(k int) float64

// Size returns f(k). It panics with a message saying so if f is nil
// (Validate reports that as an error).
func (f SizesFunc) Size(k int) float64 {
	if f == nil {
		panic("schedule: Size called on a nil schedule.SizesFunc")
	}
	return f(k)
}

// Validate reports an error wrapping [ErrInvalid] if f is nil.
func (f SizesFunc) Validate() error {
	if f == nil {
		return invalid("schedule.SizesFunc is nil: a perturbation-size function is required")
	}
	return nil
}

// Method names the gradient estimate whose joint conditions on the gain a_k
// and the perturbation sizes c_k are checked. The conditions differ by
// method and must not be confused.
type Method int

const (
	// KieferWolfowitz: central finite differences, 2p measurements.
	KieferWolfowitz Method = iota + 1
	// SPSA: simultaneous perturbation, 2 (or 1) measurements.
	SPSA
)

// String returns "Kiefer–Wolfowitz" or "SPSA".
func (m Method) String() string {
	switch m {
	case KieferWolfowitz:
		return "Kiefer–Wolfowitz"
	case SPSA:
		return "SPSA"
	}
	return "unknown method"
}

// Joint is the verdict on the joint conditions for a gain a_k and
// perturbation sizes c_k. Every condition is evaluated; which ones are
// required depends on Method:
//
//	Kiefer–Wolfowitz (Kiefer & Wolfowitz 1952, Ann. Math. Statist. 23(3)):
//	    c_k → 0,  Σa_k = ∞,  Σa_k·c_k < ∞,  Σ(a_k/c_k)² < ∞
//	SPSA (Spall 1992, IEEE Trans. Automat. Control 37(3)):
//	    a_k → 0,  c_k → 0,  Σa_k = ∞,  Σ(a_k/c_k)² < ∞
//
// For a_k ~ k^(−α) and c_k ~ k^(−γ) these read: Kiefer–Wolfowitz needs
// α ≤ 1, γ > 0, α + γ > 1, α − γ > 1/2; SPSA needs 0 < α ≤ 1, γ > 0,
// α − γ > 1/2. Spall's practical exponents α = 0.602, γ = 0.101 satisfy
// SPSA's conditions but not Kiefer–Wolfowitz's (α + γ = 0.703).
//
// Proven is true when both sequences are of a known family (Power or
// Constant gains, PowerSizes) and the verdict follows from the p-series
// test; otherwise the exponents are estimated from the tails, as in
// [CheckNumeric], and the verdict is evidence, not proof.
type Joint struct {
	Method       Method
	GainsVanish  Status // a_k → 0
	SizesVanish  Status // c_k → 0
	SumDiverges  Status // Σa_k = ∞
	GainSizeSum  Status // Σa_k·c_k < ∞ (required by Kiefer–Wolfowitz only)
	RatioSquares Status // Σ(a_k/c_k)² < ∞
	// GainExponent α and SizeExponent γ are the tail exponents used, exact
	// or estimated; NaN when they could not be determined.
	GainExponent, SizeExponent float64
	Proven                     bool
	Reason                     string
}

// Convergent reports whether every condition the method requires holds.
func (j Joint) Convergent() bool {
	common := j.SizesVanish == Holds && j.SumDiverges == Holds && j.RatioSquares == Holds
	switch j.Method {
	case KieferWolfowitz:
		return common && j.GainSizeSum == Holds
	case SPSA:
		return common && j.GainsVanish == Holds
	}
	return false
}

// String returns the Reason, prefixed by the overall verdict.
func (j Joint) String() string {
	v := "conditions fail or are undecided"
	if j.Convergent() {
		v = "conditions hold"
	}
	return fmt.Sprintf("%v %s: %s", j.Method, v, j.Reason)
}

// CheckKieferWolfowitz returns the verdict on the Kiefer–Wolfowitz
// conditions c_k → 0, Σa_k = ∞, Σa_k·c_k < ∞, Σ(a_k/c_k)² < ∞ for the gain
// a and the sizes c (see [Joint]).
func CheckKieferWolfowitz(a Schedule, c Sizes) Joint { return checkJoint(KieferWolfowitz, a, c) }

// CheckSPSA returns the verdict on the SPSA conditions a_k → 0, c_k → 0,
// Σa_k = ∞, Σ(a_k/c_k)² < ∞ for the gain a and the sizes c (see [Joint]).
func CheckSPSA(a Schedule, c Sizes) Joint { return checkJoint(SPSA, a, c) }

func checkJoint(m Method, a Schedule, c Sizes) Joint {
	j := Joint{Method: m, GainExponent: math.NaN(), SizeExponent: math.NaN()}
	if isNil(a) || isNil(c) {
		j.Reason = fmt.Sprintf("the gain (%T) or the sizes (%T) are nil", a, c)
		return j
	}
	alpha, aProven, aWhy := gainExponent(a)
	gamma, cProven, cWhy := sizeExponent(c)
	j.GainExponent, j.SizeExponent = alpha, gamma
	j.Proven = aProven && cProven
	var b strings.Builder
	if !aProven || !cProven {
		b.WriteString("numerical evidence, not proof: ")
	}
	fmt.Fprintf(&b, "%s; %s", aWhy, cWhy)
	if math.IsNaN(alpha) || math.IsNaN(gamma) {
		j.Proven = false
		b.WriteString("; the exponents could not be determined, so every condition is undecided")
		j.Reason = b.String()
		return j
	}
	// Sums of the form Σ k^(−e) converge iff e > 1. Values within exactTol
	// of a critical value are taken to be exactly on it when the exponents
	// are estimates, and within 1e-12 (rounding of decimal exponents such
	// as 0.9 + 0.1) when they are exact.
	tol := 1e-12
	if !j.Proven {
		tol = exactTol
	}
	snap := func(v, at float64) float64 {
		if math.Abs(v-at) < tol {
			return at
		}
		return v
	}
	holds := func(ok bool) Status {
		if ok {
			return Holds
		}
		return Fails
	}
	sumAC := snap(alpha+gamma, 1)
	ratio := snap(2*(alpha-gamma), 1)
	j.GainsVanish = holds(alpha > 0)
	j.SizesVanish = holds(gamma > 0)
	j.SumDiverges = holds(alpha <= 1)
	j.GainSizeSum = holds(sumAC > 1)
	j.RatioSquares = holds(ratio > 1)

	item := func(name string, s Status, why string) {
		fmt.Fprintf(&b, "; %s %v (%s)", name, s, why)
	}
	fmt.Fprintf(&b, "; for %v:", m)
	if m == SPSA {
		item("a_k → 0", j.GainsVanish, fmt.Sprintf("α = %.4g > 0", alpha))
	}
	item("c_k → 0", j.SizesVanish, fmt.Sprintf("γ = %.4g > 0", gamma))
	item("Σa_k = ∞", j.SumDiverges, fmt.Sprintf("α = %.4g ≤ 1", alpha))
	if m == KieferWolfowitz {
		item("Σa_k·c_k < ∞", j.GainSizeSum, fmt.Sprintf("needs α + γ = %.4g > 1", alpha+gamma))
	}
	item("Σ(a_k/c_k)² < ∞", j.RatioSquares, fmt.Sprintf("needs α − γ = %.4g > 1/2", alpha-gamma))
	if !j.Proven && (math.Abs(alpha+gamma-1) < borderTol || math.Abs(alpha-gamma-0.5) < borderTol || math.Abs(alpha-1) < borderTol) {
		b.WriteString("; borderline: an estimated exponent is near a critical value, where factors like log k can reverse the verdict")
	}
	j.Reason = b.String()
	return j
}

// gainExponent returns the tail exponent α of a_k ~ k^(−α).
func gainExponent(a Schedule) (alpha float64, proven bool, why string) {
	switch g := a.(type) {
	case Power:
		if err := g.Validate(); err != nil {
			return math.NaN(), true, err.Error()
		}
		return g.Exponent, true, fmt.Sprintf("a_k = %g/(k+1+%g)^%g, so α = %g", g.Scale, g.Offset, g.Exponent, g.Exponent)
	case Constant:
		if err := g.Validate(); err != nil {
			return math.NaN(), true, err.Error()
		}
		return 0, true, "a_k is constant, so α = 0"
	}
	c := CheckNumeric(a)
	if math.IsNaN(c.Exponent) {
		return math.NaN(), false, "gain: " + c.Reason
	}
	return c.Exponent, false, fmt.Sprintf("gain tail exponent α ≈ %.4g", c.Exponent)
}

// sizeExponent returns the tail exponent γ of c_k ~ k^(−γ).
func sizeExponent(c Sizes) (gamma float64, proven bool, why string) {
	if v, ok := c.(Validator); ok {
		if err := v.Validate(); err != nil {
			return math.NaN(), true, err.Error()
		}
	}
	if p, ok := c.(PowerSizes); ok {
		if err := p.Validate(); err != nil {
			return math.NaN(), true, err.Error()
		}
		return p.Exponent, true, fmt.Sprintf("c_k = %g/(k+1)^%g, so γ = %g", p.Scale, p.Exponent, p.Exponent)
	}
	n := CheckNumeric(Func(c.Size))
	switch {
	case math.IsNaN(n.Exponent):
		return math.NaN(), false, "sizes: " + strings.Replace(n.Reason, "gain", "size", -1)
	case math.IsInf(n.Exponent, 1):
		return math.NaN(), false, "sizes: c_k reaches 0, and a perturbation size must stay > 0"
	}
	return n.Exponent, false, fmt.Sprintf("size tail exponent γ ≈ %.4g", n.Exponent)
}

// Spall's practical exponents (Spall 1998, "Implementation of the
// simultaneous perturbation algorithm for stochastic optimization", IEEE
// Trans. Aerospace and Electronic Systems 34(3)).
const (
	SpallAlpha = 0.602
	SpallGamma = 0.101
)

// SpallInput is what [SpallGains] needs to choose SPSA gains.
type SpallInput struct {
	// Steps is the planned number of steps N (≥ 1).
	Steps int
	// Pilot holds at least 2 noisy values f̃(x₀) measured repeatedly at the
	// starting point; their sample standard deviation sets c.
	Pilot []float64
	// FirstMove is the magnitude (> 0) by which the first step should move
	// the coordinates of x: the smallest change that is meaningful early
	// in the run.
	FirstMove float64
	// GradientSize returns the typical magnitude of a gradient estimate
	// coordinate at x₀ taken with perturbation size c, for example
	// oracle.PilotGradientSize(f, x0, c, reps, rng).
	GradientSize func(c float64) (float64, error)
	// MinSize, if > 0, is a lower bound on c, used when the pilot values
	// show little or no noise (a noise-free simulation). If the pilot
	// standard deviation is 0 and MinSize is 0, SpallGains returns an
	// error.
	MinSize float64
}

// SpallPlan is what [SpallGains] chose, and why.
type SpallPlan struct {
	// Gain is a_k = a/(k+1+A)^0.602 and Sizes is c_k = c/(k+1)^0.101.
	Gain  Power
	Sizes PowerSizes
	// NoiseSD is the sample standard deviation of the pilot values and
	// GradientSize the measured magnitude of a gradient coordinate at x₀
	// with perturbation size c.
	NoiseSD, GradientSize float64
	// Reason explains each choice in plain words.
	Reason string
}

// SpallGains chooses SPSA gains by the guidelines of Spall (1998, IEEE
// Trans. Aerospace and Electronic Systems 34(3), section III):
//
//	α = 0.602, γ = 0.101   (practical exponents; 1 and 1/6 are
//	                        asymptotically optimal but slower early on)
//	A = 0.1·N              (stability constant: about 10% of the steps)
//	c = noise standard deviation at x₀ (from the pilot values)
//	a = FirstMove·(A + 1)^α / |ĝ₀|   (so that a_0·|ĝ₀| = FirstMove)
//
// where |ĝ₀| is in.GradientSize(c). The plan's Reason reports the numbers.
// The plan is a starting point, not a guarantee: Spall advises watching
// the first steps and adjusting a when they oscillate or stall.
//
// The plan does not get better with the budget by itself: the first step
// is fixed by FirstMove and A grows with N, so the last gain a/(N+A)^α is
// (A/(N+A))^α ≈ 0.24 of the first whatever N, and the last iterate keeps
// the noise of that gain while c_k shrinks (measured on Spall's skewed
// quartic, p = 10, noise sd 0.1: 0.017 of the initial loss at 2 000
// measurements, 0.050 at 64 000). Use the average of the iterates, not
// the last one, with this plan; for a plan whose accuracy improves with
// the budget, leave the gain of an sa run with the oracle.SPSA or
// oracle.KieferWolfowitz adapter nil (a robust constant step with
// averaging chosen from a pilot; see sa.Calibration).
func SpallGains(in SpallInput) (SpallPlan, error) {
	var p SpallPlan
	switch {
	case in.Steps < 1:
		return p, invalid("SpallInput.Steps = %d: must be ≥ 1", in.Steps)
	case len(in.Pilot) < 2:
		return p, invalid("SpallInput.Pilot has %d values: at least 2 are needed to measure the noise", len(in.Pilot))
	case !(in.FirstMove > 0) || math.IsInf(in.FirstMove, 0):
		return p, invalid("SpallInput.FirstMove = %v: must be finite and > 0", in.FirstMove)
	case in.GradientSize == nil:
		return p, invalid("SpallInput.GradientSize is nil")
	case !(in.MinSize >= 0) || math.IsInf(in.MinSize, 0):
		return p, invalid("SpallInput.MinSize = %v: must be finite and ≥ 0", in.MinSize)
	}
	for i, v := range in.Pilot {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return p, invalid("SpallInput.Pilot[%d] = %v is not finite", i, v)
		}
	}
	var b strings.Builder
	A := 0.1 * float64(in.Steps)
	fmt.Fprintf(&b, "α = %g and γ = %g, Spall's practical exponents; A = %.4g, 10%% of the %d planned steps, so the first steps are not much larger than the later ones; ", SpallAlpha, SpallGamma, A, in.Steps)
	sd := stat.StdDev(in.Pilot, nil)
	p.NoiseSD = sd
	c := sd
	switch {
	case sd >= in.MinSize && sd > 0:
		fmt.Fprintf(&b, "c = %.4g, the standard deviation of the %d pilot values", c, len(in.Pilot))
	case in.MinSize > 0:
		c = in.MinSize
		fmt.Fprintf(&b, "c = %.4g, the floor MinSize, because the pilot values vary only by %.4g", c, sd)
	default:
		return p, invalid("the %d pilot values have standard deviation 0 (no measurement noise) and MinSize is 0: choose a small c yourself through MinSize", len(in.Pilot))
	}
	g, err := in.GradientSize(c)
	if err != nil {
		return p, fmt.Errorf("schedule: SpallGains: gradient size at c = %g: %w", c, err)
	}
	if !(g > 0) || math.IsInf(g, 0) {
		return p, invalid("the gradient size at x₀ is %v: need a finite value > 0 to scale the gain (is x₀ already optimal, or is the noise swamping the difference?)", g)
	}
	p.GradientSize = g
	a := in.FirstMove * math.Pow(A+1, SpallAlpha) / g
	fmt.Fprintf(&b, "; a = %.4g, so that the first step a/(A+1)^α·|ĝ₀| = %.4g·%.4g moves x by about %.4g", a, a/math.Pow(A+1, SpallAlpha), g, in.FirstMove)
	p.Gain = Power{Scale: a, Offset: A, Exponent: SpallAlpha}
	p.Sizes = PowerSizes{Scale: c, Exponent: SpallGamma}
	p.Reason = b.String()
	return p, nil
}

var (
	_ Sizes     = PowerSizes{}
	_ Sizes     = SizesFunc(nil)
	_ Validator = PowerSizes{}
	_ Validator = SizesFunc(nil)
)
