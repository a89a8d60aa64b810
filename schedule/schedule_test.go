package schedule_test

import (
	"math"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"github.com/stochroot/stochroot/schedule"
)

// TestReferencePowerConditions checks the power family's verdicts against
// the p-series test: Σ k^(−α) diverges iff α ≤ 1, so Σa_k = ∞ iff α ≤ 1 and
// Σa_k² < ∞ iff α > 1/2 (the conditions of Robbins & Monro 1951, "A
// stochastic approximation method", Ann. Math. Statist. 22(3); the p-series
// test is a textbook result). The offset A never matters.
func TestReferencePowerConditions(t *testing.T) {
	cases := []struct {
		alpha     float64
		sum, squa schedule.Status
	}{
		{0.3, schedule.Holds, schedule.Fails},
		{0.5, schedule.Holds, schedule.Fails},
		{0.501, schedule.Holds, schedule.Holds},
		{0.602, schedule.Holds, schedule.Holds},
		{0.7, schedule.Holds, schedule.Holds},
		{1, schedule.Holds, schedule.Holds},
		{1.001, schedule.Fails, schedule.Holds},
		{2, schedule.Fails, schedule.Holds},
	}
	for _, tc := range cases {
		for _, offset := range []float64{0, 10, 1000} {
			p := schedule.Power{Scale: 0.5, Offset: offset, Exponent: tc.alpha}
			c := schedule.Check(p)
			require.True(t, c.Proven, "power family answers analytically")
			require.Equal(t, tc.sum, c.SumDiverges, "α=%v A=%v: Σa_k = ∞", tc.alpha, offset)
			require.Equal(t, tc.squa, c.SquaresConverge, "α=%v A=%v: Σa_k² < ∞", tc.alpha, offset)
			require.Equal(t, tc.sum == schedule.Holds && tc.squa == schedule.Holds, c.Convergent())
			require.NotEmpty(t, c.Reason)
		}
	}
}

// TestNumericMatchesAnalytic: a caller's own power-law schedule gets the
// p-series verdict as evidence, not proof.
func TestNumericMatchesAnalytic(t *testing.T) {
	for _, alpha := range []float64{0.3, 0.5, 0.7, 1, 1.3, 2} {
		p := schedule.Power{Scale: 3, Offset: 5, Exponent: alpha}
		want := schedule.Check(p)
		got := schedule.Check(schedule.Func(p.Gain))
		require.False(t, got.Proven)
		require.Equal(t, want.SumDiverges, got.SumDiverges, "α=%v", alpha)
		require.Equal(t, want.SquaresConverge, got.SquaresConverge, "α=%v", alpha)
		require.InDelta(t, alpha, got.Exponent, 1e-3)
		require.Contains(t, got.Reason, "evidence, not proof")
	}
}

func TestNumericSpecialTails(t *testing.T) {
	// Geometric decay: steeper than any power, Σa_k < ∞.
	c := schedule.CheckNumeric(schedule.Func(func(k int) float64 { return math.Pow(0.999999, float64(k)) }))
	require.Equal(t, schedule.Fails, c.SumDiverges)
	// Gains that reach zero.
	c = schedule.CheckNumeric(schedule.Func(func(k int) float64 {
		if k > 5000 {
			return 0
		}
		return 1
	}))
	require.Equal(t, schedule.Fails, c.SumDiverges)
	require.Contains(t, c.Reason, "a_k = 0")
	// Negative or NaN gains: undecided, with the reason.
	for _, bad := range []float64{-1, math.NaN(), math.Inf(1)} {
		c = schedule.CheckNumeric(schedule.Func(func(int) float64 { return bad }))
		require.Equal(t, schedule.Undecided, c.SumDiverges)
		require.Equal(t, schedule.Undecided, c.SquaresConverge)
		require.Contains(t, c.Reason, "not a finite gain")
	}
	// A slowly varying factor near the critical exponent is flagged.
	c = schedule.CheckNumeric(schedule.Func(func(k int) float64 { x := float64(k) + 2; return 1 / (x * math.Log(x)) }))
	require.Contains(t, c.Reason, "borderline")
}

func TestConstantConditions(t *testing.T) {
	c := schedule.Check(schedule.Constant(0.1))
	require.True(t, c.Proven)
	require.Equal(t, schedule.Holds, c.SumDiverges)
	require.Equal(t, schedule.Fails, c.SquaresConverge)
	require.Contains(t, c.Reason, "tracking gain")
	require.False(t, c.Convergent())
}

func TestKesten(t *testing.T) {
	k := schedule.Kesten{Base: schedule.Harmonic(2)}
	require.True(t, k.Advance([]float64{1, 2}, nil), "the first step always advances")
	require.True(t, k.Advance([]float64{1, 0}, []float64{-1, 5}), "⟨y, prev⟩ < 0: direction changed")
	require.False(t, k.Advance([]float64{1, 1}, []float64{1, -0.5}), "⟨y, prev⟩ > 0: same direction")
	require.Equal(t, 1.0, k.Gain(1))
	c := schedule.Check(k)
	require.True(t, c.Convergent())
	require.True(t, strings.HasPrefix(c.Reason, "Kesten"))
	require.ErrorIs(t, schedule.Kesten{}.Validate(), schedule.ErrInvalid)
	require.ErrorIs(t, schedule.Kesten{Base: schedule.Constant(-1)}.Validate(), schedule.ErrInvalid)
}

func TestValidate(t *testing.T) {
	bad := []schedule.Validator{
		schedule.Constant(0), schedule.Constant(math.NaN()), schedule.Constant(math.Inf(1)),
		schedule.Power{Scale: 0, Exponent: 1}, schedule.Power{Scale: 1, Exponent: 0},
		schedule.Power{Scale: 1, Offset: -1, Exponent: 1}, schedule.Power{Scale: 1, Exponent: math.NaN()},
	}
	for _, v := range bad {
		require.ErrorIs(t, v.Validate(), schedule.ErrInvalid, "%#v", v)
	}
	require.NoError(t, schedule.Power{Scale: 1, Offset: 3, Exponent: 0.6}.Validate())
	require.False(t, schedule.Check(schedule.Power{}).Convergent(), "invalid parameters are not convergent")
}

func TestPowerGain(t *testing.T) {
	require.Equal(t, 0.5, schedule.Harmonic(1).Gain(1))
	require.InDelta(t, 2/math.Pow(14, 0.602), schedule.Power{Scale: 2, Offset: 10, Exponent: 0.602}.Gain(3), 1e-15)
	require.InDelta(t, 1/math.Sqrt(5), schedule.Power{Scale: 1, Exponent: 0.5}.Gain(4), 1e-15)
}
