package oracle_test

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"time"

	"github.com/stochroot/stochroot/oracle"
)

// A measurement that can take long (here a simulated queue that takes a
// while to run) watches the run's context and gives up when it is done.
// The drivers of package sa pass their context and the step index to
// every measurement of a ContextField.
func ExampleContextFieldFunc() {
	slowQueue := oracle.ContextFieldFunc(func(ctx context.Context, k int, dst, x []float64, rng *rand.Rand) error {
		select {
		case <-time.After(time.Second): // the simulation's running time
		case <-ctx.Done():
			return ctx.Err()
		}
		dst[0] = x[0] - 0.8 + 0.1*rng.NormFloat64()
		return nil
	})
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Millisecond)
	defer cancel()
	dst := make([]float64, 1)
	err := oracle.MeasureStep(ctx, slowQueue, 0, dst, []float64{1}, rand.New(rand.NewPCG(1, 2)))
	fmt.Println(errors.Is(err, context.DeadlineExceeded))
	// Output: true
}
