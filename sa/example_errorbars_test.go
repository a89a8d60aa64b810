package sa_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"strings"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// The root of a noisy field with error bars (random scaling, the default
// method), stopping once the 95% intervals are narrower than ±0.01.
func ExampleRobbinsMonro_errorBars() {
	root := []float64{2, -1}
	h := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
		for i := range dst {
			dst[i] = x[i] - root[i] + 0.5*rng.NormFloat64()
		}
		return nil
	})
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{0, 0}, sa.Settings{
		Gain:      schedule.Power{Scale: 1, Exponent: 0.6},
		MaxSteps:  1_000_000,
		Precision: &sa.Precision{Absolute: 0.01},
		Seed:      1,
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println("stopped:", r.Reason)
	for i, x := range r.Average {
		fmt.Printf("x_%d = %.4g ± %.2g (truth %g)\n", i+1, x, r.ErrorBars.HalfWidth[i], root[i])
	}
	fmt.Printf("%d steps\n", r.Steps)
	// Output:
	// stopped: confidence intervals within tolerance
	// x_1 = 2.003 ± 0.0062 (truth 2)
	// x_2 = -1.003 ± 0.0098 (truth -1)
	// 9499 steps
}

// Ten independent runs and the Student-t interval of their mean.
func ExampleReplicate() {
	h := oracle.Scalar(func(x float64, rng *rand.Rand) (float64, error) {
		return x - 3 + rng.NormFloat64(), nil
	})
	rep, err := sa.Replicate(context.Background(), sa.Replications{Runs: 10, Seed: 1},
		func(ctx context.Context, _ int, seed uint64) (sa.Result, error) {
			return sa.RobbinsMonro(ctx, h, []float64{0}, sa.Settings{
				Gain: schedule.Power{Scale: 1, Exponent: 0.7}, MaxSteps: 2000, Seed: seed,
			})
		})
	if err != nil {
		fmt.Println(err)
		return
	}
	e := rep.ErrorBars
	lo, hi, _ := e.Interval(0)
	fmt.Printf("root ≈ %.4g, 95%% interval [%.4g, %.4g] from %d runs (t quantile %.4g)\n", e.Center[0], lo, hi, e.Count, e.Quantile)
	// Output:
	// root ≈ 3.003, 95% interval [2.986, 3.021] from 10 runs (t quantile 2.262)
}

// A run traced every 2000 steps, written as CSV. Half-widths are empty
// until the error bars would be shown (enough data, a settled run).
func ExampleTrace_WriteCSV() {
	h := oracle.Scalar(func(x float64, rng *rand.Rand) (float64, error) {
		return x - 3 + rng.NormFloat64(), nil
	})
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{0}, sa.Settings{
		Gain: schedule.Power{Scale: 1, Exponent: 0.6}, MaxSteps: 10000, Seed: 1,
		Trace: &sa.Tracing{Every: 2000},
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	var b strings.Builder
	if err := r.Trace.WriteCSV(&b); err != nil {
		fmt.Println(err)
		return
	}
	fmt.Print(strings.SplitN(b.String(), "\n", 2)[0], "\n")
	for p := range r.Trace.All() {
		if p.HalfWidth == nil {
			fmt.Printf("step %d: average %.4g, no interval yet\n", p.Step, p.Average[0])
			continue
		}
		fmt.Printf("step %d: average %.4g ± %.2g\n", p.Step, p.Average[0], p.HalfWidth[0])
	}
	// Output:
	// step,measurements,gain,measurement_norm,x_1,average_1,half_width_1
	// step 2000: average 2.984, no interval yet
	// step 4000: average 3, no interval yet
	// step 6000: average 3 ± 0.021
	// step 8000: average 2.993 ± 0.023
	// step 10000: average 2.995 ± 0.013
}
