package sa

import (
	"math"

	"github.com/stochroot/stochroot/schedule"
)

// powerGains evaluates the gain a_k = a/(k+1+A)^α of a schedule.Power for
// consecutive k without a math.Pow per step, which costs as much as the
// rest of a small SGD step.
//
// The value it returns for k is a function of k alone (not of the order
// of the calls), so runs stay reproducible bit for bit from the seed, a
// tuner restored from a snapshot continues with the same gains, and
// Solver.Step and RobbinsMonro agree:
//
//   - while b = k+1+A < powerExactBelow, and always for α = 1 or ½ (which
//     need no math.Pow), a_k = Power.Gain(k) exactly;
//   - otherwise, with k₀ = k rounded down to a multiple of powerBlock (but
//     not below the first k with b ≥ powerExactBelow),
//     a_k = Power.Gain(k₀) · ρ_{k₀} · ρ_{k₀+1} ⋯ ρ_{k−1}, where
//     ρ_j = a_{j+1}/a_j = exp(−α·log1p(1/b_j)), b_j = j+1+A, is evaluated
//     with truncated Taylor series of log1p and exp.
//
// Accuracy: with u = 1/b ≤ 2⁻¹² the log1p series to u⁴ errs by < u⁵/5 and
// the exp series to t⁵ (t = α·log1p(u) ≤ 2⁻¹²·α ≤ 2⁻⁹ for α ≤ 8) by
// < t⁶/720, so ρ_j errs by < 10⁻¹⁷ relative; each of the < powerBlock products
// adds at most a few units of rounding (2⁻⁵³ ≈ 1.1·10⁻¹⁶ each), so
// |a_k / (a·b^−α) − 1| < powerBlock·4·2⁻⁵³ ≈ 4.6·10⁻¹³, far below any
// noise a gain sequence meets. TestPowerGainsAccuracy checks the bound
// against math.Pow. Exponents above powerMaxAlpha use Power.Gain.
type powerGains struct {
	p     schedule.Power
	exact bool    // every gain from Power.Gain
	first int     // first index evaluated incrementally
	k     int     // index of g; −1 before the first call (below first)
	end   int     // first index of the next block: k+1 < end continues g
	g     float64 // a_k
}

const (
	powerBlock      = 1024
	powerExactBelow = 1 << 12 // b below this: Power.Gain
	powerMaxAlpha   = 8
)

func newPowerGains(p schedule.Power) powerGains {
	// first is the smallest k with k+1+A ≥ powerExactBelow.
	first := int(math.Ceil(powerExactBelow - 1 - p.Offset))
	return powerGains{
		p:     p,
		exact: p.Exponent == 1 || p.Exponent == 0.5 || p.Exponent > powerMaxAlpha || p.Offset > 1<<50,
		first: max(first, 0),
		k:     -1,
	}
}

// gain returns a_k; the next index after the last call, or the same
// index, costs a few multiplications.
func (s *powerGains) gain(k int) float64 {
	if k == s.k+1 && k < s.end { // the next index within the block: the hot path
		s.g *= s.ratio(s.k)
		s.k = k
		return s.g
	}
	if s.exact || k < s.first {
		return s.p.Gain(k)
	}
	if k != s.k {
		k0 := s.start(k)
		g := s.p.Gain(k0)
		for j := k0; j < k; j++ {
			g *= s.ratio(j)
		}
		s.g, s.k, s.end = g, k, k0-k0%powerBlock+powerBlock
	}
	return s.g
}

// start returns k₀ for k ≥ first: k rounded down to a multiple of
// powerBlock, but not below first.
func (s *powerGains) start(k int) int {
	return max(k-k%powerBlock, s.first)
}

// ratio returns a_{j+1}/a_j = (b/(b+1))^α for b = j+1+A ≥ powerExactBelow.
func (s *powerGains) ratio(j int) float64 {
	u := 1 / (float64(j) + 1 + s.p.Offset)
	l := u * (1 - u*(1.0/2-u*(1.0/3-u*(1.0/4)))) // log1p(u)
	t := s.p.Exponent * l
	return 1 - t*(1-t*(1.0/2-t*(1.0/6-t*(1.0/24-t*(1.0/120))))) // exp(−t)
}

// gainOf returns the gain of step k, through the incremental evaluation
// when the gain is a schedule.Power.
func (c *core) gainOf(k int) float64 {
	if c.usePow {
		return c.pow.gain(k)
	}
	return c.gain.Gain(k)
}
