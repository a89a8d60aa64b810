package sa_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// quantileField measures h(q) = P(X ≤ q) − p by the indicator 1{X ≤ q} − p
// with one fresh draw X per measurement: a Robbins–Monro field whose root is
// the p-quantile.
func quantileField(p float64, draw func(*rand.Rand) float64) oracle.Scalar {
	return func(q float64, rng *rand.Rand) (float64, error) {
		if draw(rng) <= q {
			return 1 - p, nil
		}
		return -p, nil
	}
}

// TestReferenceQuantile finds quantiles by Robbins–Monro with
// Polyak–Ruppert averaging and compares them with gonum's distuv quantiles.
//
// Tolerance: the averaged estimate is asymptotically normal with variance
// Var(Y)/(h'(q)² n) (Polyak & Juditsky 1992, SIAM J. Control Optim. 30(4),
// Theorem 2), where h'(q) = f(q) and Var(Y) = p(1 − p) at the root; this is
// the asymptotic variance p(1−p)/f(q)² of the stochastic-approximation
// quantile estimator in Tierney (1983), "A space-efficient recursive
// procedure for estimating a quantile of an unknown distribution", SIAM J.
// Sci. Stat. Comput. 4(4). We accept 4 standard errors, n = number of
// averaged iterates.
func TestReferenceQuantile(t *testing.T) {
	const steps, burnIn = 200000, 20000
	cases := []struct {
		name string
		p    float64
		dist interface {
			Quantile(float64) float64
			Prob(float64) float64
		}
		draw func(*rand.Rand) float64
	}{
		{"normal p=0.9", 0.9, distuv.UnitNormal, func(r *rand.Rand) float64 { return r.NormFloat64() }},
		{"exponential p=0.5", 0.5, distuv.Exponential{Rate: 1}, func(r *rand.Rand) float64 { return r.ExpFloat64() }},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			want := tc.dist.Quantile(tc.p)
			res, err := sa.RobbinsMonro(context.Background(), quantileField(tc.p, tc.draw), []float64{0},
				sa.Settings{Gain: schedule.Power{Scale: 1, Exponent: 0.7}, MaxSteps: steps, BurnIn: burnIn, Seed: 7})
			if err != nil {
				t.Fatal(err)
			}
			n := float64(res.Averaged)
			se := math.Sqrt(tc.p*(1-tc.p)/n) / tc.dist.Prob(want)
			got := res.Average[0]
			t.Logf("quantile %v: got %.6f, want %.6f, error %.2f standard errors (SE %.2g)", tc.p, got, want, (got-want)/se, se)
			if math.Abs(got-want) > 4*se {
				t.Errorf("quantile = %v, want %v ± 4·%v", got, want, se)
			}
		})
	}
}

// TestReferenceSacksVariance checks the asymptotic variance of plain
// Robbins–Monro with a_n = a/n on M(x) = m(x − θ) with noise of variance σ²:
// n·Var(x_n) → a²σ²/(2am − 1) (Sacks 1958, "Asymptotic distribution of
// stochastic approximation procedures", Ann. Math. Statist. 29(2), Theorem
// 1). With a = 2, m = 1, σ = 1 the limit is 4/3.
//
// Our gain index starts at 0, so a/(k+1) is a/n with n = k + 1.
//
// Tolerance: over R independent replications the sample variance s² of
// approximately normal values has relative standard error √(2/(R−1)); we
// accept 4 of those. The finite-n bias is computed exactly from the variance
// recursion v_{n+1} = (1 − a/n)² v_n + a²σ²/n² and is far smaller
// (reported in the log).
func TestReferenceSacksVariance(t *testing.T) {
	const (
		a, m, sigma = 2.0, 1.0, 1.0
		theta       = 1.5
		n           = 1000
		reps        = 20000
	)
	want := a * a * sigma * sigma / (2*a*m - 1)
	h := oracle.Scalar(func(x float64, rng *rand.Rand) (float64, error) {
		return m*(x-theta) + sigma*rng.NormFloat64(), nil
	})
	z := make([]float64, reps)
	for r := range reps {
		res, err := sa.RobbinsMonro(context.Background(), h, []float64{0},
			sa.Settings{Gain: schedule.Harmonic(a), MaxSteps: n, Seed: uint64(r)})
		if err != nil {
			t.Fatal(err)
		}
		z[r] = math.Sqrt(n) * (res.X[0] - theta)
	}
	_, v := stat.MeanVariance(z, nil)
	// Exact finite-n variance from the recursion (x_0 is deterministic).
	var exact float64
	for k := 1; k <= n; k++ {
		g := a / float64(k)
		exact = (1-g*m)*(1-g*m)*exact + g*g*sigma*sigma
	}
	tol := 4 * want * math.Sqrt(2/float64(reps-1))
	t.Logf("n·Var(x_n) = %.4f over %d replications; Sacks limit %.4f; exact at n=%d: %.4f; tolerance ±%.3f", v, reps, want, n, n*exact, tol)
	if math.Abs(v-want) > tol {
		t.Errorf("n·Var(x_n) = %v, want %v ± %v", v, want, tol)
	}
}

// TestReferenceIncrementalMean: with a_k = 1/(k+1) (k from 0) and
// Y_k = x_k − X_k, the iterate after k steps is the running mean of the
// first k samples X_0 … X_{k−1} (common practice: the incremental form of
// the sample mean).
func TestReferenceIncrementalMean(t *testing.T) {
	var samples []float64
	h := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
		v := 5 + 3*rng.NormFloat64()
		samples = append(samples, v)
		dst[0] = x[0] - v
		return nil
	})
	sv, err := sa.NewSolver(h, []float64{123}, sa.Settings{Gain: schedule.Harmonic(1), Seed: 3})
	if err != nil {
		t.Fatal(err)
	}
	sum := 0.0
	for k := 1; k <= 10000; k++ {
		if err := sv.Step(); err != nil {
			t.Fatal(err)
		}
		sum += samples[k-1]
		if got, want := sv.X()[0], sum/float64(k); math.Abs(got-want) > 1e-12 {
			t.Fatalf("after %d steps x = %.17g, running mean %.17g", k, got, want)
		}
	}
}
