package saplot_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sa/saplot"
	"github.com/stochroot/stochroot/schedule"
)

// A traced Robbins–Monro run for the root of a noisy field, plotted as the
// estimate of coordinate 1 with its 95% band.
func ExampleEstimate() {
	root := []float64{2, -1}
	h := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
		for i := range dst {
			dst[i] = x[i] - root[i] + rng.NormFloat64()
		}
		return nil
	})
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{0, 0}, sa.Settings{
		Gain: schedule.Power{Scale: 1, Exponent: 0.6}, MaxSteps: 20000, Seed: 1,
		Trace: &sa.Tracing{Every: 10},
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	dir, err := os.MkdirTemp("", "saplot")
	if err != nil {
		fmt.Println(err)
		return
	}
	defer os.RemoveAll(dir)
	path := filepath.Join(dir, "estimate.png")
	if err := saplot.Estimate(path, r.Trace, 0, root, saplot.Options{}); err != nil {
		fmt.Println(err)
		return
	}
	lo, hi, err := r.ErrorBars.Interval(0)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("x_1 = %.4g, 95%% interval [%.4g, %.4g], %d records plotted\n", r.Average[0], lo, hi, r.Trace.Len())
	// Output:
	// x_1 = 2.001, 95% interval [1.99, 2.012], 1000 records plotted
}
