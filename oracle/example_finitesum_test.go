package oracle_test

import (
	"fmt"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sampling"
)

// ExampleNewMiniBatch builds a logistic-regression finite sum and measures
// its gradient at x = 0 on a mini-batch of 8 samples and on the full batch.
func ExampleNewMiniBatch() {
	rows := [][]float64{{0.5}, {1.5}, {-1}, {2}, {-0.5}, {0.2}, {-2}, {1}, {0.7}, {-1.2}}
	labels := []float64{1, 1, 0, 1, 0, 1, 0, 1, 0, 0}
	data, err := oracle.DenseFromRows(rows)
	if err != nil {
		panic(err)
	}
	model, err := oracle.NewLogistic(data, labels, oracle.RegressionSettings{})
	if err != nil {
		panic(err)
	}
	mb, err := oracle.NewMiniBatch(model, sampling.NewShuffled(model.Len()), 8, oracle.BatchSettings{})
	if err != nil {
		panic(err)
	}
	full, err := oracle.NewFullBatch(model, oracle.BatchSettings{})
	if err != nil {
		panic(err)
	}
	x := []float64{0, 0} // intercept, slope
	g := make([]float64, 2)
	rng := rand.New(rand.NewPCG(1, 2))
	mb.Measure(g, x, rng)
	fmt.Printf("mini-batch gradient %.4g (%d sample gradients)\n", g, mb.Evaluations())
	full.Measure(g, x, nil)
	fmt.Printf("full gradient       %.4g, objective %.4g\n", g, model.Value(x))
	// Output:
	// mini-batch gradient [0.125 -0.5] (8 sample gradients)
	// full gradient       [0 -0.46], objective 0.6931
}
