package sa_test

import (
	"context"
	"fmt"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sampling"
	"github.com/stochroot/stochroot/schedule"
)

// ExampleMinimizeSum fits y = 2 + 3·t by SGD (batch 1), mini-batch
// gradient descent (batch 50) and batch gradient descent (every sample)
// with the one driver; only the batch oracle differs.
func ExampleMinimizeSum() {
	rng := rand.New(rand.NewPCG(1, 2))
	n := 1000
	t := make([]float64, n)
	y := make([]float64, n)
	for i := range n {
		t[i] = 10 * rng.Float64()
		y[i] = 2 + 3*t[i] + 0.5*rng.NormFloat64()
	}
	model, err := oracle.NewLeastSquares(oracle.Dense{Data: t, Cols: 1}, y, oracle.RegressionSettings{Standardize: true})
	if err != nil {
		panic(err)
	}
	sgd, _ := oracle.NewMiniBatch(model, sampling.NewShuffled(n), 1, oracle.BatchSettings{})
	mbgd, _ := oracle.NewMiniBatch(model, sampling.NewShuffled(n), 50, oracle.BatchSettings{})
	bgd, _ := oracle.NewFullBatch(model, oracle.BatchSettings{})

	// Decreasing gains with averaging after a burn-in of two epochs for
	// the stochastic methods (a batch of 50 is less noisy and takes a
	// larger gain); a constant gain for the exact gradient (on
	// standardised data with intercept the Hessian is the identity).
	sgdSet := sa.Settings{Gain: schedule.Power{Scale: 0.2, Exponent: 0.6}, MaxEpochs: 20, MaxSteps: sa.NoLimit, BurnIn: 2 * n}
	mbgdSet := sa.Settings{Gain: schedule.Power{Scale: 0.8, Exponent: 0.6}, MaxEpochs: 20, MaxSteps: sa.NoLimit, BurnIn: 2 * n / 50}
	bgdSet := sa.Settings{Gain: schedule.Constant(0.5), MaxEpochs: 50, MaxSteps: sa.NoLimit}
	for _, run := range []struct {
		name string
		g    *oracle.MiniBatch
		s    sa.Settings
	}{{"SGD", sgd, sgdSet}, {"MBGD", mbgd, mbgdSet}, {"BGD", bgd, bgdSet}} {
		res, err := sa.MinimizeSum(context.Background(), run.g, []float64{0, 0}, run.s)
		if err != nil {
			panic(err)
		}
		est := res.Estimate() // the average for SGD and MBGD
		if run.name == "BGD" {
			est = res.X
		}
		b := model.ToOriginal(make([]float64, 2), est)
		fmt.Printf("%-4s steps %5d, epochs %.4g: y = %.4g + %.4g·t (%v)\n", run.name, res.Steps, res.Epochs, b[0], b[1], res.Reason)
	}
	// Output:
	// SGD  steps 20000, epochs 20: y = 1.998 + 3.003·t (epoch budget reached)
	// MBGD steps   400, epochs 20: y = 1.998 + 3.003·t (epoch budget reached)
	// BGD  steps    50, epochs 50: y = 1.998 + 3.003·t (epoch budget reached)
}
