package oracle_test

import (
	"fmt"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
)

// A noisy scalar measurement written as a closure: the share of test
// firings that pass when the kiln runs at temperature x (a demo model).
func ExampleScalar() {
	passRate := oracle.Scalar(func(x float64, rng *rand.Rand) (float64, error) {
		if rng.Float64() < 1/(1+0.01*(1200-x)*(1200-x)) {
			return 1, nil
		}
		return 0, nil
	})
	dst := make([]float64, 1)
	rng := rand.New(rand.NewPCG(1, 2))
	sum := 0.0
	for range 1000 {
		_ = passRate.Measure(dst, []float64{1195}, rng)
		sum += dst[0]
	}
	fmt.Printf("pass rate at 1195 ≈ %.2f\n", sum/1000)
	// Output: pass rate at 1195 ≈ 0.79
}
