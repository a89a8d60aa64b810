package sa

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/stochroot/stochroot/schedule"
)

// TestReferenceBatchMeansFormula checks the on-line estimator against the
// batch-means formula of Chen, Lee, Tong & Zhang (2020, Ann. Statist.
// 48(1), Sect. 4) computed directly from a stored sequence: batch ends
// e_m = ⌈((m+1)N)^(1/(1−α))⌉, batch 0 left out, Σ̂ = Σ n_m (x̄⁽ᵐ⁾ − μ)(x̄⁽ᵐ⁾ − μ)ᵀ
// / (M − 1) with μ the length-weighted mean of the batch means (the paper
// divides by M; see Inference for why M − 1).
func TestReferenceBatchMeansFormula(t *testing.T) {
	const d, n = 3, 5000
	in, err := Inference{BatchExponent: 0.6, BatchScale: 1.5}.resolve(d, nil)
	if err != nil {
		t.Fatal(err)
	}
	b := newBatchMeans(d, in)
	rng := rand.New(rand.NewPCG(1, 2))
	xs := make([][]float64, n)
	avg := make([]float64, d)
	prevx := make([]float64, d)
	for j := range xs {
		x := []float64{100 + rng.NormFloat64(), -3 + 2*rng.NormFloat64(), 0}
		x[2] = 0.5*x[0] + rng.NormFloat64()
		xs[j] = x
		for i := range avg {
			avg[i] += (x[i] - avg[i]) / float64(j+1)
		}
		b.add(x, prevx, avg)
		prevx = x
	}
	// Direct computation.
	var ends []int
	prev := 0
	for m := 0; ; m++ {
		e := int(math.Ceil(math.Pow(float64(m+1)*1.5, 1/(1-0.6))))
		e = max(e, prev+1)
		if e > n {
			break
		}
		ends = append(ends, e)
		prev = e
	}
	M := len(ends) - 1
	if got := b.batches(); got != M {
		t.Fatalf("batches() = %d, want %d", got, M)
	}
	means := make([][]float64, M)
	lens := make([]float64, M)
	mu := make([]float64, d)
	W := 0.0
	for m := 1; m <= M; m++ {
		s, e := ends[m-1], ends[m] // iterates s+1..e (1-based) = xs[s:e]
		mean := make([]float64, d)
		for _, x := range xs[s:e] {
			for i := range mean {
				mean[i] += x[i]
			}
		}
		for i := range mean {
			mean[i] /= float64(e - s)
			mu[i] += float64(e-s) * mean[i]
		}
		means[m-1], lens[m-1] = mean, float64(e-s)
		W += float64(e - s)
	}
	for i := range mu {
		mu[i] /= W
	}
	for i := range d {
		for k := i; k < d; k++ {
			want := 0.0
			for m := range means {
				want += lens[m] * (means[m][i] - mu[i]) * (means[m][k] - mu[k])
			}
			got := b.cov[i*d+k]
			if math.Abs(got-want) > 1e-9*math.Abs(want) {
				t.Errorf("scatter[%d][%d] = %v, want %v", i, k, got, want)
			}
		}
	}
	eb := b.errorBars(avg, n)
	if !eb.Available || eb.DF != M-1 {
		t.Fatalf("errorBars: Available %v DF %d, want true, %d", eb.Available, eb.DF, M-1)
	}
	q := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(M - 1)}.Quantile(0.975)
	for i := range d {
		want := q * math.Sqrt(b.cov[i*d+i]/float64(M-1)/n)
		if math.Abs(eb.HalfWidth[i]-want) > 1e-12*want {
			t.Errorf("HalfWidth[%d] = %v, want %v", i, eb.HalfWidth[i], want)
		}
		if c := eb.Covariance.At(i, i); math.Abs(c-eb.StdErr[i]*eb.StdErr[i]) > 1e-12*c {
			t.Errorf("Covariance[%d][%d] = %v, StdErr² = %v", i, i, c, eb.StdErr[i]*eb.StdErr[i])
		}
	}
}

// TestStepAllocsWithInference proves that a step with batch means (full
// and diagonal) and a trace allocates nothing, across batch closes and
// trace thinning.
func TestStepAllocsWithInference(t *testing.T) {
	for _, mode := range []CovarianceMode{CovarianceFull, CovarianceDiagonal} {
		const d = 8
		s, err := Settings{
			Gain:      schedule.Power{Scale: 1.5, Exponent: 0.6},
			Inference: Inference{Covariance: mode, MinBatches: 2, BatchScale: 2},
			Precision: &Precision{Absolute: 1e-12},
			Trace:     &Tracing{Every: 3, Max: 16},
		}.resolve(d)
		if err != nil {
			t.Fatal(err)
		}
		c := newCore(make([]float64, d), s.Gain, 0, nil, 0)
		c.configure(s, 1)
		y := make([]float64, d)
		rng := rand.New(rand.NewPCG(3, 4))
		allocs := testing.AllocsPerRun(20000, func() {
			for i := range y {
				y[i] = c.x[i] - 1 + rng.NormFloat64()
			}
			if err := c.step(y); err != nil {
				t.Fatal(err)
			}
			_ = c.precise()
		})
		if allocs != 0 {
			t.Errorf("mode %d: %v allocations per step, want 0", mode, allocs)
		}
		if c.inf.closes < 20 || c.trace.every == 3 {
			t.Errorf("mode %d: %d batches, trace every %d: the loop did not exercise batch closes and thinning", mode, c.inf.closes, c.trace.every)
		}
	}
}
