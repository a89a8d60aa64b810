package sa_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/stochroot/stochroot/oracle"
)

// streamLSQ is linear regression with known coefficients on generated
// data, measured one fresh sample (or a mini-batch of fresh samples) at a
// time: rows a ~ N(0, Σ) with Σ_ij = ρ^|i−j|, responses b = aᵀβ + ε with
// ε ~ N(0, σ²) independent of a. The measurement is the least-squares
// gradient a(aᵀx − b) averaged over the batch, an unbiased estimate of
// ∇f(x) = Σ(x − β) for f(x) = ½E(aᵀx − b)². This is SGD on a stream of
// generated samples.
//
// Its constants for Polyak–Juditsky (1992): A = ∇²f = Σ and
// S = Cov(gradient at β)/batch = E[aaᵀε²]/batch = σ²Σ/batch, so the
// asymptotic covariance of √n(x̄_n − β) is A⁻¹SA⁻¹ = σ²Σ⁻¹/batch.
type streamLSQ struct {
	beta  []float64
	rho   float64
	sigma float64
	batch int
	cov   *mat.SymDense
}

func newStreamLSQ(beta []float64, rho, sigma float64, batch int) *streamLSQ {
	d := len(beta)
	cov := mat.NewSymDense(d, nil)
	for i := range d {
		for j := i; j < d; j++ {
			v := 1.0
			for range j - i {
				v *= rho
			}
			cov.SetSym(i, j, v)
		}
	}
	return &streamLSQ{beta: beta, rho: rho, sigma: sigma, batch: batch, cov: cov}
}

func (s *streamLSQ) Dim() int                 { return len(s.beta) }
func (s *streamLSQ) MeasurementsPerCall() int { return s.batch }

// Measure draws s.batch fresh samples and writes their mean gradient. The
// rows are drawn as a stationary AR(1) sequence across coordinates,
// a_1 = z_1, a_i = ρ·a_{i−1} + √(1−ρ²)·z_i, whose covariance is exactly
// ρ^|i−j| (common practice); checked against Σ in TestStreamLSQRows. It
// allocates
// nothing for d ≤ 128.
func (s *streamLSQ) Measure(dst, x []float64, rng *rand.Rand) error {
	d := len(x)
	var ab [128]float64
	a := ab[:]
	if d > 128 {
		a = make([]float64, d)
	}
	a = a[:d]
	c := math.Sqrt(1 - s.rho*s.rho)
	clear(dst)
	for range s.batch {
		r, v := 0.0, 0.0
		for i := range a {
			if i == 0 {
				v = rng.NormFloat64()
			} else {
				v = s.rho*v + c*rng.NormFloat64()
			}
			a[i] = v
			r += v * (x[i] - s.beta[i])
		}
		r -= s.sigma * rng.NormFloat64() // aᵀx − b = aᵀ(x − β) − ε
		for i, v := range a {
			dst[i] += v * r
		}
	}
	if s.batch > 1 {
		inv := 1 / float64(s.batch)
		for i := range dst {
			dst[i] *= inv
		}
	}
	return nil
}

// asymptoticTrace returns trace(A⁻¹SA⁻¹) = σ²·trace(Σ⁻¹)/batch, with Σ⁻¹
// from gonum mat.
func (s *streamLSQ) asymptoticTrace() float64 {
	var inv mat.Dense
	if err := inv.Inverse(s.cov); err != nil {
		panic(err)
	}
	return s.sigma * s.sigma * mat.Trace(&inv) / float64(s.batch)
}

var _ oracle.Gradient = (*streamLSQ)(nil)

// TestStreamLSQRows checks the test problem itself: the sample covariance
// of the generated rows matches Σ_ij = ρ^|i−j| within 5 standard errors
// (the standard error of a sample covariance of unit-variance normals is
// at most √(2/n)), and the mean gradient at β is zero within 5 standard
// errors.
func TestStreamLSQRows(t *testing.T) {
	const n, d = 20000, 4
	o := newStreamLSQ(make([]float64, d), 0.3, 1, 1)
	rng := rand.New(rand.NewPCG(5, 6))
	x := []float64{1, 0, 0, 0} // gradient = a·(a_1 − ε): E = Σ e_1 = (ρ^i)
	g := make([]float64, d)
	mean := make([]float64, d)
	for range n {
		if err := o.Measure(g, x, rng); err != nil {
			t.Fatal(err)
		}
		for i := range g {
			mean[i] += g[i] / n
		}
	}
	for i := range d {
		want := math.Pow(0.3, float64(i))
		// Var(a_i(a_1−ε)) ≤ E[a_i²(a_1−ε)²] ≤ √(E a_i⁴·E(a_1−ε)⁴) = √(3·12) = 6.
		if se := math.Sqrt(6.0 / n); math.Abs(mean[i]-want) > 5*se {
			t.Errorf("E[a_%d·a_1] = %.4f, want ρ^%d = %.4f ± %.4f", i+1, mean[i], i, want, 5*se)
		}
	}
}
