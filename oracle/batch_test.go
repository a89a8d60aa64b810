package oracle_test

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sampling"
)

// plain hides the concrete *Regression type, so that the batch oracles
// call AddGradient once per sample: the reference for the fused kernels.
type plain struct{ oracle.FiniteSum }

// TestFusedKernelsMatchPerSample checks the fused least-squares kernels of
// the full-batch and mini-batch oracles (narrow rows in pairs, wide rows
// with gonum's assembly kernels, odd row counts, several chunks) against
// the one-sample-at-a-time sum through AddGradient, within the rounding
// bound of two summation orders (sumBound: Higham 2002, "Accuracy and
// Stability of Numerical Algorithms", §3.1 and §4.2).
func TestFusedKernelsMatchPerSample(t *testing.T) {
	for _, d := range []int{1, 2, 3, 7, 8, 9, 23, 24, 25, 64, 129} {
		for _, n := range []int{1, 2, 301, 4001} {
			t.Run(fmt.Sprintf("d=%d/n=%d", d, n), func(t *testing.T) {
				a, yr, _ := genData(n, d, uint64(7*d+n))
				m, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, yr, oracle.RegressionSettings{})
				if err != nil {
					t.Fatal(err)
				}
				x := make([]float64, d+1)
				for j := range x {
					x[j] = 0.1 * math.Sin(float64(j+1))
				}
				bound := sumBound(a, yr, d, x)
				got, want := make([]float64, d+1), make([]float64, d+1)
				check := func(what string) {
					t.Helper()
					for j := range got {
						if e := math.Abs(got[j] - want[j]); !(e <= bound[j]) {
							t.Fatalf("%s: y[%d] = %.17g, per sample %.17g: differ by %.3g > rounding bound %.3g", what, j, got[j], want[j], e, bound[j])
						}
					}
				}
				fast, _ := oracle.NewFullBatch(m, oracle.BatchSettings{Workers: 2})
				slow, _ := oracle.NewFullBatch(plain{m}, oracle.BatchSettings{Workers: 1})
				defer fast.Close()
				fast.Measure(got, x, nil)
				slow.Measure(want, x, nil)
				check("full batch")
				// A mini-batch of all n without replacement is every sample
				// once: the same sum in the sampler's order.
				mf, _ := oracle.NewMiniBatch(m, sampling.NewBlockShuffled(n, 16), n, oracle.BatchSettings{Workers: 2})
				defer mf.Close()
				if err := mf.Measure(got, x, rand.New(rand.NewPCG(1, 2))); err != nil {
					t.Fatal(err)
				}
				check("mini-batch of n")
			})
		}
	}
}

// TestBatchZeroAllocations: Measure allocates nothing per batch on the hot
// paths (full batch and mini-batch, one and two workers, the fused kernels
// and the generic per-sample path), once the workers run.
func TestBatchZeroAllocations(t *testing.T) {
	n, d := 20000, 30
	a, yr, _ := genData(n, d, 3)
	m, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, yr, oracle.RegressionSettings{L2: 0.1})
	if err != nil {
		t.Fatal(err)
	}
	x, dst := make([]float64, d+1), make([]float64, d+1)
	rng := rand.New(rand.NewPCG(1, 2))
	for _, w := range []int{1, 2} {
		for name, mk := range map[string]func() (*oracle.MiniBatch, error){
			"full": func() (*oracle.MiniBatch, error) { return oracle.NewFullBatch(m, oracle.BatchSettings{Workers: w}) },
			"full-generic": func() (*oracle.MiniBatch, error) {
				return oracle.NewFullBatch(plain{m}, oracle.BatchSettings{Workers: w})
			},
			"uniform-64": func() (*oracle.MiniBatch, error) {
				return oracle.NewMiniBatch(m, sampling.NewUniform(n), 64, oracle.BatchSettings{Workers: w})
			},
			"block-4096": func() (*oracle.MiniBatch, error) {
				return oracle.NewMiniBatch(m, sampling.NewBlockShuffled(n, 64), 4096, oracle.BatchSettings{Workers: w})
			},
		} {
			b, err := mk()
			if err != nil {
				t.Fatal(err)
			}
			_ = b.Measure(dst, x, rng) // start the workers
			allocs := testing.AllocsPerRun(20, func() {
				if err := b.Measure(dst, x, rng); err != nil {
					t.Fatal(err)
				}
			})
			b.Close()
			if allocs != 0 {
				t.Errorf("%s, %d workers: %v allocations per batch, want 0", name, w, allocs)
			}
		}
	}
}
