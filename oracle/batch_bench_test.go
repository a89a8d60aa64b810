package oracle_test

import (
	"fmt"
	"math/rand/v2"
	"runtime"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sampling"
)

// benchData returns n×d standard normal features and targets from a
// linear model with noise (invented data for benchmarks only).
func benchData(n, d int) (a, y []float64) {
	rng := rand.New(rand.NewPCG(uint64(n), uint64(d)))
	a = make([]float64, n*d)
	for i := range a {
		a[i] = rng.NormFloat64()
	}
	y = make([]float64, n)
	for i := range y {
		y[i] = a[i*d] + rng.NormFloat64()
	}
	return a, y
}

// naiveFull is the baseline of a full-batch least-squares gradient with an
// intercept: one dot product and one axpy per row with gonum's floats
// kernels, the loop a careful user would write.
func naiveFull(dst, x, a, y []float64, d int) {
	n := len(y)
	w := 1 / float64(n)
	clear(dst)
	beta, g := x[1:], dst[1:]
	for i := range n {
		row := a[i*d : (i+1)*d]
		r := w * (floats.Dot(row, beta) + x[0] - y[i])
		dst[0] += r
		floats.AddScaled(g, r, row)
	}
}

// median returns the median of v (which it sorts).
func median(v []float64) float64 {
	slices.Sort(v)
	return v[len(v)/2]
}

// BenchmarkFullBatchPass measures one full-batch least-squares gradient
// over at least 128 MiB of data at several row widths d, side by side in
// every iteration with
//   - floats.Sum over the same bytes (streaming-read bandwidth of one
//     goroutine): metric "bw-frac" = time(Sum) / time(library, 1 worker),
//     the fraction of that bandwidth the pass reaches;
//   - the naive per-row dot+axpy loop (naiveFull): metric "vs-naive" =
//     time(naive) / time(library, 1 worker), > 1 means the library is
//     faster;
//   - the library with 2 workers: metric "2w/1w" = time(1 worker) /
//     time(2 workers), the parallel speed-up.
//
// Each metric is the median over the iterations of one run. Run with
// -benchtime 5x (each iteration reads the data four times).
func BenchmarkFullBatchPass(b *testing.B) {
	const bytes = 128 << 20
	for _, d := range []int{8, 32, 128, 512, 1024} {
		n := bytes / (8 * d)
		a, y := benchData(n, d)
		m, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
		if err != nil {
			b.Fatal(err)
		}
		one, _ := oracle.NewFullBatch(m, oracle.BatchSettings{Workers: 1})
		two, _ := oracle.NewFullBatch(m, oracle.BatchSettings{Workers: 2})
		x := make([]float64, d+1)
		for j := range x {
			x[j] = 0.01 * float64(j%7)
		}
		dst := make([]float64, d+1)
		b.Run(fmt.Sprintf("d=%d", d), func(b *testing.B) {
			b.ReportAllocs()
			bw, naive, par, sum2 := make([]float64, 0, 1024), make([]float64, 0, 1024), make([]float64, 0, 1024), make([]float64, 0, 1024)
			sumT := make([]float64, 0, 1024)
			_ = two.Measure(dst, x, nil) // start the workers
			half := len(a) / 2
			start, done := make(chan struct{}), make(chan float64)
			go func() { // a second goroutine for the two-goroutine Sum
				for range start {
					done <- floats.Sum(a[half:])
				}
			}()
			defer close(start)
			for b.Loop() {
				t5 := time.Now()
				start <- struct{}{}
				sink += floats.Sum(a[:half])
				sink += <-done
				t6 := time.Now()
				// The four passes run in a rotating order, so that none
				// of them always follows the same one.
				var ts, tn, t1w, t2w float64
				for k := range 4 {
					t0 := time.Now()
					switch (k + len(bw)) % 4 {
					case 0:
						sink += floats.Sum(a)
						ts = time.Since(t0).Seconds()
					case 1:
						naiveFull(dst, x, a, y, d)
						tn = time.Since(t0).Seconds()
					case 2:
						if err := one.Measure(dst, x, nil); err != nil {
							b.Fatal(err)
						}
						t1w = time.Since(t0).Seconds()
					case 3:
						if err := two.Measure(dst, x, nil); err != nil {
							b.Fatal(err)
						}
						t2w = time.Since(t0).Seconds()
					}
				}
				bw = append(bw, ts/t1w)
				naive = append(naive, tn/t1w)
				par = append(par, t1w/t2w)
				sum2 = append(sum2, ts/t6.Sub(t5).Seconds())
				sumT = append(sumT, ts)
			}
			b.ReportMetric(median(bw), "bw-frac")
			b.ReportMetric(median(naive), "vs-naive")
			b.ReportMetric(median(par), "2w/1w")
			b.ReportMetric(median(sum2), "sum-2g/1g")
			b.ReportMetric(float64(bytes)/1e9/median(sumT), "sum-GB/s")
		})
		one.Close()
		two.Close()
		a, y, m = nil, nil, nil
		runtime.GC()
	}
}

// BenchmarkMiniBatchWorkers measures one mini-batch least-squares gradient
// (uniform sampling with replacement, batch m, dimension d) with 1 and 2
// workers, alternating in blocks of 64 batches within every run. Metric
// "2w/1w" = time(1 worker)/time(2 workers), the median over blocks, and
// "workers-used" = 2 when the batch is split, 1 when it is too small. The
// data are n = 2^20/d rows (8 MiB), so that the rows come from the caches
// and the work, not the memory bus, limits the speed-up.
func BenchmarkMiniBatchWorkers(b *testing.B) {
	for _, d := range []int{10, 100, 1000} {
		n := (1 << 20) / d
		a, y := benchData(n, d)
		m, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
		if err != nil {
			b.Fatal(err)
		}
		for _, size := range []int{16, 32, 64, 128, 256, 1024} {
			b.Run(fmt.Sprintf("d=%d/m=%d", d, size), func(b *testing.B) {
				one, _ := oracle.NewMiniBatch(m, sampling.NewUniform(n), size, oracle.BatchSettings{Workers: 1})
				two, _ := oracle.NewMiniBatch(m, sampling.NewUniform(n), size, oracle.BatchSettings{Workers: 2})
				defer one.Close()
				defer two.Close()
				x := make([]float64, d+1)
				dst := make([]float64, d+1)
				r1 := rand.New(rand.NewPCG(1, 2))
				r2 := rand.New(rand.NewPCG(3, 4))
				const block = 64
				ratio := make([]float64, 0, 1<<12)
				_ = two.Measure(dst, x, r2) // start the workers
				b.ReportAllocs()
				for b.Loop() {
					// Alternate which goes first; the two draw different
					// rows (different seeds), so neither reads rows the
					// other has just brought into cache.
					var t1w, t2w float64
					for k := range 2 {
						t0 := time.Now()
						if (k+len(ratio))%2 == 0 {
							for range block {
								_ = one.Measure(dst, x, r1)
							}
							t1w = time.Since(t0).Seconds()
						} else {
							for range block {
								_ = two.Measure(dst, x, r2)
							}
							t2w = time.Since(t0).Seconds()
						}
					}
					ratio = append(ratio, t1w/t2w)
				}
				b.ReportMetric(median(ratio), "2w/1w")
				b.ReportMetric(float64(two.Workers()), "workers-used")
			})
		}
	}
}
