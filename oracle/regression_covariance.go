package oracle

import (
	"fmt"

	"gonum.org/v1/gonum/mat"
)

// CovarianceToOriginal carries the covariance cov of parameters x of the
// model (standardised units under Standardize; for example the
// ErrorBars.Covariance of a run) to the covariance of the coefficients
// ToOriginal(x) in the units of the caller's data. ToOriginal is affine,
// β = J·x + c with
//
//	J = ∂β/∂x:  ∂β_j/∂x_j = 1/s_j,  ∂b₀/∂x₀ = 1,  ∂b₀/∂x_j = −m_j/s_j,
//
// so Cov(β) = J·cov·Jᵀ exactly (the rule for a linear map of a random
// vector; common practice), intercept included. Without Standardize it is
// a copy of cov. The result is written into dst (allocated when nil) and
// returned. It returns an error wrapping ErrSettings when cov (or a
// non-nil dst) is not Dim()×Dim().
func (r *Regression) CovarianceToOriginal(dst *mat.SymDense, cov mat.Symmetric) (*mat.SymDense, error) {
	d := r.p + r.off
	if cov == nil || cov.SymmetricDim() != d {
		return dst, fmt.Errorf("%w: CovarianceToOriginal: covariance must be %d×%d", ErrSettings, d, d)
	}
	if dst == nil {
		dst = mat.NewSymDense(d, nil)
	} else if dst.SymmetricDim() != d {
		return dst, fmt.Errorf("%w: CovarianceToOriginal: dst is %d×%d, want %d×%d", ErrSettings, dst.SymmetricDim(), dst.SymmetricDim(), d, d)
	}
	j := mat.NewDense(d, d, nil)
	for k := range d {
		j.Set(k, k, 1)
	}
	if r.std != nil {
		for c := range r.p {
			j.Set(r.off+c, r.off+c, 1/r.std[c])
			if r.off == 1 {
				j.Set(0, r.off+c, -r.mean[c]/r.std[c])
			}
		}
	}
	var tmp, full mat.Dense
	tmp.Mul(j, cov)
	full.Mul(&tmp, j.T())
	for a := range d {
		for b := a; b < d; b++ {
			dst.SetSym(a, b, (full.At(a, b)+full.At(b, a))/2)
		}
	}
	return dst, nil
}
