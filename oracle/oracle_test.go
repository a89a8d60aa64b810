package oracle_test

import (
	"errors"
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"

	"github.com/stochroot/stochroot/oracle"
)

func TestAdapters(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	dst := make([]float64, 2)
	f := oracle.FieldFunc(func(dst, x []float64, _ *rand.Rand) error {
		dst[0], dst[1] = 2*x[0], 3*x[1]
		return nil
	})
	require.NoError(t, f.Measure(dst, []float64{1, 1}, rng))
	require.Equal(t, []float64{2, 3}, dst)

	boom := errors.New("boom")
	g := oracle.GradientFunc(func(dst, x []float64, _ *rand.Rand) error { return boom })
	require.ErrorIs(t, g.Measure(dst, []float64{1, 1}, rng), boom)

	s := oracle.Scalar(func(x float64, _ *rand.Rand) (float64, error) { return x * x, nil })
	one := make([]float64, 1)
	require.NoError(t, s.Measure(one, []float64{3}, rng))
	require.Equal(t, 9.0, one[0])
	require.Equal(t, 1, s.Dim())
	require.Panics(t, func() { _ = s.Measure(dst, []float64{1, 2}, rng) })
}

func TestScalarPassesStream(t *testing.T) {
	// The measurement draws from the stream it is given, so the same stream
	// reproduces the same measurement.
	s := oracle.Scalar(func(x float64, rng *rand.Rand) (float64, error) { return x + rng.NormFloat64(), nil })
	a, b := make([]float64, 1), make([]float64, 1)
	_ = s.Measure(a, []float64{0}, rand.New(rand.NewPCG(5, 6)))
	_ = s.Measure(b, []float64{0}, rand.New(rand.NewPCG(5, 6)))
	require.Equal(t, a, b)
}
