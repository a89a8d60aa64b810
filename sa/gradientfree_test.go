package sa_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// bowl is f(x) = Σ (x_i − t_i)² + noise·N(0,1).
func bowl(t []float64, noise float64) oracle.ValueFunc {
	return func(x []float64, rng *rand.Rand) (float64, error) {
		s := 0.0
		for i, v := range x {
			d := v - t[i]
			s += d * d
		}
		return s + noise*rng.NormFloat64(), nil
	}
}

func TestGradientFreeStepIndexReachesSizes(t *testing.T) {
	// The driver tells the adapter the step index: c_k must be asked for
	// k = 0, 1, 2, … in order, once per step.
	var asked []int
	sizes := schedule.SizesFunc(func(k int) float64 { asked = append(asked, k); return 0.1 })
	g, _ := oracle.NewSPSA(bowl([]float64{1, 1}, 0), 2, oracle.SPSASettings{Sizes: sizes})
	r, err := sa.RobbinsMonro(context.Background(), g, []float64{0, 0}, sa.Settings{Gain: schedule.Power{Scale: 0.1, Exponent: 0.602}, MaxSteps: 6})
	if err != nil {
		t.Fatal(err)
	}
	if len(asked) != 6 || r.Steps != 6 {
		t.Fatalf("sizes asked for %v in %d steps, want 0…5", asked, r.Steps)
	}
	for k, v := range asked {
		if v != k {
			t.Fatalf("sizes asked for %v, want 0…5 in order", asked)
		}
	}
	if r.Measurements != 12 {
		t.Errorf("Measurements = %d, want 2 per step = 12", r.Measurements)
	}
}

func TestGradientFreeBudgetCounts(t *testing.T) {
	// Budgets count 2p values per KW step, 2q per SPSA step, q per
	// one-measurement step; a step that would exceed the budget is not
	// taken.
	f := bowl([]float64{1, 1, 1}, 0.1)
	c := schedule.PowerSizes{Scale: 0.1, Exponent: 0.101}
	kw, _ := oracle.NewKieferWolfowitz(f, 3, oracle.KieferWolfowitzSettings{Sizes: c})
	sp, _ := oracle.NewSPSA(f, 3, oracle.SPSASettings{Sizes: c, Perturbations: 2})
	one, _ := oracle.NewSPSA(f, 3, oracle.SPSASettings{Sizes: c, Perturbations: 2, OneMeasurement: true})
	for _, tc := range []struct {
		name       string
		g          oracle.Gradient
		steps, use int
	}{{"KW", kw, 16, 96}, {"SPSA q=2", sp, 25, 100}, {"SPSA one q=2", one, 50, 100}} {
		r, err := sa.RobbinsMonro(context.Background(), tc.g, []float64{0, 0, 0}, sa.Settings{Gain: schedule.Power{Scale: 0.001, Exponent: 0.602}, MaxSteps: sa.NoLimit, MaxMeasurements: 100})
		if err != nil || r.Reason != sa.MeasurementLimit || r.Steps != tc.steps || r.Measurements != tc.use {
			t.Errorf("%s: %v, %v: Steps %d, Measurements %d; want %d and %d", tc.name, err, r.Reason, r.Steps, r.Measurements, tc.steps, tc.use)
		}
	}
}

func TestGradientFreeDriverBadInput(t *testing.T) {
	ctx := context.Background()
	gain := schedule.Power{Scale: 0.05, Exponent: 0.602}
	t.Run("dimension mismatch", func(t *testing.T) {
		g, _ := oracle.NewSPSA(bowl([]float64{0, 0, 0}, 0), 3, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.1}})
		r, err := sa.RobbinsMonro(ctx, g, []float64{1, 2}, sa.Settings{Gain: gain})
		if !errors.Is(err, sa.ErrDimension) || r.Reason != sa.NotStarted || len(r.X) != 2 || r.X[0] != 1 {
			t.Errorf("error %v, result %+v; want ErrDimension, not started, x0 kept", err, r)
		}
	})
	t.Run("c_k ≤ 0 at step 4", func(t *testing.T) {
		sizes := schedule.SizesFunc(func(k int) float64 {
			if k == 4 {
				return 0
			}
			return 0.1
		})
		g, _ := oracle.NewKieferWolfowitz(bowl([]float64{1, 1}, 0), 2, oracle.KieferWolfowitzSettings{Sizes: sizes})
		ref, _ := sa.RobbinsMonro(ctx, g, []float64{0, 0}, sa.Settings{Gain: gain, MaxSteps: 4})
		g, _ = oracle.NewKieferWolfowitz(bowl([]float64{1, 1}, 0), 2, oracle.KieferWolfowitzSettings{Sizes: sizes})
		r, err := sa.RobbinsMonro(ctx, g, []float64{0, 0}, sa.Settings{Gain: gain, MaxSteps: 10})
		var se *sa.StepError
		if !errors.Is(err, oracle.ErrSize) || !errors.As(err, &se) || se.Step != 4 || r.Steps != 4 || r.Reason != sa.Failed {
			t.Fatalf("error %v, Steps %d, Reason %v; want ErrSize at step 4", err, r.Steps, r.Reason)
		}
		if r.X[0] != ref.X[0] || r.X[1] != ref.X[1] {
			t.Errorf("X = %v after the failed step, want the iterate after 4 steps %v", r.X, ref.X)
		}
	})
	t.Run("NaN measurement at step 3", func(t *testing.T) {
		calls := 0
		f := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
			calls++
			if calls == 7 { // first measurement of step 3 (two per step)
				return math.NaN(), nil
			}
			return x[0] * x[0], nil
		})
		g, _ := oracle.NewSPSA(f, 1, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.1}})
		r, err := sa.RobbinsMonro(ctx, g, []float64{1}, sa.Settings{Gain: gain, MaxSteps: 10})
		var se *sa.StepError
		if !errors.Is(err, oracle.ErrNotFinite) || !errors.As(err, &se) || se.Step != 3 || r.Steps != 3 || r.Measurements != 8 {
			t.Errorf("error %v, Steps %d, Measurements %d; want ErrNotFinite at step 3 after 8 measurements", err, r.Steps, r.Measurements)
		}
		if !strings.Contains(err.Error(), "step 3") || math.IsNaN(r.X[0]) {
			t.Errorf("error %q does not name step 3, or X = %v", err, r.X)
		}
	})
	t.Run("panic on a worker goroutine", func(t *testing.T) {
		// The adapters recover a panicking measurement into an error (see
		// oracle.PanicError): the run stops at that step with the last
		// iterate instead of crashing the process from a goroutine the
		// caller cannot guard.
		f := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
			if x[0] > 1.5 {
				panic("queue model out of range")
			}
			return (x[0] - 3) * (x[0] - 3), nil
		})
		for _, workers := range []int{1, 2} {
			g, _ := oracle.NewSPSA(f, 1, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.1}, Perturbations: 4, Workers: workers})
			r, err := sa.RobbinsMonro(ctx, g, []float64{0}, sa.Settings{Gain: schedule.Constant(0.1), MaxSteps: 100})
			var pe *oracle.PanicError
			if !errors.As(err, &pe) || r.Reason != sa.Failed || r.X[0] > 1.5+0.1 {
				t.Errorf("workers %d: error %v, Reason %v, X %v; want a PanicError and the last good iterate", workers, err, r.Reason, r.X)
			}
		}
	})
}

func TestGradientFreeReproducible(t *testing.T) {
	// Same seed, same result bit for bit, whatever the worker count.
	run := func(workers int) sa.Result {
		g, _ := oracle.NewSPSA(bowl([]float64{1, -1, 2}, 0.5), 3, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.3, Exponent: 0.101}, Workers: workers, Perturbations: 2})
		r, err := sa.RobbinsMonro(context.Background(), g, []float64{0, 0, 0}, sa.Settings{Gain: schedule.Power{Scale: 0.1, Offset: 5, Exponent: 0.602}, MaxSteps: 200, Seed: 42})
		if err != nil {
			t.Fatal(err)
		}
		return r
	}
	a, b := run(1), run(2)
	for i := range a.X {
		if math.Float64bits(a.X[i]) != math.Float64bits(b.X[i]) || math.Float64bits(a.Average[i]) != math.Float64bits(b.Average[i]) {
			t.Fatalf("workers 1: %v, workers 2: %v", a.X, b.X)
		}
	}
}
