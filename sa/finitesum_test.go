package sa_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"sort"
	"testing"

	"gonum.org/v1/gonum/stat"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sampling"
	"github.com/stochroot/stochroot/schedule"
)

func lsModel(t testing.TB, n, d int, seed uint64) *oracle.Regression {
	t.Helper()
	a, y, _ := genLinear(n, d, seed)
	m, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// TestMinimizeSumSameForAnyWorkerCount runs MBGD with parallel batches and
// BGD with 1, 2 and 4 workers: the Results must be identical bit for bit.
func TestMinimizeSumSameForAnyWorkerCount(t *testing.T) {
	m := lsModel(t, 6000, 40, 2)
	for _, full := range []bool{false, true} {
		var ref sa.Result
		for _, w := range []int{1, 2, 4} {
			var g *oracle.MiniBatch
			var err error
			if full {
				g, err = oracle.NewFullBatch(m, oracle.BatchSettings{Workers: w})
			} else {
				g, err = oracle.NewMiniBatch(m, sampling.NewShuffled(m.Len()), 2048, oracle.BatchSettings{Workers: w})
			}
			if err != nil {
				t.Fatal(err)
			}
			r, err := sa.MinimizeSum(context.Background(), g, make([]float64, m.Dim()), sa.Settings{Gain: schedule.Power{Scale: 0.1, Exponent: 0.7}, MaxSteps: 30, Seed: 5})
			g.Close()
			if err != nil {
				t.Fatal(err)
			}
			if w == 1 {
				ref = r
				continue
			}
			if !slices.Equal(r.X, ref.X) || !slices.Equal(r.Average, ref.Average) {
				t.Errorf("full=%v: %d workers give a different result than 1 worker", full, w)
			}
		}
	}
}

// TestMinimizeSumBudgets checks the epoch and measurement budgets, the
// counters and the reasons.
func TestMinimizeSumBudgets(t *testing.T) {
	m := lsModel(t, 1000, 3, 3)
	gain := schedule.Power{Scale: 0.05, Exponent: 0.7}
	g, _ := oracle.NewMiniBatch(m, sampling.NewShuffled(1000), 64, oracle.BatchSettings{})
	// 3 epochs = 3000 sample gradients = 46 full batches of 64 (2944).
	r, err := sa.MinimizeSum(context.Background(), g, make([]float64, 4), sa.Settings{Gain: gain, MaxSteps: sa.NoLimit, MaxEpochs: 3})
	if err != nil || r.Reason != sa.EpochLimit || r.Steps != 46 || r.Measurements != 2944 || r.Epochs != 2.944 {
		t.Errorf("epoch budget: err %v, reason %v, steps %d, measurements %d, epochs %v; want nil, %v, 46, 2944, 2.944", err, r.Reason, r.Steps, r.Measurements, r.Epochs, sa.EpochLimit)
	}
	r, err = sa.MinimizeSum(context.Background(), g, make([]float64, 4), sa.Settings{Gain: gain, MaxMeasurements: 1000})
	if err != nil || r.Reason != sa.MeasurementLimit || r.Steps != 15 {
		t.Errorf("measurement budget: err %v, reason %v, steps %d; want nil, %v, 15", err, r.Reason, r.Steps, sa.MeasurementLimit)
	}
	bgd, _ := oracle.NewFullBatch(m, oracle.BatchSettings{})
	r, err = sa.MinimizeSum(context.Background(), bgd, make([]float64, 4), sa.Settings{Gain: schedule.Constant(0.1), MaxSteps: 7})
	if err != nil || r.Reason != sa.StepLimit || r.Epochs != 7 || r.Average == nil {
		t.Errorf("BGD: err %v, reason %v, epochs %v", err, r.Reason, r.Epochs)
	}
	// Same seed, same result; the run resets the sampler first.
	r1, _ := sa.MinimizeSum(context.Background(), g, make([]float64, 4), sa.Settings{Gain: gain, MaxSteps: 50, Seed: 9})
	r2, _ := sa.MinimizeSum(context.Background(), g, make([]float64, 4), sa.Settings{Gain: gain, MaxSteps: 50, Seed: 9})
	if !slices.Equal(r1.X, r2.X) {
		t.Error("two runs with the same seed differ")
	}
	r3, _ := sa.MinimizeSum(context.Background(), g, make([]float64, 4), sa.Settings{Gain: gain, MaxSteps: 50, Seed: 10})
	if slices.Equal(r1.X, r3.X) {
		t.Error("runs with different seeds are identical")
	}
	// Cancellation returns the result so far.
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	r, err = sa.MinimizeSum(ctx, g, make([]float64, 4), sa.Settings{Gain: gain})
	if !errors.Is(err, context.Canceled) || r.Reason != sa.Cancelled || len(r.X) != 4 {
		t.Errorf("cancelled: err %v, reason %v", err, r.Reason)
	}
}

// nanAfter is a finite sum whose sample 3 has a NaN gradient.
type nanAfter struct{ *oracle.Regression }

func (f nanAfter) AddGradient(dst, x []float64, i int, w float64) {
	if i == 3 {
		dst[0] = math.NaN()
		return
	}
	f.Regression.AddGradient(dst, x, i, w)
}

func TestMinimizeSumBadInput(t *testing.T) {
	m := lsModel(t, 50, 2, 4)
	g, _ := oracle.NewMiniBatch(m, sampling.NewUniform(50), 5, oracle.BatchSettings{})
	gain := schedule.Constant(0.01)
	for _, tc := range []struct {
		name string
		g    *oracle.MiniBatch
		x0   []float64
		s    sa.Settings
		want error
	}{
		{"nil oracle", nil, make([]float64, 3), sa.Settings{Gain: gain}, sa.ErrNilOracle},
		{"empty x0", g, nil, sa.Settings{Gain: gain}, sa.ErrDimension},
		{"wrong dimension", g, make([]float64, 2), sa.Settings{Gain: gain}, sa.ErrDimension},
		{"NaN in x0", g, []float64{0, math.NaN(), 0}, sa.Settings{Gain: gain}, sa.ErrSettings},
		{"negative epochs", g, make([]float64, 3), sa.Settings{Gain: gain, MaxEpochs: -1}, sa.ErrSettings},
		{"never stops", g, make([]float64, 3), sa.Settings{Gain: gain, MaxSteps: sa.NoLimit}, sa.ErrSettings},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r, err := sa.MinimizeSum(context.Background(), tc.g, tc.x0, tc.s)
			if !errors.Is(err, tc.want) {
				t.Errorf("err = %v, want %v", err, tc.want)
			}
			if r.Reason != sa.NotStarted || r.Steps != 0 {
				t.Errorf("reason %v, steps %d: want not started", r.Reason, r.Steps)
			}
		})
	}
	// A NaN sample gradient stops the run with ErrNotFinite and keeps the
	// last finite iterate.
	bad, _ := oracle.NewFullBatch(nanAfter{m}, oracle.BatchSettings{})
	x0 := []float64{1, 2, 3}
	r, err := sa.MinimizeSum(context.Background(), bad, x0, sa.Settings{Gain: gain})
	var se *sa.StepError
	if !errors.Is(err, sa.ErrNotFinite) || !errors.As(err, &se) || se.Step != 0 || r.Reason != sa.Failed || !slices.Equal(r.X, x0) {
		t.Errorf("NaN gradient: err %v, reason %v, X %v", err, r.Reason, r.X)
	}
	// RobbinsMonro has no data set: an epoch budget is a settings error.
	_, err = sa.RobbinsMonro(context.Background(), oracle.Scalar(func(x float64, _ *rand.Rand) (float64, error) { return x, nil }), []float64{1}, sa.Settings{Gain: gain, MaxEpochs: 2})
	if !errors.Is(err, sa.ErrSettings) {
		t.Errorf("RobbinsMonro with MaxEpochs: err %v, want ErrSettings", err)
	}
}

// TestReferenceQuantileIntercept checks quantile regression on a constant
// column (an intercept-only model): its minimiser is the sample
// τ-quantile (Koenker & Bassett 1978, "Regression quantiles",
// Econometrica 46(1); Koenker 2005, "Quantile Regression", §1.3), here
// computed by gonum's stat.Quantile (Empirical: the order statistic
// y_(⌈nτ⌉)); with nτ not an integer it is the unique minimiser.
//
// BGD with a decreasing gain is the subgradient method; each step moves
// the iterate by a_k·|g| with |g| ≤ max(τ, 1−τ), towards the minimiser
// once it is within reach, so after K steps it lies within
// a_{K−1}·max(τ, 1−τ) of it.
func TestReferenceQuantileIntercept(t *testing.T) {
	n, tau := 401, 0.75
	rng := rand.New(rand.NewPCG(21, 22))
	y := make([]float64, n)
	ones := make([]float64, n)
	for i := range y {
		y[i] = 3 + 2*rng.NormFloat64()
		ones[i] = 1
	}
	m, err := oracle.NewQuantile(oracle.Dense{Data: ones, Cols: 1}, y, tau, oracle.RegressionSettings{NoIntercept: true})
	if err != nil {
		t.Fatal(err)
	}
	g, _ := oracle.NewFullBatch(m, oracle.BatchSettings{})
	gain := schedule.Power{Scale: 2, Exponent: 0.6}
	steps := 5000
	r, err := sa.MinimizeSum(context.Background(), g, []float64{0}, sa.Settings{Gain: gain, MaxSteps: steps})
	if err != nil {
		t.Fatal(err)
	}
	sorted := slices.Clone(y)
	sort.Float64s(sorted)
	want := stat.Quantile(tau, stat.Empirical, sorted, nil)
	tol := gain.Gain(steps-1) * math.Max(tau, 1-tau)
	if e := math.Abs(r.X[0] - want); !(e <= tol) {
		t.Errorf("quantile fit %.6g, sample %.2g-quantile %.6g: |error| %.3g > %.3g", r.X[0], tau, want, e, tol)
	} else {
		t.Logf("quantile fit %.6g, sample %.2g-quantile %.6g: |error| %.3g ≤ %.3g", r.X[0], tau, want, e, tol)
	}
}

// TestBatchOfNStepEqualsBGD checks the with/without-replacement fact of
// oracle's TestReferenceBatchOfNWithAndWithoutReplacement at the level of
// one driver step: x_1 = x_0 − a_0·Y_0 of MBGD with batch n without
// replacement equals BGD's x_1 up to a_0 times the summation bound; with
// replacement it does not.
func TestBatchOfNStepEqualsBGD(t *testing.T) {
	n, d := 400, 3
	a, y, _ := genLinear(n, d, 6)
	m, err := oracle.NewLeastSquares(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
	if err != nil {
		t.Fatal(err)
	}
	s := sa.Settings{Gain: schedule.Constant(0.1), MaxSteps: 1, Seed: 1}
	x0 := []float64{0.5, 0.5, 0.5, 0.5}
	run := func(g *oracle.MiniBatch, err error) []float64 {
		if err != nil {
			t.Fatal(err)
		}
		r, err := sa.MinimizeSum(context.Background(), g, x0, s)
		if err != nil {
			t.Fatal(err)
		}
		return r.X
	}
	bgd := run(oracle.NewFullBatch(m, oracle.BatchSettings{}))
	without := run(oracle.NewMiniBatch(m, sampling.NewShuffled(n), n, oracle.BatchSettings{}))
	with := run(oracle.NewMiniBatch(m, sampling.NewUniform(n), n, oracle.BatchSettings{}))
	// Rounding bound (Higham 2002, §3.1 and §4.2, as in oracle's
	// sumBound): the two gradients sum the same n terms in different
	// orders, each within γ_n·Σ|terms| of the exact sum, and their
	// margins come from dot products in different orders, each within
	// γ_{d+1}·(|b₀| + Σ|a_ij β_j|) of the exact margin; the steps differ by
	// a_0 times that, plus one rounding of x_0 − a_0·Y each.
	u := 0x1p-53
	gn := float64(n) * u / (1 - float64(n)*u)
	gd := float64(d+1) * u / (1 - float64(d+1)*u)
	gb := make([]float64, d+1)
	for i := range n {
		row := a[i*d : (i+1)*d]
		r := x0[0] - y[i]
		mag := math.Abs(x0[0])
		for j, v := range row {
			r += v * x0[j+1]
			mag += math.Abs(v * x0[j+1])
		}
		for j := range d + 1 {
			zj := 1.0
			if j > 0 {
				zj = math.Abs(row[j-1])
			}
			gb[j] += (2*gn*math.Abs(r)*zj + 2*gd*mag*zj) / float64(n)
		}
	}
	farther := false
	for j := range bgd {
		bound := 0.1*gb[j] + 2*u*math.Abs(bgd[j])
		if e := math.Abs(without[j] - bgd[j]); e > bound {
			t.Errorf("without replacement x1[%d] = %.17g, BGD %.17g", j, without[j], bgd[j])
		}
		if math.Abs(with[j]-bgd[j]) > 100*bound {
			farther = true
		}
	}
	if !farther {
		t.Errorf("with-replacement step %v equals BGD's %v", with, bgd)
	}
}
