package sa_test

import (
	"context"
	"fmt"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
)

// A run without a gain: the pilot estimates the slope (here 250, unknown
// to the caller) and the run uses the averaged gain (1/ŝ)/(k+1)^0.7. The
// pilot's measurements count against MaxSteps.
func ExampleCalibration() {
	h := oracle.Scalar(func(x float64, rng *rand.Rand) (float64, error) {
		return 250*(x-1.5) + 10*rng.NormFloat64(), nil
	})
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{0}, sa.Settings{MaxSteps: 5000, Seed: 1})
	if err != nil {
		panic(err)
	}
	c := r.Calibration
	fmt.Printf("root %.3f\n", r.Estimate()[0])
	fmt.Printf("slope %.0f from a pilot of %d calls, then %d steps\n", c.Slope, c.PilotCalls, r.Steps)
	fmt.Println(c.Method)
	// Output:
	// root 1.500
	// slope 229 from a pilot of 160 calls, then 4840 steps
	// pilot slope by symmetric differences along random directions, then the averaged gain (1/ŝ)/(k+1)^0.7
}
