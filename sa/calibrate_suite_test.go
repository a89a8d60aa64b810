package sa_test

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sampling"
	"github.com/stochroot/stochroot/schedule"
)

// calProblem is one problem of the calibration suite: a run of a fixed
// budget with a given gain (nil: the run calibrates its own), and the
// answer known from outside the run.
type calProblem struct {
	name   string
	slope  float64   // smallest eigenvalue of the Jacobian/Hessian at the answer
	answer []float64 // the known answer
	center float64   // the grid of scales is center·10^j, j = −4, …, 4
	// pj, if > 0, is the Polyak–Juditsky bound on n·E‖x̄_n − x*‖² and n
	// the budget in measurements it is checked at.
	pj float64
	n  int
	// run returns the run's estimate for a seed and a gain.
	run func(seed uint64, g schedule.Schedule) (sa.Result, error)
	// metric, if not nil, is the squared error of an estimate error e in
	// place of ‖e‖², and within, if > 0, a bound the default's mean
	// squared error must meet on its own (besides the 2× rule).
	metric func(e []float64) float64
	within float64
}

// sameFamily returns the default's gain with its scale replaced: the grid
// keeps the exponent, the offset and the averaging of the default.
func sameFamily(g schedule.Schedule, scale float64) schedule.Schedule {
	switch v := g.(type) {
	case schedule.Power:
		v.Scale = scale
		return v
	case schedule.Constant:
		return schedule.Constant(scale)
	}
	panic(fmt.Sprintf("calibration suite: the default chose a %T; the grid knows Power and Constant", g))
}

// linearRoot is the field h(x) = A(x − x*) + S·ε of a diagonal A (entries
// lam) and diagonal noise scales sd.
func linearRoot(lam, sd, root []float64) oracle.Field {
	return oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
		for i := range x {
			dst[i] = lam[i]*(x[i]-root[i]) + sd[i]*rng.NormFloat64()
		}
		return nil
	})
}

// olsAnswer returns the least-squares solution of A·β ≈ y by gonum's QR
// (Golub & Van Loan 2013, Matrix Computations, §5.3).
func olsAnswer(t testing.TB, a []float64, y []float64, n, p int, intercept bool) []float64 {
	t.Helper()
	c := p
	if intercept {
		c++
	}
	z := mat.NewDense(n, c, nil)
	for i := range n {
		j0 := 0
		if intercept {
			z.Set(i, 0, 1)
			j0 = 1
		}
		for j := range p {
			z.Set(i, j0+j, a[i*p+j])
		}
	}
	var qr mat.QR
	qr.Factorize(z)
	var b mat.VecDense
	if err := qr.SolveVecTo(&b, false, mat.NewVecDense(n, append([]float64(nil), y...))); err != nil {
		t.Fatal(err)
	}
	return mat.Col(nil, 0, &b)
}

// smallestEig returns the smallest eigenvalue of (1/n)·ZᵀZ·c, Z the design
// with the intercept column when asked (gonum's EigenSym).
func smallestEig(a []float64, n, p int, intercept bool, c float64) float64 {
	d := p
	if intercept {
		d++
	}
	g := mat.NewSymDense(d, nil)
	row := make([]float64, d)
	for i := range n {
		j0 := 0
		if intercept {
			row[0], j0 = 1, 1
		}
		copy(row[j0:], a[i*p:(i+1)*p])
		for r := range d {
			for s := r; s < d; s++ {
				g.SetSym(r, s, g.At(r, s)+c*row[r]*row[s]/float64(n))
			}
		}
	}
	var es mat.EigenSym
	es.Factorize(g, false)
	return es.Values(nil)[0]
}

// sumRun returns a run function of MinimizeSum on model m with batches of
// one sample drawn with replacement and the given epoch budget.
func sumRun(m *oracle.Regression, epochs int) func(uint64, schedule.Schedule) (sa.Result, error) {
	return sumRunBurn(m, epochs, 0)
}

// sumRunBurn is sumRun with the first burn steps left out of the average.
func sumRunBurn(m *oracle.Regression, epochs, burn int) func(uint64, schedule.Schedule) (sa.Result, error) {
	return func(seed uint64, g schedule.Schedule) (sa.Result, error) {
		b, err := oracle.NewMiniBatch(m, sampling.NewUniform(m.Len()), 1, oracle.BatchSettings{Workers: 1})
		if err != nil {
			return sa.Result{}, err
		}
		defer b.Close()
		return sa.MinimizeSum(context.Background(), b, make([]float64, m.Dim()), sa.Settings{Gain: g, MaxEpochs: epochs, BurnIn: burn, Seed: seed, Inference: sa.Inference{Covariance: sa.CovarianceOff}})
	}
}

// calibrationProblems builds the suite. long selects the full budgets.
func calibrationProblems(t testing.TB, long bool) []calProblem {
	steps := 2000
	if long {
		steps = 10000
	}
	var ps []calProblem
	off := sa.Inference{Covariance: sa.CovarianceOff}

	// Scalar roots h(x) = s·(x − 5) + s·ε: the noise is 1 in units of x,
	// so n·MSE of the averaged estimate tends to σ²/s² = 1 (Polyak &
	// Juditsky 1992, SIAM J. Control Optim. 30(4), Theorem 2: the
	// asymptotic covariance A⁻¹SA⁻ᵀ).
	for _, s := range []float64{1e-3, 1, 1e3} {
		h := linearRoot([]float64{s}, []float64{s}, []float64{5})
		p := calProblem{name: fmt.Sprintf("scalar root, slope %g", s), slope: s, answer: []float64{5}, center: 1,
			run: func(seed uint64, g schedule.Schedule) (sa.Result, error) {
				return sa.RobbinsMonro(context.Background(), h, []float64{0}, sa.Settings{Gain: g, MaxSteps: steps, Seed: seed, Inference: off})
			}}
		if s == 1 {
			p.pj, p.n = 1, steps
		}
		ps = append(ps, p)
	}

	// 10-dimensional linear root, A = diag(1, …, 3), noise sd 1 per
	// coordinate: the Polyak–Juditsky bound is tr(A⁻¹A⁻ᵀ) = Σ 1/λ_i².
	{
		lam, sd, root := make([]float64, 10), make([]float64, 10), make([]float64, 10)
		pj := 0.0
		for i := range lam {
			lam[i] = 1 + 2*float64(i)/9
			sd[i] = 1
			root[i] = float64(i%3) - 1
			pj += 1 / (lam[i] * lam[i])
		}
		h := linearRoot(lam, sd, root)
		ps = append(ps, calProblem{name: "linear root, d = 10, A = diag(1…3)", slope: 1, answer: root, center: 1, pj: pj, n: steps,
			run: func(seed uint64, g schedule.Schedule) (sa.Result, error) {
				return sa.RobbinsMonro(context.Background(), h, make([]float64, 10), sa.Settings{Gain: g, MaxSteps: steps, Seed: seed, Inference: off})
			}})
	}

	// Quantiles by Robbins–Monro (h = 1{Z ≤ q} − p, slope f(q) at the
	// root): the 0.9 quantile of N(0, 100²) and the median of an
	// exponential law of rate 100; answers from gonum's distuv.
	{
		nd := distuv.Normal{Mu: 0, Sigma: 100}
		q := nd.Quantile(0.9)
		h := quantileField(0.9, func(r *rand.Rand) float64 { return 100 * r.NormFloat64() })
		ps = append(ps, calProblem{name: "0.9 quantile of N(0, 100²)", slope: nd.Prob(q), answer: []float64{q}, center: 1,
			run: func(seed uint64, g schedule.Schedule) (sa.Result, error) {
				return sa.RobbinsMonro(context.Background(), h, []float64{0}, sa.Settings{Gain: g, MaxSteps: steps, Seed: seed, Inference: off})
			}})
		ed := distuv.Exponential{Rate: 100}
		m := ed.Quantile(0.5)
		he := quantileField(0.5, func(r *rand.Rand) float64 { return r.ExpFloat64() / 100 })
		ps = append(ps, calProblem{name: "median of Exp(rate 100)", slope: ed.Prob(m), answer: []float64{m}, center: 1,
			run: func(seed uint64, g schedule.Schedule) (sa.Result, error) {
				return sa.RobbinsMonro(context.Background(), he, []float64{0}, sa.Settings{Gain: g, MaxSteps: steps, Seed: seed, Inference: off})
			}})
	}

	// Least squares without intercept, n = 2000, d = 5, columns of
	// independent normals scaled so that the eigenvalues of the Gram
	// matrix span 1 (condition 1) or 1e-3 … 1 (condition 1e3); answer by
	// gonum's QR.
	epochs := 1
	if long {
		epochs = 5
	}
	for _, cond := range []float64{1, 1e3} {
		const n, p = 2000, 5
		rng := rand.New(rand.NewPCG(21, uint64(cond)))
		a, y := make([]float64, n*p), make([]float64, n)
		for i := range n {
			for j := range p {
				a[i*p+j] = rng.NormFloat64() * math.Pow(cond, -0.5*float64(j)/(p-1))
			}
			y[i] = 1 + floats.Sum(a[i*p:(i+1)*p]) + 0.5*rng.NormFloat64()
		}
		m, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: p}, y, oracle.RegressionSettings{NoIntercept: true})
		if err != nil {
			t.Fatal(err)
		}
		ps = append(ps, calProblem{name: fmt.Sprintf("least squares, condition %g", cond), slope: smallestEig(a, n, p, false, 1),
			answer: olsAnswer(t, a, y, n, p, false), center: 1e-2, run: sumRun(m, epochs)})
	}

	// Logistic regression, n = 20000, d = 5 (genLogistic): answer by
	// gonum's BFGS (logisticBFGS); slope bound λ_min(ZᵀZ/n)/4. Long form
	// only (20 000 steps a run).
	if long {
		const n, d = 20000, 5
		a, y := genLogistic(n, d, 7)
		m, err := oracle.NewLogistic(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
		if err != nil {
			t.Fatal(err)
		}
		tt, _ := t.(*testing.T)
		ps = append(ps, calProblem{name: "logistic regression, n = 20000, d = 5", slope: smallestEig(a, n, d, true, 0.25),
			answer: logisticBFGS(tt, a, y, n, d), center: 1, run: sumRun(m, max(1, epochs/2))})
	}

	// SPSA and Kiefer–Wolfowitz on Spall's skewed quartic, p = 10, θ0 = 1,
	// noise sd 0.1, sizes 0.1/(k+1)^0.101 (Spall 1998, "Implementation of
	// the simultaneous perturbation algorithm for stochastic
	// optimization", IEEE Trans. Aerosp. Electron. Syst. 34(3)); θ* = 0.
	// Slope: λ_min of the Hessian 2BᵀB at 0. Long form only (100 000
	// measurements a run). The MSE is in θ, which on this loss is
	// dominated by its flattest direction (λ_min = 0.005): there a
	// smaller gain than the one that minimises the loss wins, since the
	// iterate wanders along the valley in proportion to the gain.
	if long {
		const p = 10
		f := skewedQuartic(p, 0.1)
		x0 := make([]float64, p)
		for i := range x0 {
			x0[i] = 1
		}
		b := mat.NewDense(p, p, nil)
		for i := range p {
			for j := i; j < p; j++ {
				b.Set(i, j, 1.0/p)
			}
		}
		var h mat.SymDense
		h.SymOuterK(2, b.T())
		var es mat.EigenSym
		es.Factorize(&h, false)
		budget := 10 * steps
		for _, method := range []string{"SPSA", "KW"} {
			ps = append(ps, calProblem{name: method + ", skewed quartic p = 10", slope: es.Values(nil)[0], answer: make([]float64, p), center: 1,
				run: func(seed uint64, g schedule.Schedule) (sa.Result, error) {
					gr, err := newGradientFree(method, f, p, schedule.PowerSizes{Scale: 0.1, Exponent: schedule.SpallGamma})
					if err != nil {
						return sa.Result{}, err
					}
					return sa.RobbinsMonro(context.Background(), gr, x0, sa.Settings{Gain: g, MaxMeasurements: budget, Seed: seed, Inference: off})
				}})
		}
	}

	// NIST StRD Norris without standardisation (certified values B0, B1
	// and residual sd; see norris): single-sample SGD with replacement
	// from x0 = 0, the first half of the steps left out of the average
	// (the same for every gain). The raw column (x up to 10³) makes the
	// Hessian's condition number about 7·10⁵: the intercept direction
	// moves by a fraction γ·λ_min ≈ 10⁻⁷ per step, so no gain of any
	// scale recovers B0 in this budget, and its squared error (≈ B0²)
	// would swamp a plain MSE for every gain alike. The error is
	// therefore measured in the certified fit's own covariance σ²(ZᵀZ)⁻¹,
	// eᵀZᵀZe/σ² with σ the certified residual sd, and the default must
	// land on average inside the 95% joint confidence region of the
	// certified estimate, eᵀZᵀZe/σ² ≤ 2·F(0.95; 2, 34) = 6.58 (Draper &
	// Smith 1998, Applied Regression Analysis, 3rd ed., §5.4, the joint
	// confidence region of the coefficients; from memory; F quantile from
	// gonum's distuv). That is a real check: B1 must be right to about its
	// certified standard error 4.3·10⁻⁴ (a B1 off by 10⁻³ alone gives 14),
	// while the intercept, certified as −0.26 ± 0.23, may stay near 0.
	{
		x, y := make([]float64, len(norris)), make([]float64, len(norris))
		for i, r := range norris {
			y[i], x[i] = r[0], r[1]
		}
		m, err := oracle.NewLeastSquares(oracle.Dense{Data: x, Cols: 1}, y, oracle.RegressionSettings{})
		if err != nil {
			t.Fatal(err)
		}
		var s00, s01, s11 float64
		for _, v := range x {
			s00++
			s01 += v
			s11 += v * v
		}
		const sigma = norrisResidualSD
		metric := func(e []float64) float64 {
			return (s00*e[0]*e[0] + 2*s01*e[0]*e[1] + s11*e[1]*e[1]) / (sigma * sigma)
		}
		n := len(norris)
		epochs := 50
		if long {
			epochs = 250
		}
		ps = append(ps, calProblem{name: "NIST Norris, raw x (certified-cov. error)", slope: smallestEig(x, n, 1, true, 1),
			answer: []float64{norrisB0, norrisB1}, center: 1e-6, run: sumRunBurn(m, epochs, epochs*n/2),
			metric: metric, within: 2 * distuv.F{D1: 2, D2: float64(n - 2)}.Quantile(0.95)})
	}
	return ps
}

// calRow is one line of the suite's table.
type calRow struct {
	name                           string
	slope, def, best, guess, bestA float64
	nmse, pj                       float64 // n·MSE of the default and the PJ bound, when checked
	how                            string
}

// mse runs p with gain g (nil: the default) on seeds 1…reps and returns
// the mean squared error of the estimate; a failed run makes it +Inf.
func (p calProblem) mse(g schedule.Schedule, reps int) (float64, *sa.Calibration) {
	var s float64
	var cal *sa.Calibration
	for i := range reps {
		r, err := p.run(uint64(1000+i), g)
		if err != nil {
			return math.Inf(1), r.Calibration
		}
		if cal == nil {
			cal = r.Calibration
		}
		e := r.Estimate()
		d := make([]float64, len(e))
		for j, v := range e {
			d[j] = v - p.answer[j]
		}
		if p.metric != nil {
			s += p.metric(d)
			continue
		}
		for _, v := range d {
			s += v * v
		}
	}
	return s / float64(reps), cal
}

// TestCalibrationSuite checks the self-calibrating gain (Settings.Gain nil)
// on problems with known answers whose slopes span 1e-3 to 1e3. For each
// problem, at the same budget: the MSE over reps seeds of the default run,
// of the best schedule in a grid of scales center·10^j, j = −4, …, 4 (8
// decades, the default's exponent, offset and averaging), and of the fixed
// guess scale 1 in the same family. It requires
//
//   - default MSE ≤ 2 × the grid's best on every problem;
//   - the guess MSE > 2 × the grid's best on at least half the problems
//     (else the suite is too easy);
//   - n·MSE of the default within 1.2 × the Polyak–Juditsky bound on the
//     scalar root of slope 1 and on the 10-dimensional linear root;
//   - on NIST Norris, the default inside the certified fit's 95% joint
//     confidence region (see the problem).
//
// The seeds are shared by all gains (common random numbers), so the ratios
// are less noisy than the MSEs. The default run is short (budgets of 2000
// steps, 1 epoch, 20 seeds, no Polyak–Juditsky check; 9 problems);
// STOCHROOT_LONG_TESTS=1 runs the full suite (10 000 steps, 5 epochs, 100
// seeds, and the logistic, SPSA and Kiefer–Wolfowitz problems: 12) and
// prints its table with -v (about 4 minutes without -race on a loaded
// machine).
func TestCalibrationSuite(t *testing.T) {
	long := longTests()
	reps := 20
	if long {
		reps = 100
	}
	if testing.Short() {
		t.Skip("calibration suite skipped in -short mode")
	}
	var rows []calRow
	guessFails := 0
	for _, p := range calibrationProblems(t, long) {
		def, cal := p.mse(nil, reps)
		if cal == nil {
			t.Fatalf("%s: the default run reports no Calibration", p.name)
		}
		best, bestA := math.Inf(1), 0.0
		for j := -4; j <= 4; j++ {
			a := p.center * math.Pow(10, float64(j))
			if m, _ := p.mse(sameFamily(cal.Gain, a), reps); m < best {
				best, bestA = m, a
			}
		}
		guess, _ := p.mse(sameFamily(cal.Gain, 1), reps)
		row := calRow{name: p.name, slope: p.slope, def: def, best: best, guess: guess, bestA: bestA, pj: p.pj, how: cal.Method}
		if !(def <= 2*best) {
			t.Errorf("%s: default MSE %.3g is not within 2× the grid's best %.3g (scale %g); the default chose %v: %s", p.name, def, best, bestA, cal.Gain, cal.How)
		}
		if p.within > 0 && !(def <= p.within) {
			t.Errorf("%s: the default's mean squared error %.4g exceeds %.4g", p.name, def, p.within)
		}
		if guess > 2*best {
			guessFails++
		}
		if p.pj > 0 {
			row.nmse = float64(p.n) * def
			// The bound is asymptotic: it is checked at the long form's
			// n = 10 000 (and 100 seeds); the short form prints it.
			if long && !(row.nmse <= 1.2*p.pj) {
				t.Errorf("%s: n·MSE = %.4g exceeds 1.2 × the Polyak–Juditsky bound %.4g", p.name, row.nmse, p.pj)
			}
		}
		rows = append(rows, row)
	}
	if 2*guessFails < len(rows) {
		t.Errorf("the fixed guess (scale 1) fails the 2× criterion on only %d of %d problems: the suite is too easy", guessFails, len(rows))
	}
	var b strings.Builder
	fmt.Fprintf(&b, "calibration suite, %d seeds per gain (long form %v):\n", reps, long)
	fmt.Fprintf(&b, "%-40s %9s %11s %11s %9s %8s %11s %9s %s\n", "problem", "slope", "default MSE", "best grid", "ratio", "at", "guess MSE", "ratio", "n·MSE (PJ bound)")
	for _, r := range rows {
		pj := ""
		if r.nmse > 0 {
			pj = fmt.Sprintf("%.3g (%.3g)", r.nmse, r.pj)
		}
		fmt.Fprintf(&b, "%-40s %9.3g %11.3g %11.3g %9.3g %8.0e %11.3g %9.3g %s\n", r.name, r.slope, r.def, r.best, r.def/r.best, r.bestA, r.guess, r.guess/r.best, pj)
	}
	fmt.Fprintf(&b, "fixed guess fails 2× on %d of %d problems", guessFails, len(rows))
	t.Log(b.String())
}

// norrisResidualSD is the certified residual standard deviation of the
// NIST StRD Norris data set (NIST/ITL Statistical Reference Datasets,
// Norris; the data and B0, B1 are in finitesum_reference_test.go).
const norrisResidualSD = 0.884796396144373
