package saplot_test

import (
	"context"
	"errors"
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
// estimate of coordinate 1 with its 95% band. Quantity and Unit name the
// y axis ("bias voltage (V)"); the plot's title becomes "Estimate of bias
// voltage".
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
	if err := saplot.Estimate(path, r.Trace, 0, root, saplot.Options{Quantity: "bias voltage", Unit: "V"}); err != nil {
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

// The distance of the iterate and of the average to a known root, on
// log–log axes, titled after the quantity ("Distance of valve open times
// to the truth") with the unit on the y axis ("distance to the truth
// (s)"). A run that
// never leaves the truth has nothing to show on log axes and gets
// ErrNothingToShow instead of an empty picture.
func ExampleDistance() {
	root := []float64{0.8, 1.2} // s
	h := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
		for i := range dst {
			dst[i] = x[i] - root[i] + 0.05*rng.NormFloat64()
		}
		return nil
	})
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{1, 1}, sa.Settings{
		Gain: schedule.Power{Scale: 1, Exponent: 0.6}, MaxSteps: 5000, Seed: 2,
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
	o := saplot.Options{Quantity: "valve open times", Unit: "s"}
	err = saplot.Distance(filepath.Join(dir, "distance.png"), r.Trace, root, o)
	fmt.Println("plotted:", err == nil)

	// Started at the root with noise-free measurements: every distance is 0.
	still := oracle.FieldFunc(func(dst, x []float64, _ *rand.Rand) error {
		for i := range dst {
			dst[i] = x[i] - root[i]
		}
		return nil
	})
	r, err = sa.RobbinsMonro(context.Background(), still, root, sa.Settings{
		Gain: schedule.Constant(0.5), MaxSteps: 10, Trace: &sa.Tracing{Every: 1},
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	err = saplot.Distance(filepath.Join(dir, "still.png"), r.Trace, root, o)
	fmt.Println("nothing to show:", errors.Is(err, saplot.ErrNothingToShow))
	// Output:
	// plotted: true
	// nothing to show: true
}
