package sa_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize"
	"gonum.org/v1/gonum/optimize/convex/lp"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sampling"
	"github.com/stochroot/stochroot/schedule"
)

// norris is the NIST StRD linear least-squares data set "Norris" (NIST/ITL
// Statistical Reference Datasets, Norris, J., "Calibration of Ozone
// Monitors"; public domain): 36 observations of the model
// y = B0 + B1·x + e, lower level of difficulty. Rows are {y, x} in the
// order of the certified file.
var norris = [36][2]float64{
	{0.1, 0.2}, {338.8, 337.4}, {118.1, 118.2}, {888.0, 884.6},
	{9.2, 10.1}, {228.1, 226.5}, {668.5, 666.3}, {998.5, 996.3},
	{449.1, 448.6}, {778.9, 777.0}, {559.2, 558.2}, {0.3, 0.4},
	{0.1, 0.6}, {778.1, 775.5}, {668.8, 666.9}, {339.3, 338.0},
	{448.9, 447.5}, {10.8, 11.6}, {557.7, 556.0}, {228.3, 228.1},
	{998.0, 995.8}, {888.8, 887.6}, {119.6, 120.2}, {0.3, 0.3},
	{0.6, 0.3}, {557.6, 556.8}, {339.3, 339.1}, {888.0, 887.2},
	{998.5, 999.0}, {778.9, 779.0}, {10.2, 11.1}, {117.6, 118.3},
	{228.9, 229.2}, {668.4, 669.1}, {449.2, 448.9}, {0.2, 0.5},
}

// Certified values of the NIST StRD Norris data set.
const (
	norrisB0 = -0.262323073774029
	norrisB1 = 1.00211681802045
)

// norrisModel returns the standardised least-squares finite sum of Norris
// with intercept, and the design (x) and target (y) columns.
func norrisModel(t testing.TB) (*oracle.Regression, []float64, []float64) {
	t.Helper()
	x := make([]float64, len(norris))
	y := make([]float64, len(norris))
	for i, r := range norris {
		y[i], x[i] = r[0], r[1]
	}
	m, err := oracle.NewLeastSquares(oracle.Dense{Data: x, Cols: 1}, y, oracle.RegressionSettings{Standardize: true})
	if err != nil {
		t.Fatal(err)
	}
	return m, x, y
}

// lre is the log relative error −log10(|got − want|/|want|), the accuracy
// measure of the NIST StRD certified values (McCullough 1998, "Assessing
// the reliability of statistical software: Part I", The American
// Statistician 52(4)); 15.9 for an exact match.
func lre(got, want float64) float64 {
	if got == want {
		return 15.9
	}
	return math.Min(15.9, -math.Log10(math.Abs(got-want)/math.Abs(want)))
}

// TestReferenceNorrisBGD checks batch gradient descent on NIST StRD Norris
// against the certified B0 and B1: at least 9 digits of log relative error.
//
// On standardised data with intercept the Hessian of f is exactly the
// identity (centred, unit-variance column with divisor n), so the constant
// gain 0.5 contracts the error by 1/2 per step: 80 steps leave 2^-80 of the
// starting error, far below rounding. What remains is the rounding of the
// data path (standardisation and the map back to original units).
func TestReferenceNorrisBGD(t *testing.T) {
	m, _, _ := norrisModel(t)
	g, err := oracle.NewFullBatch(m, oracle.BatchSettings{})
	if err != nil {
		t.Fatal(err)
	}
	res, err := sa.MinimizeSum(context.Background(), g, make([]float64, 2), sa.Settings{Gain: schedule.Constant(0.5), MaxSteps: 80})
	if err != nil {
		t.Fatal(err)
	}
	b := m.ToOriginal(make([]float64, 2), res.X)
	for _, c := range []struct {
		name      string
		got, want float64
	}{{"B0", b[0], norrisB0}, {"B1", b[1], norrisB1}} {
		if d := lre(c.got, c.want); d < 9 {
			t.Errorf("BGD %s = %.15g, certified %.15g: LRE %.1f < 9 digits", c.name, c.got, c.want, d)
		} else {
			t.Logf("BGD %s = %.15g, certified %.15g: LRE %.1f", c.name, c.got, c.want, d)
		}
	}
	if res.Epochs != 80 || res.Measurements != 80*36 {
		t.Errorf("Epochs = %v, Measurements = %d, want 80 and %d", res.Epochs, res.Measurements, 80*36)
	}
}

// sandwich returns the Polyak–Juditsky asymptotic covariance H⁻¹SH⁻¹ of
// averaged stochastic gradient descent on a finite sum at its minimiser
// (Polyak & Juditsky 1992, "Acceleration of stochastic approximation by
// averaging", SIAM J. Control Optim. 30(4), Theorem 2), for single-sample
// gradients drawn uniformly with replacement: H = (1/n) Σ w_i z_i z_iᵀ is
// the Hessian and S = (1/n) Σ r_i² z_i z_iᵀ the covariance of a sample
// gradient r_i z_i at the minimiser (its mean is zero there). For least
// squares w_i = 1 and r_i is the residual; for logistic regression
// w_i = p_i(1−p_i) and r_i = p_i − y_i. A batch of m samples drawn with
// replacement divides S by m, and N averaged iterates divide the
// covariance by N.
func sandwich(z [][]float64, w, r []float64) *mat.SymDense {
	d := len(z[0])
	h := mat.NewSymDense(d, nil)
	s := mat.NewSymDense(d, nil)
	n := float64(len(z))
	for i, zi := range z {
		v := mat.NewVecDense(d, zi)
		h.SymRankOne(h, w[i]/n, v)
		s.SymRankOne(s, r[i]*r[i]/n, v)
	}
	var hi mat.Dense
	if err := hi.Inverse(h); err != nil {
		panic(err)
	}
	var tmp, cov mat.Dense
	tmp.Mul(&hi, s)
	cov.Mul(&tmp, &hi)
	out := mat.NewSymDense(d, nil)
	for i := range d {
		for j := i; j < d; j++ {
			out.SetSym(i, j, 0.5*(cov.At(i, j)+cov.At(j, i)))
		}
	}
	return out
}

// zBand is the half-width of the acceptance band in standard errors. Each
// coordinate of an averaged estimate is asymptotically normal (Polyak &
// Juditsky 1992); |Z| > 4.5 has probability 6.8e-6, so with a handful of
// coordinates per test a correct implementation lands outside the band
// with probability below 1e-4. The seeds are fixed, so the tests are
// deterministic; the band says what a correct implementation must meet.
const zBand = 4.5

// TestReferenceNorrisAveragedSGD checks averaged SGD (batch 1) and MBGD
// (batch 8), both drawing with replacement, on NIST StRD Norris: the
// Polyak–Ruppert average must lie within zBand standard errors of the
// certified values, the standard errors being those of the sandwich
// covariance H⁻¹SH⁻¹/(m·N) (see sandwich) with S from the certified OLS
// residuals, m the batch size and N the number of averaged iterates.
//
// The sandwich is the same in any linear reparametrisation, so it is
// computed in the original units (z_i = (1, x_i)) while the run works on
// standardised data. The gain is a_k = 0.25/(k+1)^0.6; the per-sample
// curvature on the standardised data is at most 1 + max u_i² < 4.2, so
// a_k·4.2 < 2 and the steps are stable. The burn-in of N/10 iterates
// removes the transient: on the standardised data H = I, and after k
// steps the starting error has shrunk by exp(−Σ_{j<k} a_j) < exp(−30) at
// k = N/10.
func TestReferenceNorrisAveragedSGD(t *testing.T) {
	m, x, y := norrisModel(t)
	z := make([][]float64, len(x))
	ones := make([]float64, len(x))
	res := make([]float64, len(x))
	for i := range x {
		z[i] = []float64{1, x[i]}
		ones[i] = 1
		res[i] = y[i] - norrisB0 - norrisB1*x[i]
	}
	cov := sandwich(z, ones, res)
	for _, tc := range []struct {
		name  string
		batch int
		steps int
	}{
		{"SGD", 1, 200000},
		{"MBGD-8", 8, 50000},
	} {
		t.Run(tc.name, func(t *testing.T) {
			g, err := oracle.NewMiniBatch(m, sampling.NewUniform(m.Len()), tc.batch, oracle.BatchSettings{})
			if err != nil {
				t.Fatal(err)
			}
			r, err := sa.MinimizeSum(context.Background(), g, make([]float64, 2), sa.Settings{
				Gain:     schedule.Power{Scale: 0.25, Exponent: 0.6},
				MaxSteps: tc.steps, BurnIn: tc.steps / 10, Seed: 7,
			})
			if err != nil {
				t.Fatal(err)
			}
			b := m.ToOriginal(make([]float64, 2), r.Average)
			scale := float64(tc.batch) * float64(r.Averaged)
			for j, want := range []float64{norrisB0, norrisB1} {
				se := math.Sqrt(cov.At(j, j) / scale)
				if d := math.Abs(b[j] - want); !(d <= zBand*se) {
					t.Errorf("%s B%d = %.10g, certified %.10g: |error| %.3g > %.1f·SE = %.3g", tc.name, j, b[j], want, d, zBand, zBand*se)
				} else {
					t.Logf("%s B%d = %.10g, certified %.10g: error %.2f SE (SE %.3g)", tc.name, j, b[j], want, (b[j]-want)/se, se)
				}
			}
		})
	}
}

// genLinear draws n rows of d correlated features (a shared factor plus
// independent noise) and targets y = 1.5 + a·β + ε with ε ~ N(0, 0.5²).
func genLinear(n, d int, seed uint64) (a, y, beta []float64) {
	rng := rand.New(rand.NewPCG(seed, 99))
	a = make([]float64, n*d)
	y = make([]float64, n)
	beta = make([]float64, d)
	for j := range beta {
		beta[j] = rng.NormFloat64()
	}
	for i := range n {
		f := rng.NormFloat64()
		row := a[i*d : (i+1)*d]
		for j := range row {
			row[j] = 0.4*f + rng.NormFloat64() + 0.3
		}
		y[i] = 1.5 + floats.Dot(row, beta) + 0.5*rng.NormFloat64()
	}
	return a, y, beta
}

// designWithOnes returns the n×(d+1) matrix [1 a].
func designWithOnes(a []float64, n, d int) *mat.Dense {
	z := mat.NewDense(n, d+1, nil)
	for i := range n {
		z.Set(i, 0, 1)
		for j := range d {
			z.Set(i, j+1, a[i*d+j])
		}
	}
	return z
}

// TestReferenceLeastSquaresQR checks BGD on least squares with n = 100 000
// samples and d = 20 correlated features plus an intercept against the
// least-squares solution of gonum's mat.QR (cross-checked with mat.SVD).
//
// Tolerance. For f(x) = ½(x−x*)ᵀH(x−x*) + const, H = ZᵀZ/n, gradient
// descent with gain a = 1/λ_max(H) satisfies
//
//	x_{k+1} − x* = (I − aH)(x_k − x*),   ‖I − aH‖₂ = 1 − λ_min/λ_max = ρ,
//
// so ‖x_K − x*‖₂ ≤ ρ^K‖x_0 − x*‖₂ in exact arithmetic (a standard result,
// e.g. Nocedal & Wright 2006, "Numerical Optimization", §3.3). K is chosen
// so that this is below 1e-10. In floating point the computed gradient
// differs from the exact one by at most γ_n·Σ|r_i|‖z_i‖/n per step
// (recursive summation, Higham 2002, "Accuracy and Stability of Numerical
// Algorithms", §4.2, γ_n = nu/(1−nu)), which moves the fixed point by at
// most that divided by λ_min. The band is the sum of both plus the same
// allowance for the QR solution.
func TestReferenceLeastSquaresQR(t *testing.T) {
	n, d := 100000, 20
	if testing.Short() {
		n = 20000
	}
	a, y, _ := genLinear(n, d, 1)
	z := designWithOnes(a, n, d)
	yv := mat.NewVecDense(n, y)

	var qr mat.QR
	qr.Factorize(z)
	var want mat.VecDense
	if err := qr.SolveVecTo(&want, false, yv); err != nil {
		t.Fatal(err)
	}
	var svd mat.SVD
	if !svd.Factorize(z, mat.SVDThin) {
		t.Fatal("SVD failed")
	}
	var wantSVD mat.VecDense
	svd.SolveVecTo(&wantSVD, yv, svd.Rank(1e-12))
	if dd := maxAbsDiff(want.RawVector().Data, wantSVD.RawVector().Data); dd > 1e-10 {
		t.Fatalf("QR and SVD solutions differ by %g", dd)
	}

	var h mat.SymDense
	h.SymOuterK(1/float64(n), z.T())
	var eig mat.EigenSym
	if !eig.Factorize(&h, false) {
		t.Fatal("eigendecomposition failed")
	}
	ev := eig.Values(nil)
	lmin, lmax := ev[0], ev[len(ev)-1]
	rho := 1 - lmin/lmax
	x0 := make([]float64, d+1)
	dist0 := floats.Norm(want.RawVector().Data, 2) // ‖x_0 − x*‖ with x_0 = 0
	steps := int(math.Ceil(math.Log(1e-10/dist0) / math.Log(rho)))

	// Rounding allowance: γ_n·mean(|r_i|‖z_i‖)/λ_min, doubled for the QR
	// solution, with r_i the residuals at x*.
	u := 0x1p-53
	gamma := float64(n) * u / (1 - float64(n)*u)
	var absSum float64
	for i := range n {
		zi := z.RawRowView(i)
		r := floats.Dot(zi, want.RawVector().Data) - y[i]
		absSum += math.Abs(r) * floats.Norm(zi, 2)
	}
	tol := 1e-10 + 2*gamma*absSum/float64(n)/lmin

	m, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
	if err != nil {
		t.Fatal(err)
	}
	g, err := oracle.NewFullBatch(m, oracle.BatchSettings{})
	if err != nil {
		t.Fatal(err)
	}
	defer g.Close()
	res, err := sa.MinimizeSum(context.Background(), g, x0, sa.Settings{Gain: schedule.Constant(1 / lmax), MaxSteps: steps})
	if err != nil {
		t.Fatal(err)
	}
	diff := make([]float64, d+1)
	floats.SubTo(diff, res.X, want.RawVector().Data)
	if e := floats.Norm(diff, 2); !(e <= tol) {
		t.Errorf("BGD after %d steps: ‖x − x_QR‖ = %.3g > %.3g (ρ = %.4f, κ = %.3g)", steps, e, tol, rho, lmax/lmin)
	} else {
		t.Logf("BGD after %d steps: ‖x − x_QR‖ = %.3g ≤ %.3g (ρ = %.4f, κ = %.3g)", steps, e, tol, rho, lmax/lmin)
	}
}

func maxAbsDiff(a, b []float64) float64 {
	m := 0.0
	for i := range a {
		m = math.Max(m, math.Abs(a[i]-b[i]))
	}
	return m
}

// genLogistic draws n rows of d standard normal features and labels
// y ~ Bernoulli(σ(b₀ + a·β)).
func genLogistic(n, d int, seed uint64) (a, y []float64) {
	rng := rand.New(rand.NewPCG(seed, 98))
	a = make([]float64, n*d)
	y = make([]float64, n)
	beta := []float64{0.8, -0.5, 0.3, 1.1, -0.2, 0.6, -0.9}
	for i := range n {
		row := a[i*d : (i+1)*d]
		z := -0.4
		for j := range row {
			row[j] = rng.NormFloat64()
			z += row[j] * beta[j%len(beta)]
		}
		if rng.Float64() < 1/(1+math.Exp(-z)) {
			y[i] = 1
		}
	}
	return a, y
}

// logisticBFGS minimises the mean logistic loss with gonum's optimize.BFGS.
// The loss and gradient are written here independently of package oracle.
func logisticBFGS(t *testing.T, a, y []float64, n, d int) []float64 {
	t.Helper()
	p := optimize.Problem{
		Func: func(x []float64) float64 {
			var s float64
			for i := range n {
				z := x[0] + floats.Dot(a[i*d:(i+1)*d], x[1:])
				s += math.Log1p(math.Exp(-math.Abs(z))) + math.Max(z, 0) - y[i]*z
			}
			return s / float64(n)
		},
		Grad: func(grad, x []float64) {
			clear(grad)
			for i := range n {
				row := a[i*d : (i+1)*d]
				z := x[0] + floats.Dot(row, x[1:])
				r := 1/(1+math.Exp(-z)) - y[i]
				grad[0] += r / float64(n)
				floats.AddScaled(grad[1:], r/float64(n), row)
			}
		},
	}
	// The minimiser is within ‖∇f‖/μ of x, μ ≈ 0.1 the smallest curvature
	// here, so a gradient below 1e-9 pins it far inside the 1e-6 band.
	res, err := optimize.Minimize(p, make([]float64, d+1), &optimize.Settings{GradientThreshold: 1e-10}, &optimize.BFGS{})
	if res == nil {
		t.Fatal(err)
	}
	grad := make([]float64, d+1)
	p.Grad(grad, res.X)
	if gn := floats.Norm(grad, 2); !(gn <= 1e-9) {
		t.Fatalf("BFGS stopped with ‖∇f‖ = %g (%v)", gn, err)
	}
	return res.X
}

// TestReferenceLogisticBFGS checks logistic regression against gonum's
// optimize.BFGS on the same data: BGD must agree to 1e-6 in every
// coefficient, and averaged SGD (with replacement) must lie within zBand
// standard errors of the sandwich covariance H⁻¹SH⁻¹/N at the BFGS
// minimiser (see sandwich; H = (1/n)Σ p_i(1−p_i) z_i z_iᵀ,
// S = (1/n)Σ (p_i − y_i)² z_i z_iᵀ).
//
// BGD uses the gain 1/L with L = λ_max(ZᵀZ/n)/4, an upper bound on the
// curvature of the mean logistic loss (σ' ≤ 1/4), which makes gradient
// descent monotone and linearly convergent on this strongly convex
// problem (Nocedal & Wright 2006, §3.3).
//
// Averaged SGD uses a_k = 1/(k+1)^0.6 (per-sample curvature ≤ ‖z_i‖²/4,
// about (d+1)/4 = 1.5 here) and a burn-in of N/10.
func TestReferenceLogisticBFGS(t *testing.T) {
	n, d := 4000, 5
	a, y := genLogistic(n, d, 3)
	want := logisticBFGS(t, a, y, n, d)

	m, err := oracle.NewLogistic(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
	if err != nil {
		t.Fatal(err)
	}
	z := make([][]float64, n)
	w := make([]float64, n)
	r := make([]float64, n)
	for i := range n {
		z[i] = append([]float64{1}, a[i*d:(i+1)*d]...)
		p := 1 / (1 + math.Exp(-floats.Dot(z[i], want)))
		w[i] = p * (1 - p)
		r[i] = p - y[i]
	}
	zz := mat.NewDense(n, d+1, nil)
	for i := range n {
		zz.SetRow(i, z[i])
	}
	var h mat.SymDense
	h.SymOuterK(1/float64(n), zz.T())
	var eig mat.EigenSym
	if !eig.Factorize(&h, false) {
		t.Fatal("eigendecomposition failed")
	}
	lmax := eig.Values(nil)[d]

	t.Run("BGD", func(t *testing.T) {
		g, err := oracle.NewFullBatch(m, oracle.BatchSettings{})
		if err != nil {
			t.Fatal(err)
		}
		defer g.Close()
		res, err := sa.MinimizeSum(context.Background(), g, make([]float64, d+1), sa.Settings{Gain: schedule.Constant(4 / lmax), MaxSteps: 3000})
		if err != nil {
			t.Fatal(err)
		}
		if e := maxAbsDiff(res.X, want); !(e <= 1e-6) {
			t.Errorf("BGD vs BFGS: max |Δ| = %.3g > 1e-6", e)
		} else {
			t.Logf("BGD vs BFGS: max |Δ| = %.3g", e)
		}
	})
	t.Run("SGD", func(t *testing.T) {
		cov := sandwich(z, w, r)
		steps := 200000
		g, err := oracle.NewMiniBatch(m, sampling.NewUniform(n), 1, oracle.BatchSettings{})
		if err != nil {
			t.Fatal(err)
		}
		res, err := sa.MinimizeSum(context.Background(), g, make([]float64, d+1), sa.Settings{
			Gain: schedule.Power{Scale: 1, Exponent: 0.6}, MaxSteps: steps, BurnIn: steps / 10, Seed: 11,
		})
		if err != nil {
			t.Fatal(err)
		}
		for j := range d + 1 {
			se := math.Sqrt(cov.At(j, j) / float64(res.Averaged))
			if e := math.Abs(res.Average[j] - want[j]); !(e <= zBand*se) {
				t.Errorf("averaged SGD x[%d] = %.6g, BFGS %.6g: |error| %.3g > %.1f·SE = %.3g", j, res.Average[j], want[j], e, zBand, zBand*se)
			} else {
				t.Logf("averaged SGD x[%d] = %.6g, BFGS %.6g: error %.2f SE", j, res.Average[j], want[j], (res.Average[j]-want[j])/se)
			}
		}
	})
}

// TestReferenceQuantileLP checks quantile regression with slopes against
// the exact minimiser from linear programming: the regression quantile is
// the solution of
//
//	minimise τ·Σu⁺_i + (1−τ)·Σu⁻_i   s.t.  z_iᵀ(β⁺ − β⁻) + u⁺_i − u⁻_i = y_i,
//	β±, u± ≥ 0
//
// (Koenker & Bassett 1978, "Regression quantiles", Econometrica 46(1)),
// solved here by gonum's optimize/convex/lp.Simplex; f* is its optimum
// divided by n.
//
// BGD on the pinball loss is the subgradient method. With a_k the gain of
// the step taken at x_k, G a bound on the subgradient norm and
// R_1 = ‖x_1 − x*‖, the standard inequality
// ‖x_{k+1} − x*‖² ≤ ‖x_k − x*‖² − 2a_k(f(x_k) − f*) + a_k²G² (Nesterov
// 2004, "Introductory Lectures on Convex Optimization", §3.2.3), summed over
// k = 1…K with a_k ≥ a_K and convexity of f, bounds the uniform average of
// x_1…x_K (Result.Average with BurnIn 0):
//
//	f(x̄) − f* ≤ (R_1² + G²·Σ_{k=1}^{K} a_k²) / (2·K·a_K),
//
// with R_1 ≤ ‖x_0 − x*‖ + a_0·G and G = max(τ, 1−τ)·max_i ‖z_i‖.
func TestReferenceQuantileLP(t *testing.T) {
	n, p, tau := 120, 2, 0.7
	rng := rand.New(rand.NewPCG(31, 32))
	a := make([]float64, n*p)
	y := make([]float64, n)
	for i := range n {
		a[i*p] = 2 * rng.Float64()
		a[i*p+1] = rng.NormFloat64()
		y[i] = 1 + 0.8*a[i*p] - 0.5*a[i*p+1] + rng.ExpFloat64() - 1
	}
	// Standard-form LP: variables (β⁺, β⁻, u⁺, u⁻), q = p+1 coefficients.
	q := p + 1
	nv := 2*q + 2*n
	A := mat.NewDense(n, nv, nil)
	c := make([]float64, nv)
	basic := make([]int, n)
	for i := range n {
		z := append([]float64{1}, a[i*p:(i+1)*p]...)
		for j := range q {
			A.Set(i, j, z[j])
			A.Set(i, q+j, -z[j])
		}
		A.Set(i, 2*q+i, 1)
		A.Set(i, 2*q+n+i, -1)
		c[2*q+i], c[2*q+n+i] = tau, 1-tau
		if y[i] >= 0 {
			basic[i] = 2*q + i
		} else {
			basic[i] = 2*q + n + i
		}
	}
	opt, sol, err := lp.Simplex(c, A, y, 1e-10, basic)
	if err != nil {
		t.Fatal(err)
	}
	fStar := opt / float64(n)
	xStar := make([]float64, q)
	for j := range q {
		xStar[j] = sol[j] - sol[q+j]
	}

	m, err := oracle.NewQuantile(oracle.Dense{Data: a, Cols: p}, y, tau, oracle.RegressionSettings{})
	if err != nil {
		t.Fatal(err)
	}
	if v := m.Value(xStar); math.Abs(v-fStar) > 1e-9*math.Max(1, fStar) {
		t.Fatalf("objective at the LP solution %v, LP optimum/n %v", v, fStar)
	}
	g, _ := oracle.NewFullBatch(m, oracle.BatchSettings{})
	gain := schedule.Power{Scale: 0.5, Exponent: 0.5}
	K := 40000
	res, err := sa.MinimizeSum(context.Background(), g, make([]float64, q), sa.Settings{Gain: gain, MaxSteps: K})
	if err != nil {
		t.Fatal(err)
	}

	zmax := 0.0
	for i := range n {
		zmax = math.Max(zmax, math.Hypot(1, floats.Norm(a[i*p:(i+1)*p], 2)))
	}
	G := math.Max(tau, 1-tau) * zmax
	R1 := floats.Norm(xStar, 2) + gain.Gain(0)*G // x_0 = 0
	var sq float64
	for k := 1; k <= K; k++ {
		sq += gain.Gain(k) * gain.Gain(k)
	}
	bound := (R1*R1 + G*G*sq) / (2 * float64(K) * gain.Gain(K))
	gap := m.Value(res.Average) - fStar
	if !(gap <= bound) || gap < -1e-9 {
		t.Errorf("f(x̄) − f* = %.3g, subgradient bound %.3g (x̄ = %.4g, LP x* = %.4g)", gap, bound, res.Average, xStar)
	} else {
		t.Logf("f(x̄) − f* = %.3g ≤ bound %.3g; x̄ = %.4g, LP x* = %.4g (f* = %.4g)", gap, bound, res.Average, xStar, fStar)
	}
}
