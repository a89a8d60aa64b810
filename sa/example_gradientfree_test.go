package sa_test

import (
	"context"
	"fmt"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// SPSA minimisation of a noisy cost inside a ball: the unconstrained
// minimum (2, 2) lies outside the ball of radius 1, so the answer is
// (0.7071, 0.7071) on its boundary and the constraint is active.
func Example_spsa() {
	cost := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		dx, dy := x[0]-2, x[1]-2
		return dx*dx + dy*dy + 0.1*rng.NormFloat64(), nil
	})
	c := schedule.PowerSizes{Scale: 0.1, Exponent: schedule.SpallGamma}
	gain := schedule.Power{Scale: 0.2, Offset: 100, Exponent: schedule.SpallAlpha}
	fmt.Println(schedule.CheckSPSA(gain, c).Convergent())
	g, err := oracle.NewSPSA(cost, 2, oracle.SPSASettings{Sizes: c, CommonRandomNumbers: true})
	if err != nil {
		panic(err)
	}
	res, err := sa.RobbinsMonro(context.Background(), g, []float64{0, 0}, sa.Settings{
		Gain:       gain,
		MaxSteps:   2000,
		Projection: sa.Ball{Radius: 1},
		Seed:       1,
	})
	if err != nil {
		panic(err)
	}
	fmt.Printf("x = %.4g, active %v, %d measurements\n", res.X, res.Active, res.Measurements)
	// Output:
	// true
	// x = [0.7071 0.7071], active true, 4000 measurements
}

// SPSA with the gain left nil: a pilot at x0 (counted in the budget)
// measures the gradient's size and noise and the curvature along it, and
// the run takes the robust constant step D̂/(M̂·√N) for its N remaining
// steps, with averaging. The answer is (2, −1); the average of a constant
// step carries the start's transient, a bias of order 1/√N.
func Example_spsaDefaultGain() {
	cost := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		dx, dy := x[0]-2, x[1]+1
		return dx*dx + 3*dy*dy + 0.1*rng.NormFloat64(), nil
	})
	c := schedule.PowerSizes{Scale: 0.1, Exponent: schedule.SpallGamma}
	g, err := oracle.NewSPSA(cost, 2, oracle.SPSASettings{Sizes: c})
	if err != nil {
		panic(err)
	}
	res, err := sa.RobbinsMonro(context.Background(), g, []float64{0, 0}, sa.Settings{
		MaxMeasurements: 20000, // no Gain: the run chooses it for this budget
		Seed:            1,
	})
	if err != nil {
		panic(err)
	}
	cal := res.Calibration
	fmt.Printf("estimate %.2f, %d measurements (pilot %d)\n", res.Estimate(), res.Measurements, cal.PilotMeasurements)
	fmt.Printf("%T %.2g\n", cal.Gain, cal.Gain.Gain(0))
	// Output:
	// estimate [1.98 -0.99], 20000 measurements (pilot 424)
	// schedule.Constant 0.0035
}
