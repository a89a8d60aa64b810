package sa_test

import (
	"context"
	"fmt"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// Find the median of a distribution that can only be sampled: the root of
// h(q) = P(X ≤ q) − 1/2, measured by the indicator 1{X ≤ q} − 1/2.
func ExampleRobbinsMonro() {
	h := oracle.Scalar(func(q float64, rng *rand.Rand) (float64, error) {
		x := 3 + 2*rng.NormFloat64() // the median is 3
		if x <= q {
			return 0.5, nil
		}
		return -0.5, nil
	})
	res, err := sa.RobbinsMonro(context.Background(), h, []float64{0}, sa.Settings{
		Gain:     schedule.Power{Scale: 2, Exponent: 0.7},
		MaxSteps: 100000,
		BurnIn:   1000,
		Seed:     1,
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("median ≈ %.2f after %d measurements (%s)\n", res.Average[0], res.Measurements, res.Reason)
	// Output: median ≈ 3.01 after 100000 measurements (step limit reached)
}

// Drive a run one step at a time, for instance to log or plot each iterate.
func ExampleSolver_Step() {
	h := oracle.Scalar(func(x float64, rng *rand.Rand) (float64, error) {
		return x - 10 + rng.NormFloat64(), nil // root at 10
	})
	sv, err := sa.NewSolver(h, []float64{0}, sa.Settings{Gain: schedule.Harmonic(1), Seed: 2})
	if err != nil {
		fmt.Println(err)
		return
	}
	for k := 1; k <= 1000; k++ {
		if err := sv.Step(); err != nil {
			fmt.Println(err)
			return
		}
		if k == 10 || k == 1000 {
			fmt.Printf("after %4d steps x = %.1f\n", k, sv.X()[0])
		}
	}
	// Output:
	// after   10 steps x = 10.3
	// after 1000 steps x = 10.0
}
