package oracle_test

import (
	"fmt"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/schedule"
)

// A noisy cost whose noise is drawn from the stream each measurement gets:
// with common random numbers the two measurements of a pair see the same
// noise, and on this linear cost it cancels exactly.
func ExampleNewKieferWolfowitz() {
	cost := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		return 3*x[0] - 2*x[1] + rng.NormFloat64(), nil
	})
	g, err := oracle.NewKieferWolfowitz(cost, 2, oracle.KieferWolfowitzSettings{
		Sizes:               schedule.PowerSizes{Scale: 0.5, Exponent: 0.25},
		CommonRandomNumbers: true,
	})
	if err != nil {
		panic(err)
	}
	grad := make([]float64, 2)
	g.SetStep(0)
	if err := g.Measure(grad, []float64{1, 1}, rand.New(rand.NewPCG(1, 2))); err != nil {
		panic(err)
	}
	fmt.Printf("gradient %.4g using %d measurements\n", grad, g.MeasurementsPerCall())
	// Output: gradient [3 -2] using 4 measurements
}

// SPSA estimates all coordinates from two measurements, whatever the
// dimension; averaging q perturbations reduces its variance.
func ExampleNewSPSA() {
	cost := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		s := 0.0
		for _, v := range x {
			s += v * v
		}
		return s + 0.01*rng.NormFloat64(), nil
	})
	g, err := oracle.NewSPSA(cost, 4, oracle.SPSASettings{
		Sizes:         schedule.PowerSizes{Scale: 0.1, Exponent: schedule.SpallGamma},
		Perturbations: 200,
		Workers:       2, // the same result as with 1 worker, bit for bit
	})
	if err != nil {
		panic(err)
	}
	grad := make([]float64, 4)
	if err := g.Measure(grad, []float64{1, -1, 0.5, 0}, rand.New(rand.NewPCG(1, 2))); err != nil {
		panic(err)
	}
	fmt.Printf("gradient ≈ %.4g (true [2 -2 1 0]) using %d measurements\n", grad, g.MeasurementsPerCall())
	// Output: gradient ≈ [2.128 -1.952 0.8364 0.1122] (true [2 -2 1 0]) using 400 measurements
}
