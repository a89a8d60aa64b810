package oracle

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestCurvatureBoundsAgainstGonum compares CurvatureBounds with gonum: the
// largest eigenvalue of c·ZᵀZ/n (+L2 on the coefficients) by
// mat.EigenSym, and R² = c·Σ‖z_i‖⁴/Σ‖z_i‖² + L2 summed directly.
func TestCurvatureBoundsAgainstGonum(t *testing.T) {
	const n, p = 500, 4
	rng := rand.New(rand.NewPCG(3, 4))
	a, y, lab := make([]float64, n*p), make([]float64, n), make([]float64, n)
	for i := range a {
		a[i] = rng.NormFloat64() * float64(1+i%p)
	}
	for i := range y {
		y[i] = rng.NormFloat64()
		if rng.Float64() < 0.5 {
			lab[i] = 1
		}
	}
	for _, tc := range []struct {
		loss Loss
		c    float64
		l2   float64
	}{{SquaredLoss, 1, 0}, {LogisticLoss, 0.25, 0}, {SquaredLoss, 1, 0.3}} {
		var r *Regression
		var err error
		if tc.loss == SquaredLoss {
			r, err = NewLeastSquares(Dense{Data: a, Cols: p}, y, RegressionSettings{L2: tc.l2})
		} else {
			r, err = NewLogistic(Dense{Data: a, Cols: p}, lab, RegressionSettings{L2: tc.l2})
		}
		if err != nil {
			t.Fatal(err)
		}
		r2, top, ok := r.CurvatureBounds()
		if !ok {
			t.Fatalf("%v: not ok", tc.loss)
		}
		g := mat.NewSymDense(p+1, nil)
		var s2, s4 float64
		z := make([]float64, p+1)
		for i := range n {
			z[0] = 1
			copy(z[1:], a[i*p:(i+1)*p])
			q := 0.0
			for _, v := range z {
				q += v * v
			}
			s2 += q
			s4 += q * q
			for j := range z {
				for k := j; k < len(z); k++ {
					g.SetSym(j, k, g.At(j, k)+tc.c*z[j]*z[k]/n)
				}
			}
		}
		for j := 1; j <= p; j++ {
			g.SetSym(j, j, g.At(j, j)+tc.l2)
		}
		var es mat.EigenSym
		es.Factorize(g, false)
		vals := es.Values(nil)
		want := vals[len(vals)-1]
		// Power iteration converges at the rate (λ₂/λ₁)^k; 30 steps with
		// the column scales 1…4 here leave well under 1e-6 relative
		// (Golub & Van Loan 2013, §8.3.1).
		if math.Abs(top-want) > 1e-6*want {
			t.Errorf("%v L2 %v: top curvature %v, gonum EigenSym %v", tc.loss, tc.l2, top, want)
		}
		if wantR2 := tc.c*s4/s2 + tc.l2; math.Abs(r2-wantR2) > 1e-12*wantR2 {
			t.Errorf("%v: R² %v, want %v", tc.loss, r2, wantR2)
		}
	}
	q, err := NewQuantile(Dense{Data: a, Cols: p}, y, 0.5, RegressionSettings{})
	if err != nil {
		t.Fatal(err)
	}
	if _, _, ok := q.CurvatureBounds(); ok {
		t.Error("pinball loss: CurvatureBounds reports ok")
	}
}

// TestCurvatureBoundsOfSample: with rows ≥ n the sample is every row (the
// same values bit for bit); with fewer it reads rows ⌊j·n/rows⌋, checked
// against CurvatureBounds of a model built from exactly those rows.
func TestCurvatureBoundsOfSample(t *testing.T) {
	const n, p, rows = 1000, 3, 300
	rng := rand.New(rand.NewPCG(5, 6))
	a, y := make([]float64, n*p), make([]float64, n)
	for i := range a {
		a[i] = rng.NormFloat64()
	}
	m, err := NewLeastSquares(Dense{Data: a, Cols: p}, y, RegressionSettings{})
	if err != nil {
		t.Fatal(err)
	}
	r1, t1, _ := m.CurvatureBounds()
	for _, k := range []int{n, n + 5, 0, -1} {
		if r2, t2, _ := m.CurvatureBoundsOf(k); r2 != r1 || t2 != t1 {
			t.Errorf("CurvatureBoundsOf(%d) = %v, %v; want all rows: %v, %v", k, r2, t2, r1, t1)
		}
	}
	sa, sy := make([]float64, 0, rows*p), make([]float64, rows)
	for j := range rows {
		i := j * n / rows
		sa = append(sa, a[i*p:(i+1)*p]...)
	}
	sm, err := NewLeastSquares(Dense{Data: sa, Cols: p}, sy, RegressionSettings{})
	if err != nil {
		t.Fatal(err)
	}
	wr, wt, _ := sm.CurvatureBounds()
	gr, gt, _ := m.CurvatureBoundsOf(rows)
	if math.Abs(gr-wr) > 1e-12*wr || math.Abs(gt-wt) > 1e-12*wt {
		t.Errorf("CurvatureBoundsOf(%d) = %v, %v; the sampled rows' model gives %v, %v", rows, gr, gt, wr, wt)
	}
}
