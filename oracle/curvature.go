package oracle

import (
	"math"

	"gonum.org/v1/gonum/floats"
)

// curvatureIters is the number of power iterations of CurvatureBounds.
const curvatureIters = 30

// CurvatureBounds returns two measures of the curvature of the model that
// set the step sizes of gradient methods (Bach & Moulines 2013, "Non-
// strongly-convex smooth stochastic approximation with convergence rate
// O(1/n)", NeurIPS, where R² bounds ‖x_n‖²):
//
//   - r2 = c·Σ‖ã_i‖⁴ / Σ‖ã_i‖² + L2, with ã_i = (1, a_i) (or a_i without
//     an intercept) and c the loss's largest second derivative (1 squared,
//     ¼ logistic): the trace form of the constant R² of Bach & Moulines'
//     condition E[‖ã‖²ããᵀ] ≼ R²·E[ããᵀ] (equal to it for isotropic rows;
//     for Gaussian rows R² = tr Σ + 2λ_max, the trace form tr Σ + 2‖Σ‖²_F/tr Σ),
//     which sets the largest stable step of single-sample SGD, about 2/R²;
//   - top, the largest eigenvalue of c·(1/n)·Σ ã_i ã_iᵀ + L2·I (penalty on
//     the coefficients only), the largest curvature of the mean loss
//     (exact for least squares, an upper bound for logistic regression),
//     by a fixed number of power iterations from the all-ones vector (so
//     possibly a little below the true value; Golub & Van Loan 2013,
//     Matrix Computations, 4th ed., §8.3.1).
//
// ok is false for the pinball loss, whose curvature is not bounded. The
// values are those of the model's own (possibly standardised) columns.
// It reads the data 1 + curvatureIters times and allocates O(Dim()).
func (r *Regression) CurvatureBounds() (r2, top float64, ok bool) {
	return r.CurvatureBoundsOf(r.n)
}

// CurvatureBoundsOf is CurvatureBounds computed on a systematic sample of
// at most rows rows (row ⌊j·n/rows⌋ for j = 0, …, rows−1; all rows when
// rows ≥ n or rows < 1), so that its cost does not grow with n: both
// values are means over the rows, which a sample of 10⁴ rows estimates to
// a few per cent for data without extreme rows, enough for a step size.
func (r *Regression) CurvatureBoundsOf(rows int) (r2, top float64, ok bool) {
	c := 1.0
	switch r.loss {
	case SquaredLoss:
	case LogisticLoss:
		c = 0.25
	default:
		return 0, 0, false
	}
	n, p, off := r.n, r.p, r.off
	if rows < 1 || rows > n {
		rows = n
	}
	at := func(j int) int { return int(int64(j) * int64(n) / int64(rows)) }
	var s2, s4 float64
	for j := range rows {
		i := at(j)
		row := r.a[i*p : (i+1)*p]
		q := floats.Dot(row, row) + float64(off)
		s2 += q
		s4 += q * q
	}
	if s2 > 0 {
		r2 = s4 / s2
	}
	r2 = c*r2 + r.l2
	d := p + off
	v := make([]float64, d)
	w := make([]float64, d)
	for i := range v {
		v[i] = 1 / math.Sqrt(float64(d))
	}
	mul := func(dst, v []float64) {
		clear(dst)
		for j := range rows {
			i := at(j)
			row := r.a[i*p : (i+1)*p]
			z := floats.Dot(row, v[off:])
			if off == 1 {
				z += v[0]
				dst[0] += z
			}
			floats.AddScaled(dst[off:], z, row)
		}
		floats.Scale(c/float64(rows), dst)
		if r.l2 != 0 {
			floats.AddScaled(dst[off:], r.l2, v[off:])
		}
	}
	for range curvatureIters {
		mul(w, v)
		top = floats.Dot(w, v) // Rayleigh quotient, ‖v‖ = 1
		nw := floats.Norm(w, 2)
		if !(nw > 0) {
			break
		}
		floats.ScaleTo(v, 1/nw, w)
	}
	return r2, top, true
}

// Sum returns the finite sum the batches are drawn from (so that a driver
// can read a ready-made model's data, for example its CurvatureBounds).
func (b *MiniBatch) Sum() FiniteSum { return b.f }
