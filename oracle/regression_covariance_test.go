package oracle_test

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/stochroot/stochroot/oracle"
)

// TestCovarianceToOriginal checks the covariance carried through
// ToOriginal against its definition for an affine map: the Jacobian is
// recovered column by column as ToOriginal(e_k) − ToOriginal(0), and
// J·Σ·Jᵀ is formed with gonum mat (the rule for a linear map of a random
// vector; common practice). Agreement to 1e-12 relative.
func TestCovarianceToOriginal(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	const n, p = 50, 3
	data := make([]float64, n*p)
	y := make([]float64, n)
	for i := range data {
		data[i] = 10*float64(i%p) + rng.NormFloat64()*float64(1+i%p)
	}
	for i := range y {
		y[i] = rng.NormFloat64()
	}
	for _, s := range []oracle.RegressionSettings{{Standardize: true}, {Standardize: true, NoIntercept: true}, {}} {
		m, err := oracle.NewLeastSquares(oracle.Dense{Data: data, Cols: p}, y, s)
		if err != nil {
			t.Fatal(err)
		}
		d := m.Dim()
		// A random covariance A·Aᵀ.
		a := mat.NewDense(d, d, nil)
		for i := range d {
			for k := range d {
				a.Set(i, k, rng.NormFloat64())
			}
		}
		cov := mat.NewSymDense(d, nil)
		cov.SymOuterK(1, a)
		got, err := m.CovarianceToOriginal(nil, cov)
		if err != nil {
			t.Fatal(err)
		}
		zero := m.ToOriginal(make([]float64, d), make([]float64, d))
		j := mat.NewDense(d, d, nil)
		for k := range d {
			e := make([]float64, d)
			e[k] = 1
			col := m.ToOriginal(make([]float64, d), e)
			for i := range d {
				j.Set(i, k, col[i]-zero[i])
			}
		}
		var tmp, want mat.Dense
		tmp.Mul(j, cov)
		want.Mul(&tmp, j.T())
		for i := range d {
			for k := range d {
				w := want.At(i, k)
				if math.Abs(got.At(i, k)-w) > 1e-12*(math.Abs(w)+1) {
					t.Errorf("%+v: cov[%d][%d] = %v, want %v", s, i, k, got.At(i, k), w)
				}
			}
		}
		if _, err := m.CovarianceToOriginal(nil, mat.NewSymDense(d+1, nil)); !errors.Is(err, oracle.ErrSettings) {
			t.Errorf("wrong size: %v, want ErrSettings", err)
		}
	}
}
