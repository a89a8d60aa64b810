package schedule

import (
	"fmt"
	"math"
	"strings"
)

// Status is the answer to one convergence condition.
type Status int

const (
	// Undecided means neither proof nor numerical evidence settles the condition.
	Undecided Status = iota
	// Holds means the condition is satisfied.
	Holds
	// Fails means the condition is violated.
	Fails
)

// String returns "undecided", "holds" or "fails".
func (s Status) String() string {
	switch s {
	case Holds:
		return "holds"
	case Fails:
		return "fails"
	}
	return "undecided"
}

// Conditions is the verdict on the Robbins–Monro conditions for a gain
// sequence: SumDiverges is Σa_k = ∞, SquaresConverge is Σa_k² < ∞.
//
// Proven tells whether the verdict was derived analytically for a known
// family (true) or is numerical evidence read off the tail of the sequence
// (false); evidence is not proof. Reason says in plain words why.
type Conditions struct {
	SumDiverges     Status
	SquaresConverge Status
	Proven          bool
	// Exponent is the tail exponent α in a_k ~ C·k^(−α): exact for the
	// power family, estimated for other schedules, NaN when not meaningful.
	Exponent float64
	Reason   string
}

// Convergent reports whether both conditions hold.
func (c Conditions) Convergent() bool {
	return c.SumDiverges == Holds && c.SquaresConverge == Holds
}

// String summarises the verdict on one line.
func (c Conditions) String() string {
	kind := "evidence"
	if c.Proven {
		kind = "proof"
	}
	return fmt.Sprintf("Σa_k = ∞ %v, Σa_k² < ∞ %v (%s): %s", c.SumDiverges, c.SquaresConverge, kind, c.Reason)
}

// Checker is implemented by schedules that know their own conditions.
type Checker interface {
	Conditions() Conditions
}

// Check returns the verdict on Σa_k = ∞ and Σa_k² < ∞ for s. A schedule that
// implements [Checker] answers analytically; any other schedule is examined
// numerically (see [CheckNumeric]). A nil schedule (also a typed nil such
// as Func(nil)) or one whose Validate fails is undecided, with the reason
// in Conditions.Reason.
func Check(s Schedule) Conditions {
	if isNil(s) {
		return nilConditions(s)
	}
	if c, ok := s.(Checker); ok {
		return c.Conditions()
	}
	return CheckNumeric(s)
}

// nilConditions is the verdict on a nil schedule: undecided.
func nilConditions(s Schedule) Conditions {
	return Conditions{Exponent: math.NaN(), Reason: fmt.Sprintf("the schedule is nil (%T): there is no gain sequence to check", s)}
}

// pSeries is the verdict for a_k ~ C·k^(−α), C > 0: Σa_k = ∞ iff α ≤ 1 and
// Σa_k² < ∞ iff 2α > 1 (the p-series test; Robbins & Monro 1951 use a/k).
func pSeries(alpha float64) (sum, sq Status) {
	sum, sq = Fails, Fails
	if alpha <= 1 {
		sum = Holds
	}
	if 2*alpha > 1 {
		sq = Holds
	}
	return sum, sq
}

// Conditions answers analytically: a constant gain has Σa_k = ∞ but not
// Σa_k² < ∞.
func (c Constant) Conditions() Conditions {
	return Conditions{
		SumDiverges:     Holds,
		SquaresConverge: Fails,
		Proven:          true,
		Exponent:        0,
		Reason:          "a constant gain never shrinks, so Σa_k² = ∞: it is a tracking gain that follows a drifting target but does not settle on a point",
	}
}

// Conditions answers analytically by the p-series test: both conditions
// hold iff 1/2 < Exponent ≤ 1, whatever Offset.
func (p Power) Conditions() Conditions {
	if err := p.Validate(); err != nil {
		return Conditions{Exponent: math.NaN(), Proven: true, Reason: err.Error()}
	}
	a := p.Exponent
	sum, sq := pSeries(a)
	var why string
	switch {
	case a > 1:
		why = fmt.Sprintf("a_k ~ k^(−%g) with exponent > 1: Σa_k converges, so the steps may stop short of the root", a)
	case 2*a <= 1:
		why = fmt.Sprintf("a_k ~ k^(−%g) with exponent ≤ 1/2: Σa_k² diverges, so the noise is never averaged out", a)
	default:
		why = fmt.Sprintf("a_k ~ k^(−%g) with 1/2 < exponent ≤ 1: Σa_k diverges and Σa_k² converges (p-series test)", a)
	}
	return Conditions{SumDiverges: sum, SquaresConverge: sq, Proven: true, Exponent: a, Reason: why}
}

// Conditions are those of Base: near the root the increments change
// direction infinitely often, so the gain index runs through every value of
// Base (Kesten 1958) and the sums are Base's sums with some terms repeated
// finitely often.
func (s Kesten) Conditions() Conditions {
	if s.Base == nil {
		return Conditions{Exponent: math.NaN(), Proven: true, Reason: "Kesten.Base is nil"}
	}
	c := Check(s.Base)
	c.Reason = "Kesten's rule repeats each base gain a finite number of times once the iterate oscillates, so the base schedule decides: " + c.Reason
	return c
}

// Numerical check settings: the gain is sampled at k = 10^j for
// j = firstDecade … lastDecade in steps of 1/perDecade.
const (
	firstDecade = 2
	lastDecade  = 9
	perDecade   = 4
	// exactTol: an estimated exponent this close to 1 or 1/2 is taken to be
	// exactly that critical value (the p-series verdict at the boundary).
	exactTol = 1e-3
	// borderTol: estimates closer than this to a critical value are flagged
	// as borderline (slowly varying factors such as log k shift the local
	// exponent by about 1/ln k ≈ 0.05 at k = 10^9).
	borderTol = 0.06
)

// CheckNumeric examines the tail of s numerically. It samples a_k at
// log-spaced k from 10² to 10⁹, estimates the local exponent
// α_j = −Δlog a / Δlog k on each decade, and applies the p-series test to
// the exponent of the last decade. The result is labelled as evidence
// (Proven is false) and the Reason lists the local exponents it saw.
//
// It reports Undecided when s is nil, its Validate fails, or a sampled
// gain is negative, NaN or infinite, and detects gains that reach zero
// (Σa_k then converges).
func CheckNumeric(s Schedule) Conditions {
	if isNil(s) {
		return nilConditions(s)
	}
	if v, ok := s.(Validator); ok {
		if err := v.Validate(); err != nil {
			return Conditions{Exponent: math.NaN(), Reason: err.Error()}
		}
	}
	n := (lastDecade-firstDecade)*perDecade + 1
	logk := make([]float64, n)
	loga := make([]float64, n)
	for i := range n {
		k := int(math.Round(math.Pow(10, firstDecade+float64(i)/perDecade)))
		a := s.Gain(k)
		switch {
		case math.IsNaN(a) || math.IsInf(a, 0) || a < 0:
			return Conditions{Exponent: math.NaN(), Reason: fmt.Sprintf("numerical evidence: a_k = %v at k = %d is not a finite gain ≥ 0", a, k)}
		case a == 0:
			return Conditions{
				SumDiverges: Fails, SquaresConverge: Holds, Exponent: math.Inf(1),
				Reason: fmt.Sprintf("numerical evidence: a_k = 0 at k = %d; if it stays 0, Σa_k is a finite sum and the steps stop", k),
			}
		}
		logk[i] = math.Log(float64(k))
		loga[i] = math.Log(a)
	}
	var local []string
	var alpha float64
	for j := 0; j+perDecade < n; j += perDecade {
		alpha = -(loga[j+perDecade] - loga[j]) / (logk[j+perDecade] - logk[j])
		local = append(local, fmt.Sprintf("%.3g", alpha))
	}
	if math.Abs(alpha) < exactTol {
		alpha = 0
	}
	if math.Abs(alpha-1) < exactTol {
		alpha = 1
	}
	if math.Abs(alpha-0.5) < exactTol {
		alpha = 0.5
	}
	sum, sq := pSeries(alpha)
	var b strings.Builder
	fmt.Fprintf(&b, "numerical evidence, not proof: local tail exponents per decade from k = 1e%d to 1e%d are [%s]; ", firstDecade, lastDecade, strings.Join(local, " "))
	fmt.Fprintf(&b, "with a_k ~ k^(−%.4g) the p-series test gives the verdict", alpha)
	if math.Abs(alpha-1) < borderTol && alpha != 1 || math.Abs(alpha-0.5) < borderTol && alpha != 0.5 {
		b.WriteString("; borderline: the exponent is near a critical value, where factors like log k can reverse the verdict")
	}
	return Conditions{SumDiverges: sum, SquaresConverge: sq, Exponent: alpha, Reason: b.String()}
}
