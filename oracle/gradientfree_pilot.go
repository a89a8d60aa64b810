package oracle

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
)

// MeasureValue measures the Value the adapter was built on once at x, with
// the checks of a step: x must have the adapter's dimension, a panic of the
// Value becomes a [*PanicError], a non-finite value an error wrapping
// [ErrNotFinite], and a [ContextValue] receives ctx. It is what a
// calibration pilot uses to look at the loss itself (package sa, nil
// Settings.Gain); it counts as one measurement.
func (g *KieferWolfowitz) MeasureValue(ctx context.Context, x []float64, rng *rand.Rand) (float64, error) {
	return measureValue(ctx, "Kiefer–Wolfowitz", g.f, g.dim, x, rng)
}

// MeasureValue measures the Value the adapter was built on once at x (see
// [KieferWolfowitz.MeasureValue]).
func (g *SPSA) MeasureValue(ctx context.Context, x []float64, rng *rand.Rand) (float64, error) {
	return measureValue(ctx, "SPSA", g.f, g.dim, x, rng)
}

// Perturbations returns the number q of perturbations averaged per
// gradient.
func (g *SPSA) Perturbations() int { return g.q }

func measureValue(ctx context.Context, method string, f Value, dim int, x []float64, rng *rand.Rand) (float64, error) {
	if len(x) != dim {
		return 0, fmt.Errorf("%w: %s of dimension %d given x of length %d", ErrDimension, method, dim, len(x))
	}
	if err := ctx.Err(); err != nil {
		return 0, err
	}
	v, err := measureOne(ctx, f, x, rng)
	if err != nil {
		return 0, fmt.Errorf("%s value: %w", method, err)
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("%w: %s value %v", ErrNotFinite, method, v)
	}
	return v, nil
}
