// Command bottling tunes the valve-open times of a two-nozzle filling line
// from bottle weights and reports each answer with a 95% confidence
// interval.
//
// The scenario (invented for this demo): one filler fills 500 ml and 330 ml
// bottles from a shared manifold. Nozzle j delivers q_j ml/s while open,
// less when the other nozzle's longer cycle draws the manifold down:
//
//	mean fill 1 = 210·t₁·(1 − 0.08·t₂),   mean fill 2 = 180·t₂·(1 − 0.05·t₁)
//
// and every weighed bottle adds ±4 ml of foam and scale noise. Robbins–Monro
// moves the open times t by the fill errors of the bottles just weighed
// (Y = fill − target, in ml), the Polyak–Ruppert average is the answer, and
// random scaling gives its error bars; the run stops once both intervals are
// within ±0.3 ms. Twenty independent runs then give a second, independent
// interval. A trace of the first run is written as CSV and two PNG plots.
//
// On a real line: keep the open times inside hard limits (the Box below),
// start from the current recipe, watch fills while the tuner runs, and keep
// a manual override; a drifting scale moves the valves as confidently as a
// true error does.
package main

import (
	"context"
	"fmt"
	"log"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sa/saplot"
	"github.com/stochroot/stochroot/schedule"
)

var target = [2]float64{500, 330} // ml

// meanFill is the filler's mean delivery (ml) for open times t (s).
func meanFill(dst, t []float64) {
	dst[0] = 210 * t[0] * (1 - 0.08*t[1])
	dst[1] = 180 * t[1] * (1 - 0.05*t[0])
}

// weigh measures one bottle of each size: fill error in ml.
func weigh(dst, t []float64, rng *rand.Rand) error {
	meanFill(dst, t)
	for i := range dst {
		dst[i] += 4*rng.NormFloat64() - target[i]
	}
	return nil
}

// truth solves meanFill(t) = target with Newton's method on the noiseless
// model (known here only because the line is simulated).
func truth() []float64 {
	t := []float64{2, 2}
	f := make([]float64, 2)
	for range 50 {
		meanFill(f, t)
		f[0] -= target[0]
		f[1] -= target[1]
		j00, j01 := 210*(1-0.08*t[1]), -210*0.08*t[0]
		j10, j11 := -180*0.05*t[1], 180*(1-0.05*t[0])
		det := j00*j11 - j01*j10
		t[0] -= (j11*f[0] - j01*f[1]) / det
		t[1] -= (-j10*f[0] + j00*f[1]) / det
	}
	return t
}

func settings(seed uint64) sa.Settings {
	return sa.Settings{
		// Fill rate ≈ 130–200 ml/s: Scale·slope ≈ 1 keeps the batches of the
		// error bars long against the memory of the iterates.
		Gain:       schedule.Power{Scale: 0.008, Offset: 10, Exponent: 0.6},
		MaxSteps:   200_000,
		BurnIn:     1000, // leave the approach from the old recipe out of the average
		Projection: sa.Box{Lower: []float64{0.5, 0.5}, Upper: []float64{5, 5}},
		Precision:  &sa.Precision{Absolute: 0.0003},
		Seed:       seed,
	}
}

func main() {
	ctx := context.Background()
	field := oracle.FieldFunc(weigh)
	start := []float64{2.0, 1.5} // the current recipe
	want := truth()

	s := settings(1)
	s.Trace = &sa.Tracing{Every: 20}
	r, err := sa.RobbinsMonro(ctx, field, start, s)
	if err != nil {
		log.Fatal(err)
	}
	fmt.Printf("one run: %d bottle pairs weighed, stopped: %v\n", r.Measurements, r.Reason)
	e := r.ErrorBars
	if err := e.Err(); err != nil {
		log.Fatal(err)
	}
	for i, name := range []string{"500 ml nozzle", "330 ml nozzle"} {
		fmt.Printf("  %s: open %.5f s ± %.5f s (95%%, %s)   truth %.5f s, error %+.5f s\n",
			name, r.Average[i], e.HalfWidth[i], e.Method, want[i], r.Average[i]-want[i])
	}
	if e.Covariance != nil {
		c := e.Covariance
		fmt.Printf("  correlation of the two estimates: %.2f\n", c.At(0, 1)/math.Sqrt(c.At(0, 0)*c.At(1, 1)))
	}

	rep, err := sa.Replicate(ctx, sa.Replications{Runs: 20, Seed: 2},
		func(ctx context.Context, _ int, seed uint64) (sa.Result, error) {
			s := settings(seed)
			s.Precision = nil
			s.MaxSteps = 20_000
			return sa.RobbinsMonro(ctx, field, start, s)
		})
	if err != nil {
		log.Fatal(err)
	}
	re := rep.ErrorBars
	fmt.Printf("20 independent runs of 20000 pairs each (mean, 95%% t interval):\n")
	for i := range re.Center {
		fmt.Printf("  t_%d = %.5f s ± %.5f s   truth %.5f s, error %+.5f s\n", i+1, re.Center[i], re.HalfWidth[i], want[i], re.Center[i]-want[i])
	}

	dir := filepath.Join(os.TempDir(), "stochroot-bottling")
	if err := os.MkdirAll(dir, 0o755); err != nil {
		log.Fatal(err)
	}
	csvPath := filepath.Join(dir, "trace.csv")
	f, err := os.Create(csvPath)
	if err != nil {
		log.Fatal(err)
	}
	if err := r.Trace.WriteCSV(f); err != nil {
		log.Fatal(err)
	}
	if err := f.Close(); err != nil {
		log.Fatal(err)
	}
	distPath := filepath.Join(dir, "distance.png")
	if err := saplot.Distance(distPath, r.Trace, want, saplot.Options{Quantity: "the valve open times", Unit: "s"}); err != nil {
		log.Fatal(err)
	}
	estPath := filepath.Join(dir, "nozzle1.png")
	if err := saplot.Estimate(estPath, r.Trace, 0, want, saplot.Options{Quantity: "500 ml nozzle open time", Unit: "s"}); err != nil {
		log.Fatal(err)
	}
	fmt.Printf("wrote %s, %s and %s\n", csvPath, distPath, estPath)
	fmt.Println("assumes:", e.Assumes)
}
