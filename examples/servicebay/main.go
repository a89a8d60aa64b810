// Command servicebay chooses how fast to staff the four bays of an
// invented vehicle service centre by simulation optimisation, with SPSA and
// with Kiefer–Wolfowitz side by side.
//
// Each bay (tyres, oil, diagnostics, bodywork) is a single-server queue
// with Poisson arrivals at λ_i cars per hour and exponential service at the
// rate μ_i the manager buys, at c_i per unit of rate per hour. Every car in
// the centre costs h per hour in goodwill. The hourly cost is
//
//	Σ_i c_i·μ_i + h·L_i,   L_i = λ_i/(μ_i − λ_i)  (M/M/1, Kleinrock 1975),
//
// but the optimiser does not know this: it only sees the cost of one
// simulated day (200 cars per bay, Lindley's recursion). The closed form
// gives the truth to compare with, μ_i* = λ_i + √(h·λ_i/c_i).
//
// Both methods get the same measurement budget and common random numbers
// (the two days of a pair see the same cars). The rates are kept in a box
// λ_i + 0.25 ≤ μ_i ≤ λ_i + 10; the margin 0.25 exceeds the largest
// perturbation size c_0 = 0.2, so that no simulated day, not even at a
// perturbed rate μ ± c_k·Δ, has an overloaded bay.
package main

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"time"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

var (
	bays    = []string{"tyres", "oil", "diagnostics", "bodywork"}
	arrival = []float64{2, 3, 1.5, 4}   // λ_i, cars per hour
	price   = []float64{1, 2, 0.5, 1.5} // c_i, per unit of service rate per hour
	waiting = 3.0                       // h, per car-hour in the centre
	carsDay = 200                       // cars simulated per bay and day
	budget  = 16000                     // simulated days per method
	start   = []float64{3, 4, 2.5, 5}   // today's rates
)

// day simulates one day of every bay at rates mu and returns its hourly
// cost. Each bay starts in its stationary state (the first car's wait has
// P(W > t) = ρ·e^{−(μ−λ)t}), so the estimate of L_i is unbiased.
func day(mu []float64, rng *rand.Rand) (float64, error) {
	cost := 0.0
	for i, lam := range arrival {
		m := mu[i]
		rho := lam / m
		w := 0.0
		if u := rng.Float64(); u < rho {
			w = -math.Log(u/rho) / (m - lam)
		}
		sum := 0.0
		for range carsDay {
			s := rng.ExpFloat64() / m
			sum += w + s
			w = max(0, w+s-rng.ExpFloat64()/lam)
		}
		// Little's law: cars in the bay = λ · mean time in the bay.
		cost += price[i]*m + waiting*lam*sum/float64(carsDay)
	}
	return cost, nil
}

func main() {
	p := len(arrival)
	truth := make([]float64, p)
	box := sa.Box{Lower: make([]float64, p), Upper: make([]float64, p)}
	for i, lam := range arrival {
		truth[i] = lam + math.Sqrt(waiting*lam/price[i])
		box.Lower[i], box.Upper[i] = lam+0.25, lam+10
	}
	t0 := time.Now()
	type outcome struct {
		name string
		res  sa.Result
	}
	var runs []outcome
	for _, method := range []string{"SPSA", "Kiefer–Wolfowitz"} {
		// No gain is set: each run spends a short pilot at the start (counted
		// in its budget) on the size of its gradient estimates and the
		// curvature along them, and takes the robust constant step of
		// Nemirovski, Juditsky, Lan & Shapiro (2009) with averaging; the
		// second half of the steps is averaged. The perturbation sizes keep
		// the exponents of each method's own convergence conditions:
		// Spall's practical 0.101 for SPSA, 0.25 for Kiefer–Wolfowitz.
		var g oracle.Gradient
		var err error
		steps := budget / 2
		sizes := schedule.PowerSizes{Scale: 0.2, Exponent: schedule.SpallGamma}
		if method == "SPSA" {
			g, err = oracle.NewSPSA(oracle.ValueFunc(day), p, oracle.SPSASettings{Sizes: sizes, CommonRandomNumbers: true, Workers: 2})
		} else {
			steps = budget / (2 * p)
			sizes.Exponent = 0.25
			g, err = oracle.NewKieferWolfowitz(oracle.ValueFunc(day), p, oracle.KieferWolfowitzSettings{Sizes: sizes, CommonRandomNumbers: true, Workers: 2})
		}
		if err != nil {
			fmt.Fprintln(os.Stderr, err)
			os.Exit(1)
		}
		res, err := sa.RobbinsMonro(context.Background(), g, start, sa.Settings{
			MaxSteps: sa.NoLimit, MaxMeasurements: budget, BurnIn: steps / 2,
			Projection: box, Seed: 2026,
		})
		if err != nil {
			fmt.Fprintln(os.Stderr, method+":", err)
			os.Exit(1)
		}
		runs = append(runs, outcome{method, res})
	}
	fmt.Printf("service rates (cars/hour), averaged over the second half of each run\n\n")
	fmt.Printf("%-12s %6s %6s %10s %10s %10s\n", "bay", "λ", "price", "optimum", "SPSA", "KW")
	for i, b := range bays {
		fmt.Printf("%-12s %6.4g %6.4g %10.4g %10.4g %10.4g\n", b, arrival[i], price[i], truth[i],
			runs[0].res.Estimate()[i], runs[1].res.Estimate()[i])
	}
	fmt.Println()
	for _, r := range runs {
		e := 0.0
		for i, v := range r.res.Estimate() {
			e = max(e, math.Abs(v-truth[i]))
		}
		fmt.Printf("%-17s %5d steps, %5d simulated days, largest error %.3g\n", r.name+":", r.res.Steps, r.res.Measurements, e)
		if c := r.res.Calibration; c != nil {
			fmt.Printf("%17s gain: %s\n", "", c.How)
		}
	}
	fmt.Printf("\nclosed form μ* = λ + √(h·λ/c) with h = %g; time %.2g s\n", waiting, time.Since(t0).Seconds())
}
