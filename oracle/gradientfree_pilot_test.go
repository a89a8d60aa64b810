package oracle_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/schedule"
)

// TestMeasureValue: the gradient-free adapters measure their Value at a
// point with the checks of a step (dimension, non-finite values, panics,
// cancelled contexts), and report their perturbation count.
func TestMeasureValue(t *testing.T) {
	var val float64
	f := oracle.ContextValueFunc(func(ctx context.Context, x []float64, _ *rand.Rand) (float64, error) {
		if err := ctx.Err(); err != nil {
			return 0, err
		}
		if val == -1 {
			panic("simulation crashed")
		}
		return val + x[0] + 2*x[1], nil
	})
	c := schedule.PowerSizes{Scale: 0.1}
	kw, err := oracle.NewKieferWolfowitz(f, 2, oracle.KieferWolfowitzSettings{Sizes: c})
	if err != nil {
		t.Fatal(err)
	}
	sp, err := oracle.NewSPSA(f, 2, oracle.SPSASettings{Sizes: c, Perturbations: 3})
	if err != nil {
		t.Fatal(err)
	}
	if q := sp.Perturbations(); q != 3 {
		t.Errorf("Perturbations() = %d, want 3", q)
	}
	rng := rand.New(rand.NewPCG(1, 2))
	ctx := context.Background()
	for name, m := range map[string]func(context.Context, []float64, *rand.Rand) (float64, error){"KW": kw.MeasureValue, "SPSA": sp.MeasureValue} {
		val = 1
		if v, err := m(ctx, []float64{1, 2}, rng); err != nil || v != 6 {
			t.Errorf("%s: MeasureValue = %v, %v; want 6, nil", name, v, err)
		}
		if _, err := m(ctx, []float64{1}, rng); !errors.Is(err, oracle.ErrDimension) {
			t.Errorf("%s: x of length 1: err %v, want ErrDimension", name, err)
		}
		val = math.NaN()
		if _, err := m(ctx, []float64{1, 2}, rng); !errors.Is(err, oracle.ErrNotFinite) {
			t.Errorf("%s: NaN value: err %v, want ErrNotFinite", name, err)
		}
		val = -1
		if _, err := m(ctx, []float64{1, 2}, rng); !errors.Is(err, oracle.ErrPanic) {
			t.Errorf("%s: panicking value: err %v, want ErrPanic", name, err)
		}
		val = 1
		cctx, cancel := context.WithCancel(ctx)
		cancel()
		if _, err := m(cctx, []float64{1, 2}, rng); !errors.Is(err, context.Canceled) {
			t.Errorf("%s: cancelled context: err %v, want context.Canceled", name, err)
		}
	}
}
