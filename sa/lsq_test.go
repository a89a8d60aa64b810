package sa_test

import (
	"math/rand/v2"

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
	chol  []float64 // lower Cholesky factor of Σ, row-major
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
	var ch mat.Cholesky
	if !ch.Factorize(cov) {
		panic("covariance not positive definite")
	}
	var l mat.TriDense
	ch.LTo(&l)
	lf := make([]float64, d*d)
	for i := range d {
		for j := 0; j <= i; j++ {
			lf[i*d+j] = l.At(i, j)
		}
	}
	return &streamLSQ{beta: beta, chol: lf, sigma: sigma, batch: batch, cov: cov}
}

func (s *streamLSQ) Dim() int                 { return len(s.beta) }
func (s *streamLSQ) MeasurementsPerCall() int { return s.batch }

// Measure draws s.batch fresh samples and writes their mean gradient. It
// allocates nothing for d ≤ 128.
func (s *streamLSQ) Measure(dst, x []float64, rng *rand.Rand) error {
	d := len(x)
	var zb, ab [128]float64
	z, a := zb[:d], ab[:d]
	if d > 128 {
		z, a = make([]float64, d), make([]float64, d)
	}
	clear(dst)
	for range s.batch {
		for i := range z {
			z[i] = rng.NormFloat64()
		}
		r := 0.0
		for i := range d {
			v := 0.0
			row := s.chol[i*d : i*d+i+1]
			for j, l := range row {
				v += l * z[j]
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
