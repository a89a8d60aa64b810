package sa_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sampling"
	"github.com/stochroot/stochroot/schedule"
)

// Benchmarks of the finite-sum path against hand-written loops over
// gonum's floats kernels, side by side in one run. Compare each "api"
// sub-benchmark with its "baseline" sibling (ratios in the issue notes):
//
//	go test -run '^$' -bench 'SGDStep|FullBatchPass|MiniBatchWorkers' ./sa/

func benchData(n, d int) (a, y []float64) {
	rng := rand.New(rand.NewPCG(1, 2))
	a = make([]float64, n*d)
	y = make([]float64, n)
	for i := range a {
		a[i] = rng.NormFloat64()
	}
	for i := range y {
		y[i] = rng.NormFloat64()
	}
	return a, y
}

// sgdBenchSteps is the number of SGD steps per benchmark op; the fixed
// cost of starting a run (a few small allocations) is spread over them.
const sgdBenchSteps = 4096

// BenchmarkSGDStep compares SGD on least squares through the public API
// (MinimizeSum with a batch-1 MiniBatch, no averaging) with the
// hand-written loop: draw an index, r = b₀ + a_i·β − y_i (floats.Dot),
// b₀ −= a_k·r, β −= a_k·r·a_i (floats.AddScaled). One op is
// sgdBenchSteps steps; ns/step is reported.
func BenchmarkSGDStep(b *testing.B) {
	for _, d := range []int{10, 100, 1000} {
		n := 2000
		a, y := benchData(n, d)
		gain := schedule.Power{Scale: 1e-3, Exponent: 1}
		b.Run(fmt.Sprintf("d=%d/api", d), func(b *testing.B) {
			m, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
			if err != nil {
				b.Fatal(err)
			}
			g, err := oracle.NewMiniBatch(m, sampling.NewUniform(n), 1, oracle.BatchSettings{})
			if err != nil {
				b.Fatal(err)
			}
			x0 := make([]float64, d+1)
			s := sa.Settings{Gain: gain, MaxSteps: sgdBenchSteps, BurnIn: sgdBenchSteps}
			b.ReportAllocs()
			for b.Loop() {
				if _, err := sa.MinimizeSum(context.Background(), g, x0, s); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/sgdBenchSteps, "ns/step")
		})
		b.Run(fmt.Sprintf("d=%d/baseline", d), func(b *testing.B) {
			x := make([]float64, d+1)
			rng := rand.New(rand.NewPCG(1, 0x5eed_0301))
			b.ReportAllocs()
			for b.Loop() {
				clear(x)
				for k := range sgdBenchSteps {
					i := rng.IntN(n)
					row := a[i*d : (i+1)*d]
					r := x[0] + floats.Dot(row, x[1:]) - y[i]
					ak := gain.Scale / float64(k+1)
					x[0] -= ak * r
					floats.AddScaled(x[1:], -ak*r, row)
				}
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/sgdBenchSteps, "ns/step")
		})
	}
}

// BenchmarkFullBatchPass compares one full-batch least-squares gradient
// (on one goroutine) with a streaming read of the same data by
// floats.Sum, at n·d = 10⁷; both report MB/s of the data matrix.
func BenchmarkFullBatchPass(b *testing.B) {
	for _, d := range []int{10, 100, 1000} {
		n := 10_000_000 / d
		a, y := benchData(n, d)
		b.Run(fmt.Sprintf("d=%d/api", d), func(b *testing.B) {
			m, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
			if err != nil {
				b.Fatal(err)
			}
			g, err := oracle.NewFullBatch(m, oracle.BatchSettings{Workers: 1})
			if err != nil {
				b.Fatal(err)
			}
			x := make([]float64, d+1)
			dst := make([]float64, d+1)
			b.SetBytes(int64(8 * n * d))
			b.ReportAllocs()
			for b.Loop() {
				g.Measure(dst, x, nil)
			}
		})
		b.Run(fmt.Sprintf("d=%d/baseline", d), func(b *testing.B) {
			b.SetBytes(int64(8 * n * d))
			b.ReportAllocs()
			var s float64
			for b.Loop() {
				s += floats.Sum(a)
			}
			sink = s
		})
	}
}

var sink float64

// BenchmarkMiniBatchWorkers measures one mini-batch gradient of 4096
// samples at d = 100 (drawn with replacement from n = 100 000) on 1 and
// on 2 worker goroutines.
func BenchmarkMiniBatchWorkers(b *testing.B) {
	n, d := 100_000, 100
	a, y := benchData(n, d)
	m, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
	if err != nil {
		b.Fatal(err)
	}
	for _, w := range []int{1, 2} {
		b.Run(fmt.Sprintf("workers=%d", w), func(b *testing.B) {
			g, err := oracle.NewMiniBatch(m, sampling.NewUniform(n), 4096, oracle.BatchSettings{Workers: w})
			if err != nil {
				b.Fatal(err)
			}
			defer g.Close()
			x := make([]float64, d+1)
			dst := make([]float64, d+1)
			rng := rand.New(rand.NewPCG(1, 2))
			g.Measure(dst, x, rng) // start the workers
			b.ReportAllocs()
			for b.Loop() {
				g.Measure(dst, x, rng)
			}
		})
	}
}
