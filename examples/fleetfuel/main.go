// Command fleetfuel calibrates a delivery fleet's fuel-use model from a
// million synthetic trip records and compares the finite-sum methods of
// stochroot on it: SGD (one trip per step), mini-batch gradient descent
// with two batch sizes, and batch gradient descent (every trip every
// step). Each method's coefficients are compared with the exact
// least-squares answer from gonum's QR factorisation.
//
// With a million trips in eight well-conditioned (standardised)
// dimensions, one exact gradient is cheap and batch gradient descent is
// both the fastest and the most accurate; the stochastic methods trade an
// error of the order of the statistical error of the fit itself (compare
// "exact LS" with "truth") for steps whose cost does not grow with the
// number of trips.
//
// The scenario and its numbers are invented for this demo.
package main

import (
	"context"
	"fmt"
	"log"
	"math"
	"math/rand/v2"
	"time"

	"gonum.org/v1/gonum/mat"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sampling"
	"github.com/stochroot/stochroot/schedule"
)

// The trip record: what the telematics box reports per trip.
var features = []string{"distance km", "payload t", "stops", "climb m", "idle min", "headwind km/h", "cold start"}

// truth is the fuel model the synthetic trips are drawn from: litres =
// truth[0] + Σ truth[j+1]·feature_j + noise.
var truth = []float64{0.6, 0.115, 0.42, 0.05, 0.0021, 0.028, 0.009, 0.35}

func trips(n int, rng *rand.Rand) (x, fuel []float64) {
	p := len(features)
	x = make([]float64, n*p)
	fuel = make([]float64, n)
	for i := range n {
		dist := 5 + 295*rng.Float64()*rng.Float64()
		r := x[i*p : (i+1)*p]
		r[0] = dist
		r[1] = 0.5 + 11*rng.Float64()                     // payload
		r[2] = math.Floor(2 + dist/60 + 12*rng.Float64()) // stops
		r[3] = math.Abs(300 * rng.NormFloat64())          // climb
		r[4] = math.Max(0, 3+2*rng.NormFloat64()+r[2]/8)  // idling, partly at stops
		r[5] = 12 * rng.NormFloat64()
		if rng.Float64() < 0.2 {
			r[6] = 1
		}
		f := truth[0]
		for j, v := range r {
			f += truth[j+1] * v
		}
		fuel[i] = f + (0.3+0.01*dist)*rng.NormFloat64()
	}
	return x, fuel
}

func main() {
	const n = 1_000_000
	p := len(features)
	rng := rand.New(rand.NewPCG(2026, 12))
	x, fuel := trips(n, rng)

	// Exact least squares: QR of the n×(p+1) design [1 x].
	start := time.Now()
	design := mat.NewDense(n, p+1, nil)
	for i := range n {
		design.Set(i, 0, 1)
		for j := range p {
			design.Set(i, j+1, x[i*p+j])
		}
	}
	var qr mat.QR
	qr.Factorize(design)
	var exact mat.VecDense
	if err := qr.SolveVecTo(&exact, false, mat.NewVecDense(n, fuel)); err != nil {
		log.Fatal(err)
	}
	fmt.Printf("%d trips, %d features; exact least squares (gonum QR) in %v\n\n", n, p, time.Since(start).Round(time.Millisecond))

	// The raw columns span four orders of magnitude (climb in metres,
	// cold start 0/1), so the model works on standardised columns and maps
	// the coefficients back to litres per unit.
	model, err := oracle.NewLeastSquares(oracle.Dense{Data: x, Cols: p}, fuel, oracle.RegressionSettings{Standardize: true})
	if err != nil {
		log.Fatal(err)
	}

	type method struct {
		name   string
		batch  int // 0: full batch
		gain   schedule.Schedule
		epochs int
	}
	methods := []method{
		{"SGD", 1, schedule.Power{Scale: 0.02, Exponent: 0.6}, 2},
		{"MBGD", 64, schedule.Power{Scale: 0.3, Exponent: 0.6}, 3},
		{"MBGD", 1024, schedule.Power{Scale: 0.5, Exponent: 0.5}, 4},
		// Standardised columns make the Hessian the correlation matrix of
		// the trip features, whose largest eigenvalue is below 3 here: a
		// constant gain of 0.5 is stable.
		{"BGD", 0, schedule.Constant(0.5), 60},
		// No gain: the run takes its step from the data (R² and the
		// largest curvature of the standardised columns) and says how.
		{"auto", 64, nil, 3},
	}
	want := exact.RawVector().Data
	// The objective at the exact answer, for the excess loss of each method
	// (mean squared-error loss ½(fit − litres)², in litres²).
	best := model.Value(model.FromOriginal(make([]float64, p+1), want))
	fmt.Printf("%-6s %6s %9s %12s %7s %9s %12s %12s\n", "method", "batch", "steps", "gradients", "epochs", "time", "max rel err", "excess loss")
	results := make([][]float64, len(methods))
	for k, m := range methods {
		var g *oracle.MiniBatch
		if m.batch == 0 {
			g, err = oracle.NewFullBatch(model, oracle.BatchSettings{})
		} else {
			g, err = oracle.NewMiniBatch(model, sampling.NewShuffled(n), m.batch, oracle.BatchSettings{})
		}
		if err != nil {
			log.Fatal(err)
		}
		s := sa.Settings{Gain: m.gain, MaxSteps: sa.NoLimit, MaxEpochs: m.epochs, Seed: 7}
		if m.batch != 0 && m.gain != nil {
			s.BurnIn = n / m.batch / 2 // average from the middle of the first epoch
		}
		start := time.Now()
		res, err := sa.MinimizeSum(context.Background(), g, make([]float64, p+1), s)
		elapsed := time.Since(start)
		g.Close()
		if err != nil {
			log.Fatal(err)
		}
		est := res.X
		if m.batch != 0 {
			est = res.Estimate()
		}
		if res.Calibration != nil {
			defer fmt.Printf("\nauto: %s\n  (%s; %s)\n", res.Calibration.How, res.Calibration.Method, res.Calibration.Source)
		}
		coef := model.ToOriginal(make([]float64, p+1), est)
		results[k] = coef
		batch := fmt.Sprint(m.batch)
		if m.batch == 0 {
			batch = "all"
		}
		fmt.Printf("%-6s %6s %9d %12d %7.3g %9v %12.2e %12.2e\n", m.name, batch, res.Steps, res.Measurements, res.Epochs, elapsed.Round(time.Millisecond), maxRelErr(coef, want), model.Value(est)-best)
	}

	fmt.Printf("\nmax rel err: largest |coefficient − exact|/|exact|; excess loss: objective minus its minimum %.4g\n", best)
	fmt.Printf("\n%-14s %9s %10s %10s %10s %10s %10s %10s\n", "coefficient", "truth", "exact LS", "SGD", "MBGD-64", "MBGD-1024", "BGD", "auto-64")
	for j := range p + 1 {
		name := "intercept L"
		if j > 0 {
			name = features[j-1]
		}
		fmt.Printf("%-14s %9.4g %10.4g", name, truth[j], want[j])
		for k := range methods {
			fmt.Printf(" %10.4g", results[k][j])
		}
		fmt.Println()
	}
}

func maxRelErr(got, want []float64) float64 {
	m := 0.0
	for j := range got {
		m = math.Max(m, math.Abs(got[j]-want[j])/math.Abs(want[j]))
	}
	return m
}
