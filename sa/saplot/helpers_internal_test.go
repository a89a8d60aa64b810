package saplot

import (
	"context"
	"math/rand/v2"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

func debugTrace(t testing.TB) (*sa.Trace, []float64) {
	root := []float64{2, -1}
	h := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
		for i := range dst {
			dst[i] = x[i] - root[i] + rng.NormFloat64()
		}
		return nil
	})
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{0, 0}, sa.Settings{
		Gain: schedule.Power{Scale: 1, Exponent: 0.6}, MaxSteps: 20000, Seed: 3,
		Trace: &sa.Tracing{Every: 10},
	})
	if err != nil {
		t.Fatal(err)
	}
	return r.Trace, root
}
