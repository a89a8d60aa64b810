package sa

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sampling"
	"github.com/stochroot/stochroot/schedule"
)

// TestStepAllocs asserts that one step of SGD, MBGD (serial and parallel
// batches) and BGD allocates nothing: a measurement by the batch oracle
// followed by the update of the core, as runPull does it, and that a whole
// run allocates the same whatever its number of steps.
func TestStepAllocs(t *testing.T) {
	n, d := 5000, 100
	rng := rand.New(rand.NewPCG(1, 2))
	a := make([]float64, n*d)
	y := make([]float64, n)
	for i := range a {
		a[i] = rng.NormFloat64()
	}
	for i := range y {
		y[i] = rng.NormFloat64()
	}
	ls, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
	if err != nil {
		t.Fatal(err)
	}
	mk := func(b *oracle.MiniBatch, err error) *oracle.MiniBatch {
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	for _, tc := range []struct {
		name string
		g    *oracle.MiniBatch
	}{
		{"SGD", mk(oracle.NewMiniBatch(ls, sampling.NewUniform(n), 1, oracle.BatchSettings{}))},
		{"MBGD-32", mk(oracle.NewMiniBatch(ls, sampling.NewShuffled(n), 32, oracle.BatchSettings{}))},
		{"MBGD-4096-2workers", mk(oracle.NewMiniBatch(ls, sampling.NewUniform(n), 4096, oracle.BatchSettings{Workers: 2}))},
		{"BGD-2workers", mk(oracle.NewFullBatch(ls, oracle.BatchSettings{Workers: 2}))},
	} {
		t.Run(tc.name, func(t *testing.T) {
			defer tc.g.Close()
			c := newCore(make([]float64, d+1), schedule.Power{Scale: 1e-3, Exponent: 0.7}, 0, nil, 0)
			// With the default batch-means error bars on, as in a driver run.
			rs, err := (Settings{Gain: schedule.Power{Scale: 1e-3, Exponent: 0.7}}).resolve(d + 1)
			if err != nil {
				t.Fatal(err)
			}
			c.configure(rs, tc.g.MeasurementsPerCall())
			meas := make([]float64, d+1)
			srng := rand.New(rand.NewPCG(3, streamSample))
			step := func() {
				if err := tc.g.Measure(meas, c.x, srng); err != nil {
					t.Fatal(err)
				}
				if err := c.step(meas); err != nil {
					t.Fatal(err)
				}
			}
			step() // starts the worker goroutines of parallel batches
			if allocs := testing.AllocsPerRun(50, step); allocs != 0 {
				t.Errorf("%s step: %v allocations, want 0", tc.name, allocs)
			}
			run := func(steps int) float64 {
				return testing.AllocsPerRun(3, func() {
					if _, err := MinimizeSum(context.Background(), tc.g, make([]float64, d+1), Settings{Gain: schedule.Power{Scale: 1e-3, Exponent: 0.7}, MaxSteps: steps,
						// Off for the whole-run comparison only: the final error bars
						// allocate differently once they become available.
						Inference: Inference{Covariance: CovarianceOff}}); err != nil {
						t.Fatal(err)
					}
				})
			}
			if a1, a2 := run(5), run(40); a1 != a2 {
				t.Errorf("%s: a run of 5 steps allocates %v times, of 40 steps %v: steps allocate", tc.name, a1, a2)
			}
		})
	}
}

// TestCoreStepFiniteCheck checks the finiteness check of the update on
// both of its paths (a plain loop below vectorKernelMin, gonum's kernels
// from it): a non-finite measurement is ErrNotFinite, an update that
// overflows is ErrDiverged, both leave the iterate as it was, and finite
// iterates whose sum overflows are accepted.
func TestCoreStepFiniteCheck(t *testing.T) {
	for _, d := range []int{3, vectorKernelMin, 2 * vectorKernelMin} {
		x0 := make([]float64, d)
		for i := range x0 {
			x0[i] = 1e308 // the sum of the iterate overflows; each entry is finite
		}
		c := newCore(x0, schedule.Constant(1), 0, nil, 0)
		y := make([]float64, d)
		if err := c.step(y); err != nil {
			t.Fatalf("d=%d: finite update rejected: %v", d, err)
		}
		y[d-1] = math.NaN()
		if err := c.step(y); !errors.Is(err, ErrNotFinite) {
			t.Errorf("d=%d: NaN measurement: err = %v, want ErrNotFinite", d, err)
		}
		y[d-1] = -1e308 // x − y = 2e308 overflows
		if err := c.step(y); !errors.Is(err, ErrDiverged) {
			t.Errorf("d=%d: overflowing update: err = %v, want ErrDiverged", d, err)
		}
		if c.steps != 1 || c.x[d-1] != 1e308 {
			t.Errorf("d=%d: failed steps changed the state: steps %d, x[last] %v", d, c.steps, c.x[d-1])
		}
	}
}
