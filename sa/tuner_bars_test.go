package sa

import (
	"math"
	"math/rand/v2"
	"os"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/stochroot/stochroot/schedule"
)

// coverOnce runs one replication of the error-bar coverage check: a
// QuantileTuner for the median of gonum's Exponential{Rate: 0.25}, started
// at 1.5 times the median with a tenth of the reports burnt in, and
// reports whether nominal 95% bars were available, whether they covered
// gonum's median, and their half-width.
func coverOnce(t testing.TB, gain schedule.Schedule, n int, seed uint64) (available, covered bool, half float64) {
	dist := distuv.Exponential{Rate: 0.25, Src: rand.NewPCG(seed, 31)}
	med := dist.Quantile(0.5)
	s := TunerSettings{Gain: gain, BurnIn: n / 10, Projection: Box{Lower: []float64{0}, Upper: []float64{100}}}
	if gain == nil {
		s.MaxChange = []float64{1}
	}
	q, err := NewQuantileTuner(0.5, 1.5*med, s)
	if err != nil {
		t.Fatal(err)
	}
	for range n {
		x, v := q.Param()
		if _, err := q.Observe(v, dist.Rand() <= x); err != nil {
			t.Fatal(err)
		}
	}
	eb := q.Tuner().ErrorBars()
	if !eb.Available {
		return false, false, 0
	}
	lo, hi, _ := eb.Interval(0)
	return true, lo <= med && med <= hi, eb.HalfWidth[0]
}

// TestTunerErrorBarsCoverage measures the coverage of the tuner's nominal
// 95% error bars for the median of gonum's Exponential{Rate: 0.25}
// (m = 4·ln 2, density f(m) = 0.125) with a decreasing hand-set gain
// (1/f)/(k+1)^0.7 and with the learned gain.
//
// Long form (STOCHROOT_LONG_TESTS=1): replications until 400 have bars
// (at most 1000), 100 000 reports each; the coverage of those with bars
// must lie in [0.92, 0.98], the band of ±3 binomial standard errors
// √(0.95·0.05/400) = 0.011 about 0.95 (common practice). Runs whose bars
// are withheld (unsettled) are honest refusals and are counted apart.
// Short form (default): 60 replications of 50 000 reports with the learned
// gain; with at least 30 bars, coverage must be ≥ 0.80 (3 standard errors
// √(0.95·0.05/30) = 0.04 below 0.95 and some). It catches bars that are
// far too narrow, which is the failure that matters.
//
// The half-width is compared (printed) with 1.96 times the asymptotic
// standard error √(p(1−p)/n)/f of the averaged estimate (Polyak & Juditsky
// 1992, Theorem 2; Tierney 1983).
func TestTunerErrorBarsCoverage(t *testing.T) {
	dist := distuv.Exponential{Rate: 0.25}
	med := dist.Quantile(0.5)
	f := dist.Prob(med)
	type config struct {
		name string
		gain schedule.Schedule
	}
	long := os.Getenv("STOCHROOT_LONG_TESTS") == "1"
	configs := []config{{"learned gain", nil}}
	n, want, most, low, high := 50_000, 30, 60, 0.80, 1.0
	if long {
		configs = append([]config{{"gain (1/f)/(k+1)^0.7", schedule.Power{Scale: 1 / f, Exponent: 0.7}}}, configs...)
		n, want, most, low, high = 100_000, 400, 1000, 0.92, 0.98
	}
	for _, c := range configs {
		var runs, bars, covered int
		var hw float64
		for seed := uint64(0); bars < want && runs < most; seed++ {
			runs++
			a, cv, h := coverOnce(t, c.gain, n, seed)
			if a {
				bars++
				hw += h
				if cv {
					covered++
				}
			}
		}
		se := math.Sqrt(0.25/float64(n-n/10)) / f
		cov := float64(covered) / float64(max(bars, 1))
		t.Logf("%-22s n = %d: bars in %d of %d runs, coverage %d/%d = %.3f, mean half-width %.4g (1.96·asymptotic SE %.4g)",
			c.name, n, bars, runs, covered, bars, cov, hw/float64(max(bars, 1)), 1.96*se)
		if bars < want {
			t.Errorf("%s: bars in only %d of %d runs, %d needed for the check", c.name, bars, runs, want)
			continue
		}
		if cov < low || cov > high {
			t.Errorf("%s: coverage %.3f outside [%.2f, %.2f]", c.name, cov, low, high)
		}
	}
}

// TestReferenceTrackingNoise checks the tracking-noise figure of a
// constant-gain QuantileTuner against the exact stationary variance of
// TestReferenceQuantileConstantGain: events uniform on [0, 1] (f = 1),
// p = 0.75, a = 0.01, V∞ = a·p(1−p)/(2f) (derived there; exact while θ
// stays inside the support). Each of R seeded runs gives one estimate
// V̂ = Spread²; their mean must lie within 4 standard errors sd(V̂)/√R of
// V∞ (sd from the R estimates; fixed seeds) plus the second-order bias of
// the block correction, below (τ/L)² ≤ 1/400 of V∞. Every run's estimate
// must also be within 40% of V∞ (the relative standard error of one
// estimate is about √(2τ/(8L)) ≤ 11%, so 40% is over 3.5 of them).
func TestReferenceTrackingNoise(t *testing.T) {
	const (
		p = 0.75
		a = 0.01
	)
	vInf := a * p * (1 - p) / 2
	R, n := 8, 150_000
	if os.Getenv("STOCHROOT_LONG_TESTS") == "1" {
		R = 40
	}
	var sum, sumSq float64
	for r := range R {
		rng := rand.New(rand.NewPCG(uint64(r), 9))
		q, err := NewQuantileTuner(p, 0.5, TunerSettings{Gain: schedule.Constant(a), Projection: Box{Lower: []float64{-1}, Upper: []float64{2}}})
		if err != nil {
			t.Fatal(err)
		}
		for range n {
			x, v := q.Param()
			q.Observe(v, rng.Float64() <= x)
		}
		tn := q.Tuner().TrackingNoise()
		if !tn.Available {
			t.Fatalf("run %d: tracking noise not available after %d reports: %s", r, n, tn.Why)
		}
		v := tn.Spread[0] * tn.Spread[0]
		if math.Abs(v-vInf) > 0.4*vInf {
			t.Errorf("run %d: spread² %.4g, V∞ = %.4g", r, v, vInf)
		}
		if r == 0 {
			t.Logf("run 0: spread %.4g (√V∞ = %.4g), memory %.3g reports (2/(a·f) = %g), blocks of %d", tn.Spread[0], math.Sqrt(vInf), tn.Memory, 2/a, tn.Block)
		}
		sum += v
		sumSq += v * v
	}
	mean := sum / float64(R)
	sd := math.Sqrt((sumSq - float64(R)*mean*mean) / float64(R-1))
	tol := 4*sd/math.Sqrt(float64(R)) + vInf/400
	if math.Abs(mean-vInf) > tol {
		t.Errorf("mean spread² over %d runs %.4g, V∞ = %.4g: |diff| > %.3g", R, mean, vInf, tol)
	}
	t.Logf("mean spread² over %d runs %.4g ± %.2g, V∞ = a·p(1−p)/(2f) = %.4g", R, mean, sd/math.Sqrt(float64(R)), vInf)
}

// TestTunerBarsAvailability checks when the bars and the tracking noise
// are withheld, and that Override and Restore restart them.
func TestTunerBarsAvailability(t *testing.T) {
	c := newTestTuner(t, []float64{0}, TunerSettings{Gain: schedule.Constant(0.1)})
	if eb := c.ErrorBars(); eb.Available || eb.Why == "" {
		t.Errorf("constant gain: bars %+v", eb)
	}
	p := newTestTuner(t, []float64{0}, TunerSettings{Gain: schedule.Power{Scale: 1, Exponent: 0.7}})
	if tn := p.TrackingNoise(); tn.Available || tn.Why == "" {
		t.Errorf("decreasing gain: tracking noise %+v", tn)
	}
	rng := rand.New(rand.NewPCG(1, 1))
	for range 100_000 {
		x, v := p.Param1()
		p.Report1(v, x-1+rng.NormFloat64())
	}
	if eb := p.ErrorBars(); !eb.Available {
		t.Fatalf("bars after 100 000 reports on a linear field: %s", eb.Why)
	}
	data, _ := p.Snapshot()
	if err := p.Restore(data); err != nil {
		t.Fatal(err)
	}
	if eb := p.ErrorBars(); eb.Available {
		t.Errorf("bars available right after Restore of an averaged state")
	}
	if err := p.Override([]float64{1}); err != nil {
		t.Fatal(err)
	}
	if eb := p.ErrorBars(); eb.Available || eb.Why != "no iterate has been averaged yet" {
		t.Errorf("after Override: %+v", eb)
	}
	if _, err := NewTuner([]float64{0}, TunerSettings{Gain: schedule.Constant(1), Inference: Inference{Level: 0.8}}); err == nil {
		t.Errorf("Level 0.8 accepted; random scaling knows 0.90, 0.95, 0.99 only")
	}
	off := newTestTuner(t, []float64{0}, TunerSettings{Gain: schedule.Power{Scale: 1, Exponent: 0.7}, Inference: Inference{Covariance: CovarianceOff}})
	if eb := off.ErrorBars(); eb.Available || eb.Why == "" {
		t.Errorf("inference off: %+v", eb)
	}
}
