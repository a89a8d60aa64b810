package sampling_test

import (
	"fmt"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sampling"
)

// BenchmarkEpoch measures one epoch of mini-batch least-squares gradients
// (n = 10^6 rows, d = 10 columns, batches of m = 64, one worker) with each
// sampler, side by side in every iteration in a rotating order. Metrics:
// time of an epoch with the sampler / time of a Sequential epoch (same
// work), medians over the iterations: "shuffled/seq", "block64/seq",
// "block256/seq". Invented data (benchmark only).
func BenchmarkEpoch(b *testing.B) {
	const n, d, m = 1_000_000, 10, 64
	rng := rand.New(rand.NewPCG(1, 1))
	a := make([]float64, n*d)
	for i := range a {
		a[i] = rng.NormFloat64()
	}
	y := make([]float64, n)
	for i := range y {
		y[i] = a[i*d] + rng.NormFloat64()
	}
	model, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
	if err != nil {
		b.Fatal(err)
	}
	names := []string{"seq", "shuffled", "block64", "block256"}
	samplers := []sampling.Sampler{sampling.NewSequential(n), sampling.NewShuffled(n), sampling.NewBlockShuffled(n, 64), sampling.NewBlockShuffled(n, 256)}
	batches := make([]*oracle.MiniBatch, len(samplers))
	for k, s := range samplers {
		if batches[k], err = oracle.NewMiniBatch(model, s, m, oracle.BatchSettings{Workers: 1}); err != nil {
			b.Fatal(err)
		}
	}
	x, dst := make([]float64, d+1), make([]float64, d+1)
	b.Run(fmt.Sprintf("n=%d/d=%d/m=%d", n, d, m), func(b *testing.B) {
		b.ReportAllocs()
		ratios := make([][]float64, len(samplers))
		for k := range ratios {
			ratios[k] = make([]float64, 0, 1024)
		}
		times := make([]float64, len(samplers))
		it := 0
		for b.Loop() {
			for r := range samplers {
				k := (r + it) % len(samplers)
				t0 := time.Now()
				for range n / m {
					_ = batches[k].Measure(dst, x, rng)
				}
				times[k] = time.Since(t0).Seconds()
			}
			for k := range samplers {
				ratios[k] = append(ratios[k], times[k]/times[0])
			}
			it++
		}
		for k := 1; k < len(samplers); k++ {
			slices.Sort(ratios[k])
			b.ReportMetric(ratios[k][len(ratios[k])/2], names[k]+"/seq")
		}
	})
}
