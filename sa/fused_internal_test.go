package sa

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sampling"
	"github.com/stochroot/stochroot/schedule"
)

// fusedData returns n rows of d standard normal features and targets
// y = 1 + Σ_j a_j·(j+1)/d + N(0, 1), and binary labels for the logistic
// model: invented test data, used only to compare two code paths. For
// d ≥ 3 the last feature is 0 in every row, so that gradient coordinates
// of ±0 meet a starting point of −0 there (the sign of the zero is part
// of the bits compared).
func fusedData(n, d int, seed uint64) (a, y, labels []float64) {
	rng := rand.New(rand.NewPCG(seed, 7))
	a = make([]float64, n*d)
	y = make([]float64, n)
	labels = make([]float64, n)
	for i := range n {
		z := 1.0
		for j := range d {
			v := rng.NormFloat64()
			a[i*d+j] = v
			z += v * float64(j+1) / float64(d)
		}
		if d >= 3 {
			a[i*d+d-1] = 0
		}
		y[i] = z + rng.NormFloat64()
		if y[i] > 1 {
			labels[i] = 1
		}
	}
	return a, y, labels
}

// sameBits is in tuner_badinput_test.go.

// resultsSame compares two Results bit for bit: the vectors by their bit
// patterns, everything else through its printed form (%v prints −0 as
// "-0" and floats to the last bit).
func resultsSame(t *testing.T, what string, got, want Result) {
	t.Helper()
	if !sameBits(got.X, want.X) {
		t.Errorf("%s: X = %v, want %v", what, got.X, want.X)
	}
	if !sameBits(got.Average, want.Average) {
		t.Errorf("%s: Average = %v, want %v", what, got.Average, want.Average)
	}
	eg, ew := got.ErrorBars, want.ErrorBars
	for _, p := range [][2][]float64{{eg.Center, ew.Center}, {eg.StdErr, ew.StdErr}, {eg.HalfWidth, ew.HalfWidth}} {
		if !sameBits(p[0], p[1]) {
			t.Errorf("%s: error bars differ: %v, want %v", what, p[0], p[1])
		}
	}
	if (eg.Covariance == nil) != (ew.Covariance == nil) {
		t.Errorf("%s: covariance present %v, want %v", what, eg.Covariance != nil, ew.Covariance != nil)
	} else if eg.Covariance != nil && !sameBits(eg.Covariance.RawSymmetric().Data, ew.Covariance.RawSymmetric().Data) {
		t.Errorf("%s: covariances differ", what)
	}
	got.X, got.Average, want.X, want.Average = nil, nil, nil, nil
	got.ErrorBars.Covariance, want.ErrorBars.Covariance = nil, nil
	if g, w := fmt.Sprintf("%+v", got), fmt.Sprintf("%+v", want); g != w {
		t.Errorf("%s: results differ:\n got %s\nwant %s", what, g, w)
	}
}

// TestFusedMatchesPull checks that MinimizeSum's fused loop (runSum with
// the rank-one update of MiniBatch.MeasureRankOne) gives the same Result
// bit for bit as the general pull loop (measure, then step), and the same
// error, over the models, dimensions (both sides of vectorKernelMin and of
// the regression's dot-kernel switch), stop rules, inference modes, batch
// sizes and samplers it serves, with −0 in the starting point.
func TestFusedMatchesPull(t *testing.T) {
	const n = 60
	for _, d := range []int{1, 3, 10, 30, 70} {
		a, y, labels := fusedData(n, d, uint64(d))
		type model struct {
			name string
			f    oracle.FiniteSum
		}
		var models []model
		add := func(name string, f *oracle.Regression, err error) {
			if err != nil {
				t.Fatal(err)
			}
			models = append(models, model{name, f})
		}
		x := oracle.Dense{Data: a, Cols: d}
		f, err := oracle.NewLeastSquares(x, y, oracle.RegressionSettings{})
		add("squared", f, err)
		f, err = oracle.NewLeastSquares(x, y, oracle.RegressionSettings{NoIntercept: true, L2: 0.1})
		add("squared/no-intercept/L2", f, err)
		f, err = oracle.NewLogistic(x, labels, oracle.RegressionSettings{L2: 0.01})
		add("logistic/L2", f, err)
		f, err = oracle.NewQuantile(x, y, 0.3, oracle.RegressionSettings{})
		add("quantile", f, err)
		models = append(models, model{"own FiniteSum", plainSum{f}})
		for _, m := range models {
			dim := m.f.Dim()
			x0 := make([]float64, dim)
			x0[0] = math.Copysign(0, -1)
			x0[dim-1] = math.Copysign(0, -1)
			for _, c := range []struct {
				name    string
				size    int
				shuffle bool
				s       Settings
			}{
				{"off", 1, false, Settings{Gain: schedule.Power{Scale: 0.05, Exponent: 0.6}, MaxSteps: 300, Inference: Inference{Covariance: CovarianceOff}, Seed: 3}},
				{"off/burn-in/epochs", 1, true, Settings{Gain: schedule.Power{Scale: 0.05, Exponent: 0.6}, BurnIn: 40, MaxEpochs: 4, Inference: Inference{Covariance: CovarianceOff}, Seed: 4}},
				{"full/measurements", 1, false, Settings{Gain: schedule.Power{Scale: 0.05, Exponent: 0.7}, MaxMeasurements: 500, Inference: Inference{Covariance: CovarianceFull}, Seed: 5}},
				{"diagonal/burn-in", 1, true, Settings{Gain: schedule.Power{Scale: 0.05, Exponent: 0.6}, MaxSteps: 400, BurnIn: 30, Inference: Inference{Covariance: CovarianceDiagonal}, Seed: 6}},
				{"constant gain", 1, false, Settings{Gain: schedule.Constant(0.01), MaxSteps: 200, Seed: 7}},
				{"batch 3", 3, true, Settings{Gain: schedule.Power{Scale: 0.05, Exponent: 0.6}, MaxSteps: 150, Seed: 8}},
			} {
				var smp func() sampling.Sampler = func() sampling.Sampler { return sampling.NewUniform(n) }
				if c.shuffle {
					smp = func() sampling.Sampler { return sampling.NewShuffled(n) }
				}
				run := func(fuse bool) (Result, error) {
					g, err := oracle.NewMiniBatch(m.f, smp(), c.size, oracle.BatchSettings{Workers: 1})
					if err != nil {
						t.Fatal(err)
					}
					return minimizeSum(context.Background(), g, x0, c.s, fuse)
				}
				what := fmt.Sprintf("d=%d/%s/%s", d, m.name, c.name)
				got, gerr := run(true)
				want, werr := run(false)
				if fmt.Sprint(gerr) != fmt.Sprint(werr) {
					t.Errorf("%s: error %v, want %v", what, gerr, werr)
				}
				resultsSame(t, what, got, want)
			}
		}
	}
}

// plainSum hides the concrete *oracle.Regression behind the FiniteSum
// interface, so that the MiniBatch takes its general path.
type plainSum struct{ f oracle.FiniteSum }

func (p plainSum) Len() int                                       { return p.f.Len() }
func (p plainSum) Dim() int                                       { return p.f.Dim() }
func (p plainSum) AddGradient(dst, x []float64, i int, w float64) { p.f.AddGradient(dst, x, i, w) }

// nanAt is a gain a/(k+1) that is NaN from step k = at on.
type nanAt struct{ at int }

func (g nanAt) Gain(k int) float64 {
	if k >= g.at {
		return math.NaN()
	}
	return 0.05 / float64(k+1)
}

// TestFusedFailures checks that the failures of a step end the fused loop
// as they end the pull loop: the same error (a non-finite gradient wraps
// ErrNotFinite, an overflowing update ErrDiverged, a bad gain ErrGain) and
// the same Result, with the last accepted iterate and average.
func TestFusedFailures(t *testing.T) {
	const n, d = 40, 5
	a, y, _ := fusedData(n, d, 11)
	big := make([]float64, len(a))
	copy(big, a)
	for j := range d {
		big[7*d+j] = 1e200 // sample 7 sends the margin to ±Inf at x = 1e200
	}
	for _, c := range []struct {
		name string
		data []float64
		x0   float64
		gain schedule.Schedule
		want error
	}{
		{"gradient not finite", big, 1e200, schedule.Power{Scale: 1e-300, Exponent: 0.6}, ErrNotFinite},
		{"update overflows", a, 0, schedule.Constant(1e307), ErrDiverged},
		{"gain NaN", a, 0, nanAt{at: 25}, ErrGain},
	} {
		for _, inf := range []CovarianceMode{CovarianceOff, CovarianceAuto} {
			f, err := oracle.NewLeastSquares(oracle.Dense{Data: c.data, Cols: d}, y, oracle.RegressionSettings{})
			if err != nil {
				t.Fatal(err)
			}
			x0 := make([]float64, d+1)
			for i := range x0 {
				x0[i] = c.x0
			}
			s := Settings{Gain: c.gain, MaxSteps: 2000, Inference: Inference{Covariance: inf}}
			run := func(fuse bool) (Result, error) {
				g, err := oracle.NewMiniBatch(f, sampling.NewUniform(n), 1, oracle.BatchSettings{})
				if err != nil {
					t.Fatal(err)
				}
				return minimizeSum(context.Background(), g, x0, s, fuse)
			}
			what := fmt.Sprintf("%s/inference %d", c.name, inf)
			got, gerr := run(true)
			want, werr := run(false)
			if !errors.Is(gerr, c.want) {
				t.Errorf("%s: error %v, want one wrapping %v", what, gerr, c.want)
			}
			if fmt.Sprint(gerr) != fmt.Sprint(werr) {
				t.Errorf("%s: error %v, want %v", what, gerr, werr)
			}
			for _, v := range got.X {
				if math.IsNaN(v) || math.IsInf(v, 0) {
					t.Errorf("%s: Result.X holds %v", what, v)
				}
			}
			resultsSame(t, what, got, want)
		}
	}
}

// TestMinimizeSumStepAllocations checks that the steps of MinimizeSum
// allocate nothing: a run of 20 000 steps allocates what a run of 1000
// does, at a dimension on each side of vectorKernelMin. Inference is off:
// with it on, the settledness check at each batch close formats its
// verdict (batchMeans.checkTrend, about 1 allocation per close), so runs
// with more batches allocate more; the steps between closes allocate
// nothing (TestStepAllocations).
func TestMinimizeSumStepAllocations(t *testing.T) {
	for _, d := range []int{10, 100} {
		a, y, _ := fusedData(200, d, 13)
		f, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
		if err != nil {
			t.Fatal(err)
		}
		g, err := oracle.NewMiniBatch(f, sampling.NewUniform(200), 1, oracle.BatchSettings{})
		if err != nil {
			t.Fatal(err)
		}
		x0 := make([]float64, d+1)
		for _, inf := range []CovarianceMode{CovarianceOff} {
			run := func(steps int) float64 {
				return testing.AllocsPerRun(3, func() {
					s := Settings{Gain: schedule.Power{Scale: 1e-3, Exponent: 0.6}, MaxSteps: steps, Inference: Inference{Covariance: inf}}
					if _, err := MinimizeSum(context.Background(), g, x0, s); err != nil {
						t.Fatal(err)
					}
				})
			}
			if short, long := run(1000), run(20000); short != long {
				t.Errorf("d=%d, inference %d: %v allocations for 1000 steps, %v for 20000: steps allocate", d, inf, short, long)
			}
		}
	}
}
