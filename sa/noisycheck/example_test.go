package noisycheck_test

import (
	"fmt"
	"math/rand/v2"

	"github.com/stochroot/stochroot/sa/noisycheck"
)

// piHit is a small Monte Carlo routine of our own: 4·1{U² + V² ≤ 1} for
// uniform U, V has expectation π.
func piHit(rng *rand.Rand) float64 {
	u, v := rng.Float64(), rng.Float64()
	if u*u+v*v <= 1 {
		return 4
	}
	return 0
}

// A unit test would call noisycheck.Mean(t, piHit, math.Pi, 0.01,
// noisycheck.Options{}); the Example uses the error-returning form.
func Example() {
	err := noisycheck.CheckMean(piHit, 3.14159265, 0.02, noisycheck.Options{Seed: 1})
	fmt.Println("π:", err)
	err = noisycheck.CheckMean(piHit, 3.2, 0.02, noisycheck.Options{Seed: 1})
	fmt.Println("3.2 rejected:", err != nil)
	// Output:
	// π: <nil>
	// 3.2 rejected: true
}
