// Command kiln finds the firing temperature at which 90% of glazed tiles
// pass inspection, when each measurement is one test firing that either
// passes or fails.
//
// The scenario is invented for this demo: the kiln's pass probability at
// peak temperature T (°C) is logistic, P(pass | T) = 1/(1 + e^{−(T−1180)/12}),
// which the program uses only to simulate firings and to print the true
// answer T* = 1180 + 12·ln 9 ≈ 1206.4 °C. The search sees nothing but
// pass/fail outcomes.
//
// Robbins–Monro looks for the root of h(T) = P(pass | T) − 0.9, measured by
// 1{tile passed} − 0.9, with a decreasing gain and Polyak–Ruppert averaging,
// and the kiln's safe range [1100, 1300] °C as a box constraint.
package main

import (
	"context"
	"fmt"
	"log"
	"math"
	"math/rand/v2"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

const (
	target = 0.90   // required pass rate
	centre = 1180.0 // °C, 50% pass temperature of the simulated kiln
	width  = 12.0   // °C, logistic scale of the simulated kiln
)

// fireTile simulates one test firing at temperature t and returns
// 1{passed} − target.
func fireTile(t float64, rng *rand.Rand) (float64, error) {
	pass := 1 / (1 + math.Exp(-(t-centre)/width))
	if rng.Float64() < pass {
		return 1 - target, nil
	}
	return -target, nil
}

func main() {
	truth := centre + width*math.Log(target/(1-target))
	// Scale ≈ 1/slope at the answer (the slope is 0.9·0.1/12 per °C); the
	// exponent 0.6 keeps the iterates' memory short enough that 10^4
	// firings span the 15 noise memories the error bars wait for (with 0.7
	// they span about 8, and the bars would wait until about 10^6).
	gain := schedule.Power{Scale: 150, Exponent: 0.6}
	fmt.Println("Kiln temperature for a 90% pass rate, from pass/fail test firings")
	fmt.Printf("gain a_k = 150/(k+1)^0.6: %v\n\n", schedule.Check(gain))
	fmt.Printf("%10s  %14s  %14s  %14s  %10s\n", "firings", "last T (°C)", "averaged T", "95% interval", "error")
	for _, budget := range []int{1000, 10000, 100000, 1000000} {
		res, err := sa.RobbinsMonro(context.Background(), oracle.Scalar(fireTile), []float64{1150}, sa.Settings{
			Gain:            gain,
			MaxMeasurements: budget,
			MaxSteps:        sa.NoLimit,
			BurnIn:          budget / 10,
			Projection:      sa.Box{Lower: []float64{1100}, Upper: []float64{1300}},
			Seed:            2026,
		})
		if err != nil {
			log.Fatal(err)
		}
		est := res.Average[0]
		// Error bars of the average (random scaling, the default), once the
		// run has settled: the averaged firings must span 15 noise memories.
		ci := "not yet"
		if eb := res.ErrorBars; eb.Available {
			ci = fmt.Sprintf("± %.2f", eb.HalfWidth[0])
		}
		fmt.Printf("%10d  %14.2f  %14.2f  %14s  %+10.2f\n", res.Measurements, res.X[0], est, ci, est-truth)
	}
	fmt.Printf("\ntrue temperature (known only to the simulation): %.2f °C\n", truth)
	// Asymptotic standard error of the averaged estimate, √(p(1−p)/n)/h'(T*),
	// with h'(T*) = p(1−p)/width for the logistic curve (Polyak & Juditsky 1992).
	slope := target * (1 - target) / width
	fmt.Printf("theory: standard error ≈ %.2f °C after 10^6 firings\n", math.Sqrt(target*(1-target)/9e5)/slope)
}
