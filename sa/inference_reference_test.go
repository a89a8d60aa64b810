package sa_test

import (
	"context"
	"math"
	"os"
	"sync"
	"testing"

	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// longTests reports whether the fuller statistical checks were asked for
// with STOCHROOT_LONG_TESTS=1 (see DEVELOPERS.md).
func longTests() bool { return os.Getenv("STOCHROOT_LONG_TESTS") == "1" }

// The regression problem of the statistical checks: d = 5, rows
// a ~ N(0, Σ) with Σ_ij = 0.3^|i−j| (eigenvalues between 0.54 and 1.85),
// unit noise, known coefficients β.
var lsqBeta = []float64{1, -0.5, 0.25, 2, 0}

func lsqProblem() *streamLSQ { return newStreamLSQ(lsqBeta, 0.3, 1, 1) }

// lsqSettings is SGD with gain a_k = 1.5/(k+11)^α, averaging every iterate,
// batch-means batches with N = 3.
func lsqSettings(alpha float64, n int) sa.Settings {
	return sa.Settings{
		Gain:      schedule.Power{Scale: 1.5, Offset: 10, Exponent: alpha},
		MaxSteps:  n,
		Inference: sa.Inference{BatchScale: 3, Method: sa.MethodBatchMeans},
	}
}

// lsqStudy runs R seeded SGD runs of length n from x0 = 0 with gain
// exponent alpha and returns, per coordinate, how many batch-means
// intervals covered β, how many runs had intervals, and
// n·mean‖x̄_n − β‖² over the runs.
func lsqStudy(t *testing.T, R, n int, alpha float64, seed uint64) (cover []int, avail int, nmse float64) {
	t.Helper()
	key := [4]float64{float64(R), float64(n), alpha, float64(seed)}
	studyMu.Lock()
	defer studyMu.Unlock()
	if st, ok := studies[key]; ok {
		return st.cover, st.avail, st.nmse
	}
	defer func() { studies[key] = study{cover, avail, nmse} }()
	o := lsqProblem()
	d := len(lsqBeta)
	covered := make([][]bool, R)
	rep, err := sa.Replicate(context.Background(), sa.Replications{Runs: R, Seed: seed},
		func(ctx context.Context, run int, seed uint64) (sa.Result, error) {
			s := lsqSettings(alpha, n)
			s.Seed = seed
			r, err := sa.RobbinsMonro(ctx, o, make([]float64, d), s)
			if err == nil && r.ErrorBars.Available {
				covered[run] = make([]bool, d)
				for i := range d {
					lo, hi, _ := r.ErrorBars.Interval(i)
					covered[run][i] = lo <= lsqBeta[i] && lsqBeta[i] <= hi
				}
			}
			return r, err
		})
	if err != nil {
		t.Fatal(err)
	}
	cover = make([]int, d)
	for _, c := range covered {
		if c == nil {
			continue
		}
		avail++
		for i, ok := range c {
			if ok {
				cover[i]++
			}
		}
	}
	for _, x := range rep.Estimates {
		for i, v := range x {
			nmse += (v - lsqBeta[i]) * (v - lsqBeta[i])
		}
	}
	return cover, avail, float64(n) * nmse / float64(R)
}

// studies memoises lsqStudy so that the coverage and efficiency checks share
// the runs they have in common.
var (
	studyMu sync.Mutex
	studies = map[[4]float64]study{}
)

type study struct {
	cover []int
	avail int
	nmse  float64
}

// TestReferenceBatchMeansCoverage checks the nominal 95% batch-means
// intervals (Chen, Lee, Tong & Zhang 2020, "Statistical inference for model
// parameters in stochastic gradient descent", Ann. Statist. 48(1), whose
// Theorem on the batch-means estimator makes them asymptotically exact) on
// linear regression with known coefficients.
//
// Band: with R independent runs the number of intervals covering β_i is
// Binomial(R, p); if p = 0.95 the coverage lies within
// 0.95 ± 3·√(0.95·0.05/R) with probability ≈ 0.997 (normal approximation to
// the binomial, common practice). The seeds are fixed, so the test is
// deterministic.
//
// Run length: with gain 1.5/(k+11)^0.6, N = 3 (the default) and n = 20000
// steps (16 batches) the intervals are within the band, and with
// STOCHROOT_LONG_TESTS=1 also at R = 2000 for n = 20000 and n = 100000.
// With N = 1 they under-cover: measured 0.912–0.919 at n = 100000, R = 1000
// (outside that band, 0.95 ± 0.021), because the batches are then shorter
// than the time the iterates take to forget; see Inference.BatchScale.
func TestReferenceBatchMeansCoverage(t *testing.T) {
	R, ns := 400, []int{20000}
	if longTests() {
		R, ns = 2000, []int{20000, 100000}
	}
	for _, n := range ns {
		cover, avail, _ := lsqStudy(t, R, n, 0.6, 11)
		// Runs without bars are those the settledness check marks
		// unsettled: a trend (sa.TrendFalseAlarm = 0.001 per run for a
		// settled run; its rate is checked by TestSettlednessFalseAlarm),
		// or an estimated span below sa.SettledMemories. At n = 20 000 the
		// slowest direction (λ_min = 0.54) spans n·a_n·λ_min/2 ≈ 21 noise
		// memories in theory, so the runs whose estimate falls below 15
		// are withheld: measured 30 of 400 (7.5%) with the bias-corrected
		// memory estimate. More than 10% would mean the gate withholds
		// settled runs well beyond its threshold.
		if float64(R-avail) > 0.10*float64(R) {
			t.Fatalf("n = %d: %d of %d runs have error bars, want at least 90%%", n, avail, R)
		}
		band := 3 * math.Sqrt(0.95*0.05/float64(avail))
		for i, c := range cover {
			p := float64(c) / float64(avail)
			t.Logf("n = %d, R = %d: coverage of β_%d = %.4f (band %.4f ± %.4f)", n, R, i+1, p, 0.95, band)
			if math.Abs(p-0.95) > band {
				t.Errorf("n = %d: coverage of β_%d = %.4f, want 0.95 ± %.4f", n, i+1, p, band)
			}
		}
	}
}

// TestReferencePolyakJuditskyEfficiency checks the asymptotic efficiency of
// the averaged iterate (Polyak & Juditsky 1992, "Acceleration of stochastic
// approximation by averaging", SIAM J. Control Optim. 30(4), Theorem 2):
// √n(x̄_n − x*) → N(0, A⁻¹SA⁻¹) for any gain exponent in (1/2, 1), so
// n·E‖x̄_n − x*‖² → trace(A⁻¹SA⁻¹). For least squares A = Σ and S = σ²Σ,
// so the limit is σ²·trace(Σ⁻¹), with Σ⁻¹ from gonum mat.
//
// Band: within 10% of the limit, as issue 5 asks. Two parts fill it: the
// Monte Carlo error of the mean over R runs (relative standard deviation of
// one n‖x̄ − β‖² ≈ √(2·tr C²)/tr C ≈ 0.66 here, so ≈ 3.3% at R = 400 and
// 1.5% at R = 2000), and the finite-n excess of the variance, of order the
// mean gain (state-dependent noise of SGD) plus 1/(n·a_n), a few per cent
// at n = 20000 (measured: report of issue 5).
func TestReferencePolyakJuditskyEfficiency(t *testing.T) {
	R, n := 400, 20000
	if longTests() {
		R, n = 2000, 100000
	}
	limit := lsqProblem().asymptoticTrace()
	for _, alpha := range []float64{0.6, 0.7} {
		_, _, nmse := lsqStudy(t, R, n, alpha, 11)
		ratio := nmse / limit
		t.Logf("α = %v, n = %d, R = %d: n·mean‖x̄−β‖² = %.4f, trace(A⁻¹SA⁻¹) = %.4f, ratio %.4f", alpha, n, R, nmse, limit, ratio)
		if math.Abs(ratio-1) > 0.10 {
			t.Errorf("α = %v: n·E‖x̄−β‖² / trace(A⁻¹SA⁻¹) = %.4f, want within 10%% of 1", alpha, ratio)
		}
	}
}
