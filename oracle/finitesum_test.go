package oracle_test

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"testing"
	"time"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/floats"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sampling"
)

// genData draws n rows of d features with means and scales that differ by
// column (badly scaled on purpose) and targets of each loss.
func genData(n, d int, seed uint64) (a, yReal, yLabel []float64) {
	rng := rand.New(rand.NewPCG(seed, 1))
	a = make([]float64, n*d)
	yReal = make([]float64, n)
	yLabel = make([]float64, n)
	for i := range n {
		row := a[i*d : (i+1)*d]
		z := 0.2
		for j := range row {
			scale := math.Pow(10, float64(j%4)-1)
			row[j] = scale * (rng.NormFloat64() + float64(j))
			z += 0.3 * row[j] / scale
		}
		yReal[i] = z + rng.NormFloat64()
		if rng.Float64() < 1/(1+math.Exp(-z+float64(d)/2)) {
			yLabel[i] = 1
		}
	}
	return a, yReal, yLabel
}

// TestReferenceGradientFiniteDifference checks the full-batch gradient of
// every ready-made model (each loss, with and without intercept, penalty
// and standardisation) against central finite differences of the model's
// objective computed by gonum's diff/fd. Central differences with step h
// have truncation error O(h²·f”') and rounding error O(u·|f|/h) (a
// standard result, e.g. Nocedal & Wright 2006, "Numerical Optimization",
// §8.1); with gonum's default h = 1e-6 both are below 1e-7 relative to the
// gradient's scale here. The pinball loss is piecewise linear: the check
// is exact unless a sample's kink lies within h of the evaluation point,
// which for continuous random data has probability about n·h.
func TestReferenceGradientFiniteDifference(t *testing.T) {
	n, d := 300, 4
	a, yr, yl := genData(n, d, 5)
	x := oracle.Dense{Data: a, Cols: d}
	for _, loss := range []string{"squared", "logistic", "pinball"} {
		for _, s := range []oracle.RegressionSettings{
			{}, {NoIntercept: true}, {L2: 0.3}, {Standardize: true}, {Standardize: true, NoIntercept: true, L2: 0.1},
		} {
			t.Run(fmt.Sprintf("%s/%+v", loss, s), func(t *testing.T) {
				var m *oracle.Regression
				var err error
				switch loss {
				case "squared":
					m, err = oracle.NewLeastSquares(x, yr, s)
				case "logistic":
					m, err = oracle.NewLogistic(x, yl, s)
				default:
					m, err = oracle.NewQuantile(x, yr, 0.3, s)
				}
				if err != nil {
					t.Fatal(err)
				}
				g, err := oracle.NewFullBatch(m, oracle.BatchSettings{})
				if err != nil {
					t.Fatal(err)
				}
				p := make([]float64, m.Dim())
				for j := range p {
					p[j] = 0.1 * float64(j+1) * math.Pow(-1, float64(j))
				}
				got := make([]float64, len(p))
				if err := g.Measure(got, p, nil); err != nil {
					t.Fatal(err)
				}
				want := fd.Gradient(nil, m.Value, p, &fd.Settings{Formula: fd.Central})
				scale := math.Max(1, floats.Norm(want, math.Inf(1)))
				for j := range got {
					if e := math.Abs(got[j] - want[j]); !(e <= 1e-6*scale) {
						t.Errorf("gradient[%d] = %.10g, finite difference %.10g", j, got[j], want[j])
					}
				}
			})
		}
	}
}

// TestStandardizeRoundTrip checks that ToOriginal and FromOriginal are
// inverses and that the standardised model has the same objective as the
// raw model at the mapped coefficients (a reparametrisation changes no
// loss).
func TestStandardizeRoundTrip(t *testing.T) {
	n, d := 200, 3
	a, yr, _ := genData(n, d, 6)
	x := oracle.Dense{Data: a, Cols: d}
	for _, noInt := range []bool{false, true} {
		raw, err := oracle.NewLeastSquares(x, yr, oracle.RegressionSettings{NoIntercept: noInt})
		if err != nil {
			t.Fatal(err)
		}
		std, err := oracle.NewLeastSquares(x, yr, oracle.RegressionSettings{NoIntercept: noInt, Standardize: true})
		if err != nil {
			t.Fatal(err)
		}
		p := []float64{0.5, -1.2, 2, 0.7}[:std.Dim()]
		orig := std.ToOriginal(make([]float64, len(p)), p)
		back := std.FromOriginal(make([]float64, len(p)), orig)
		for j := range p {
			if math.Abs(back[j]-p[j]) > 1e-12*math.Max(1, math.Abs(p[j])) {
				t.Errorf("NoIntercept=%v: FromOriginal(ToOriginal(p))[%d] = %v, want %v", noInt, j, back[j], p[j])
			}
		}
		if vs, vr := std.Value(p), raw.Value(orig); math.Abs(vs-vr) > 1e-10*math.Abs(vr) {
			t.Errorf("NoIntercept=%v: standardised objective %v, raw objective at mapped coefficients %v", noInt, vs, vr)
		}
	}
}

// TestWorkersBitForBit checks that a batch gives the same gradient bit for
// bit for every number of workers, for mini-batches with and without
// replacement and for the full batch, including after Close.
func TestWorkersBitForBit(t *testing.T) {
	n, d := 20000, 30
	a, yr, _ := genData(n, d, 7)
	m, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, yr, oracle.RegressionSettings{})
	if err != nil {
		t.Fatal(err)
	}
	x := make([]float64, m.Dim())
	for j := range x {
		x[j] = 0.01 * float64(j)
	}
	type build func(w int) *oracle.MiniBatch
	mk := func(s func() sampling.Sampler, size int) build {
		return func(w int) *oracle.MiniBatch {
			b, err := oracle.NewMiniBatch(m, s(), size, oracle.BatchSettings{Workers: w})
			if err != nil {
				t.Fatal(err)
			}
			return b
		}
	}
	cases := map[string]build{
		"uniform-4096":  mk(func() sampling.Sampler { return sampling.NewUniform(n) }, 4096),
		"shuffled-3001": mk(func() sampling.Sampler { return sampling.NewShuffled(n) }, 3001),
		"full": func(w int) *oracle.MiniBatch {
			b, err := oracle.NewFullBatch(m, oracle.BatchSettings{Workers: w})
			if err != nil {
				t.Fatal(err)
			}
			return b
		},
	}
	for name, mkb := range cases {
		t.Run(name, func(t *testing.T) {
			var ref [][]float64
			for _, w := range []int{1, 2, 3, 5, 8} {
				b := mkb(w)
				if b.Workers() < min(w, 2) {
					t.Fatalf("Workers() = %d with %d requested: batch not split", b.Workers(), w)
				}
				rng := rand.New(rand.NewPCG(1, 2))
				var got [][]float64
				for k := range 4 {
					if k == 3 {
						b.Close() // the rest runs on the calling goroutine
					}
					y := make([]float64, len(x))
					if err := b.Measure(y, x, rng); err != nil {
						t.Fatal(err)
					}
					got = append(got, y)
				}
				b.Close()
				if ref == nil {
					ref = got
					continue
				}
				for k := range got {
					for j := range got[k] {
						if math.Float64bits(got[k][j]) != math.Float64bits(ref[k][j]) {
							t.Fatalf("workers %d, batch %d: y[%d] = %x, with 1 worker %x", w, k, j, math.Float64bits(got[k][j]), math.Float64bits(ref[k][j]))
						}
					}
				}
			}
		})
	}
}

// counting wraps a finite sum and counts how often each sample is used.
type counting struct {
	oracle.FiniteSum
	hits []int
}

func (c *counting) AddGradient(dst, x []float64, i int, w float64) {
	c.hits[i]++
	c.FiniteSum.AddGradient(dst, x, i, w)
}

// TestReferenceBatchOfNWithAndWithoutReplacement checks a fact of the
// trade (common practice): a batch of size n drawn WITHOUT replacement is
// every sample once, so its step is BGD's step up to summation order,
// while a batch of n drawn WITH replacement repeats some samples and
// misses others, so its step differs.
//
// Rounding bound: see sumBound.
//
// Missed samples: the number of items missed by n uniform draws from n is
// the number of empty urns in the classical occupancy problem, with mean
// n(1−1/n)^n and variance n(n−1)(1−2/n)^n + n(1−1/n)^n − n²(1−1/n)^{2n}
// (Feller 1968, "An Introduction to Probability Theory and Its
// Applications", Vol. I, §IV.2); the count must lie within 5 standard
// deviations of the mean.
func TestReferenceBatchOfNWithAndWithoutReplacement(t *testing.T) {
	n, d := 500, 3
	a, yr, _ := genData(n, d, 8)
	ls, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, yr, oracle.RegressionSettings{})
	if err != nil {
		t.Fatal(err)
	}
	x := []float64{0.3, -0.2, 0.1, 0.4}
	full, _ := oracle.NewFullBatch(ls, oracle.BatchSettings{})
	want := make([]float64, len(x))
	full.Measure(want, x, nil)

	bound := sumBound(a, yr, d, x)
	measure := func(s sampling.Sampler) ([]float64, []int) {
		c := &counting{FiniteSum: ls, hits: make([]int, n)}
		b, err := oracle.NewMiniBatch(c, s, n, oracle.BatchSettings{Workers: 1})
		if err != nil {
			t.Fatal(err)
		}
		y := make([]float64, len(x))
		b.Measure(y, x, rand.New(rand.NewPCG(3, 4)))
		return y, c.hits
	}

	t.Run("without replacement", func(t *testing.T) {
		y, hits := measure(sampling.NewShuffled(n))
		for i, h := range hits {
			if h != 1 {
				t.Fatalf("sample %d used %d times, want once", i, h)
			}
		}
		for j := range y {
			if e := math.Abs(y[j] - want[j]); !(e <= bound[j]) {
				t.Errorf("y[%d] = %.17g, BGD %.17g: differ by %.3g > rounding bound %.3g", j, y[j], want[j], e, bound[j])
			}
		}
	})
	t.Run("with replacement", func(t *testing.T) {
		y, hits := measure(sampling.NewUniform(n))
		missed := 0
		for _, h := range hits {
			if h == 0 {
				missed++
			}
		}
		nf := float64(n)
		mean := nf * math.Pow(1-1/nf, nf)
		variance := nf*(nf-1)*math.Pow(1-2/nf, nf) + mean - mean*mean
		if math.Abs(float64(missed)-mean) > 5*math.Sqrt(variance) {
			t.Errorf("missed %d samples, occupancy theory %.1f ± %.1f", missed, mean, math.Sqrt(variance))
		}
		if missed == 0 {
			t.Fatal("batch of n with replacement missed no sample")
		}
		differs := false
		for j := range y {
			if math.Abs(y[j]-want[j]) > bound[j] {
				differs = true
			}
		}
		if !differs {
			t.Errorf("with-replacement batch of n gives BGD's gradient %v up to rounding: %v", want, y)
		}
		t.Logf("with replacement: %d of %d samples missed (theory %.1f ± %.1f); gradient %.4g vs BGD %.4g", missed, n, mean, math.Sqrt(variance), y, want)
	})
}

func TestBadInput(t *testing.T) {
	good := oracle.Dense{Data: []float64{1, 2, 3, 4, 5, 7}, Cols: 2}
	y := []float64{1, 0, 1}
	ls, _ := oracle.NewLeastSquares(good, y, oracle.RegressionSettings{})
	nan := math.NaN()
	for _, tc := range []struct {
		name string
		err  error
		want error
	}{
		{"empty data", func() error {
			_, err := oracle.NewLeastSquares(oracle.Dense{Cols: 2}, nil, oracle.RegressionSettings{})
			return err
		}(), oracle.ErrData},
		{"no rows", func() error { _, err := oracle.DenseFromRows(nil); return err }(), oracle.ErrData},
		{"zero columns", func() error {
			_, err := oracle.NewLeastSquares(oracle.Dense{Data: []float64{1}}, []float64{1}, oracle.RegressionSettings{})
			return err
		}(), oracle.ErrData},
		{"ragged rows", func() error { _, err := oracle.DenseFromRows([][]float64{{1, 2}, {3}}); return err }(), oracle.ErrData},
		{"ragged flat data", func() error {
			_, err := oracle.NewLeastSquares(oracle.Dense{Data: []float64{1, 2, 3}, Cols: 2}, []float64{1}, oracle.RegressionSettings{})
			return err
		}(), oracle.ErrData},
		{"target count", func() error {
			_, err := oracle.NewLeastSquares(good, []float64{1, 2}, oracle.RegressionSettings{})
			return err
		}(), oracle.ErrData},
		{"NaN in data", func() error {
			_, err := oracle.NewLeastSquares(oracle.Dense{Data: []float64{1, nan, 3, 4}, Cols: 2}, []float64{1, 2}, oracle.RegressionSettings{})
			return err
		}(), oracle.ErrData},
		{"Inf in targets", func() error {
			_, err := oracle.NewLeastSquares(good, []float64{1, math.Inf(1), 2}, oracle.RegressionSettings{})
			return err
		}(), oracle.ErrData},
		{"label 2 for logistic", func() error {
			_, err := oracle.NewLogistic(good, []float64{1, 2, 0}, oracle.RegressionSettings{})
			return err
		}(), oracle.ErrData},
		{"label 0.5 for logistic", func() error {
			_, err := oracle.NewLogistic(good, []float64{1, 0.5, 0}, oracle.RegressionSettings{})
			return err
		}(), oracle.ErrData},
		{"constant column standardised", func() error {
			_, err := oracle.NewLeastSquares(oracle.Dense{Data: []float64{1, 5, 2, 5, 3, 5}, Cols: 2}, y, oracle.RegressionSettings{Standardize: true})
			return err
		}(), oracle.ErrData},
		{"zero column standardised without intercept", func() error {
			_, err := oracle.NewLeastSquares(oracle.Dense{Data: []float64{1, 0, 2, 0, 3, 0}, Cols: 2}, y, oracle.RegressionSettings{Standardize: true, NoIntercept: true})
			return err
		}(), oracle.ErrData},
		{"negative L2", func() error { _, err := oracle.NewLeastSquares(good, y, oracle.RegressionSettings{L2: -1}); return err }(), oracle.ErrSettings},
		{"NaN L2", func() error {
			_, err := oracle.NewLeastSquares(good, y, oracle.RegressionSettings{L2: nan})
			return err
		}(), oracle.ErrSettings},
		{"tau 1", func() error { _, err := oracle.NewQuantile(good, y, 1, oracle.RegressionSettings{}); return err }(), oracle.ErrSettings},
		{"tau NaN", func() error { _, err := oracle.NewQuantile(good, y, nan, oracle.RegressionSettings{}); return err }(), oracle.ErrSettings},
		{"batch size 0", func() error {
			_, err := oracle.NewMiniBatch(ls, sampling.NewUniform(3), 0, oracle.BatchSettings{})
			return err
		}(), oracle.ErrSettings},
		{"batch above n without replacement", func() error {
			_, err := oracle.NewMiniBatch(ls, sampling.NewShuffled(3), 4, oracle.BatchSettings{})
			return err
		}(), oracle.ErrSettings},
		{"batch above n sequential", func() error {
			_, err := oracle.NewMiniBatch(ls, sampling.NewSequential(3), 4, oracle.BatchSettings{})
			return err
		}(), oracle.ErrSettings},
		{"sampler of other length", func() error {
			_, err := oracle.NewMiniBatch(ls, sampling.NewUniform(4), 1, oracle.BatchSettings{})
			return err
		}(), oracle.ErrSettings},
		{"nil sampler", func() error { _, err := oracle.NewMiniBatch(ls, nil, 1, oracle.BatchSettings{}); return err }(), oracle.ErrSettings},
		{"nil finite sum", func() error { _, err := oracle.NewFullBatch(nil, oracle.BatchSettings{}); return err }(), oracle.ErrSettings},
		{"negative workers", func() error { _, err := oracle.NewFullBatch(ls, oracle.BatchSettings{Workers: -1}); return err }(), oracle.ErrSettings},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if !errors.Is(tc.err, tc.want) {
				t.Errorf("error = %v, want one wrapping %v", tc.err, tc.want)
			}
		})
	}
	// With replacement, a batch larger than n is fine.
	if _, err := oracle.NewMiniBatch(ls, sampling.NewUniform(3), 10, oracle.BatchSettings{}); err != nil {
		t.Errorf("batch 10 of 3 with replacement: %v", err)
	}
	// Length mismatches in the kernels are programmer errors: documented
	// panics.
	b, _ := oracle.NewFullBatch(ls, oracle.BatchSettings{})
	for name, f := range map[string]func(){
		"Measure":     func() { b.Measure(make([]float64, 2), make([]float64, 3), nil) },
		"AddGradient": func() { ls.AddGradient(make([]float64, 3), make([]float64, 2), 0, 1) },
		"ToOriginal":  func() { ls.ToOriginal(make([]float64, 3), make([]float64, 2)) },
	} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("%s with mismatched lengths did not panic", name)
				}
			}()
			f()
		}()
	}
}

// TestMiniBatchCounts checks the counters: evaluations, epochs, reset.
func TestMiniBatchCounts(t *testing.T) {
	n, d := 100, 2
	a, yr, _ := genData(n, d, 9)
	ls, _ := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, yr, oracle.RegressionSettings{})
	s := sampling.NewShuffled(n)
	b, err := oracle.NewMiniBatch(ls, s, 25, oracle.BatchSettings{Workers: 4})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 1))
	y, x := make([]float64, 3), make([]float64, 3)
	for range 6 {
		b.Measure(y, x, rng)
	}
	if b.Evaluations() != 150 || b.Epochs() != 1.5 || s.Epoch() != 1 || b.MeasurementsPerCall() != 25 {
		t.Errorf("Evaluations %d, Epochs %v, sampler epoch %d, per call %d; want 150, 1.5, 1, 25", b.Evaluations(), b.Epochs(), s.Epoch(), b.MeasurementsPerCall())
	}
	// Small batches stay on the calling goroutine whatever Workers says.
	if b.Workers() != 1 {
		t.Errorf("batch of 25 in dimension 3: Workers() = %d, want 1", b.Workers())
	}
	b.Reset()
	if b.Evaluations() != 0 || s.Epoch() != 0 {
		t.Errorf("after Reset: Evaluations %d, sampler epoch %d", b.Evaluations(), s.Epoch())
	}
}

// sumBound returns, per coordinate, a bound on the difference between two
// floating-point evaluations of the least-squares full gradient
// (1/n) Σ r_i·(1, a_i) at x with r_i = b₀ + a_i·β − y_i, computed with the
// samples in different orders and the margins with different dot-product
// orders (Higham 2002, "Accuracy and Stability of Numerical Algorithms",
// §3.1 and §4.2, γ_k = ku/(1−ku), u = 2⁻⁵³):
//
//   - each sum of n terms is within γ_n·Σ|terms| of the exact sum;
//   - each margin is within γ_{d+1}·(|b₀| + Σ_j |a_ij β_j|) of the exact
//     one, and the error passes 1:1 into r_i;
//
// twice each, for the two evaluations.
func sumBound(a, y []float64, d int, x []float64) []float64 {
	n := len(y)
	u := 0x1p-53
	gn := float64(n) * u / (1 - float64(n)*u)
	gd := float64(d+1) * u / (1 - float64(d+1)*u)
	out := make([]float64, d+1)
	for i := range n {
		row := a[i*d : (i+1)*d]
		r := x[0] - y[i]
		mag := math.Abs(x[0])
		for j, v := range row {
			r += v * x[j+1]
			mag += math.Abs(v * x[j+1])
		}
		for j := range d + 1 {
			zj := 1.0
			if j > 0 {
				zj = math.Abs(row[j-1])
			}
			out[j] += (2*gn*math.Abs(r)*zj + 2*gd*mag*zj) / float64(n)
		}
	}
	return out
}

// TestCloseStopsWorkers checks that the worker goroutines start with the
// first parallel batch and stop on Close, and that a MiniBatch abandoned
// without Close has its workers stopped once it is collected.
func TestCloseStopsWorkers(t *testing.T) {
	n, d := 4000, 50
	a, yr, _ := genData(n, d, 10)
	ls, _ := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, yr, oracle.RegressionSettings{})
	x, y := make([]float64, d+1), make([]float64, d+1)
	waitFor := func(want int) int {
		got := runtime.NumGoroutine()
		for range 200 {
			if got = runtime.NumGoroutine(); got <= want {
				return got
			}
			runtime.GC()
			time.Sleep(5 * time.Millisecond)
		}
		return got
	}
	// Let the workers of earlier tests finish exiting.
	before, stable := runtime.NumGoroutine(), 0
	for range 200 {
		runtime.GC()
		time.Sleep(5 * time.Millisecond)
		if g := runtime.NumGoroutine(); g == before {
			if stable++; stable == 3 {
				break
			}
		} else {
			before, stable = g, 0
		}
	}
	b, _ := oracle.NewFullBatch(ls, oracle.BatchSettings{Workers: 4})
	if got := runtime.NumGoroutine(); got != before {
		t.Errorf("goroutines before the first batch: %d, want %d", got, before)
	}
	b.Measure(y, x, nil)
	if got := runtime.NumGoroutine(); got != before+3 {
		t.Errorf("goroutines after a parallel batch: %d, want %d", got, before+3)
	}
	b.Close()
	if got := waitFor(before); got > before {
		t.Errorf("goroutines after Close: %d, want %d", got, before)
	}
	func() {
		b2, _ := oracle.NewFullBatch(ls, oracle.BatchSettings{Workers: 3})
		b2.Measure(y, x, nil)
	}()
	if got := waitFor(before); got > before {
		t.Errorf("goroutines after an abandoned MiniBatch was collected: %d, want %d", got, before)
	}
}
