package sa

import (
	"math"
	"math/rand/v2"
	"os"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/stochroot/stochroot/schedule"
)

// coverQuantile runs one replication of the quantile configuration: a
// QuantileTuner for the median of gonum's Exponential{Rate: 0.25}, started
// at 1.5 times the median with a tenth of the reports burnt in. It returns
// the tuner and the median. QuantileTuner refuses its bars (the coverage
// below is why); the estimator's verdict is read from the tuner's
// underlying random-scaling state through rawBars.
func coverQuantile(t testing.TB, gain schedule.Schedule, n int, seed uint64) (*Tuner, float64) {
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
	return q.Tuner(), med
}

// coverSetpoint runs one replication of the setpoint configuration: a
// SetpointTuner driving the level m(θ) = 2θ + ε, ε normal with standard
// deviation 1 (gonum distuv.Normal), to 3 from θ = 0, a tenth of the
// reports burnt in. The root is θ* = 1.5 and the asymptotic standard error
// of the average is σ/(|m′|·√n) = 1/(2√n) (Polyak & Juditsky 1992,
// Theorem 2).
func coverSetpoint(t testing.TB, gain schedule.Schedule, n int, seed uint64) (*Tuner, float64) {
	noise := distuv.Normal{Mu: 0, Sigma: 1, Src: rand.NewPCG(seed, 32)}
	s := TunerSettings{Gain: gain, BurnIn: n / 10, Projection: Box{Lower: []float64{-10}, Upper: []float64{10}}}
	if gain == nil {
		s.MaxChange = []float64{1}
	}
	sp, err := NewSetpointTuner(3, Rising, 0, s)
	if err != nil {
		t.Fatal(err)
	}
	for range n {
		x, v := sp.Param()
		if _, err := sp.Observe(v, 2*x+noise.Rand()); err != nil {
			t.Fatal(err)
		}
	}
	return sp.Tuner(), 1.5
}

// rawBars returns the random-scaling bars of the tuner's average as the
// estimator computes them, also where the tuner refuses to report them.
func rawBars(tu *Tuner) ErrorBars {
	tu.mu.Lock()
	defer tu.mu.Unlock()
	b := tu.bars
	if b.bm == nil || tu.c.nAvg == 0 {
		return ErrorBars{Why: b.why}
	}
	return b.bm.rs.errorBars(tu.c.avg, b.in.Level, b.bm)
}

// TestTunerErrorBarsCoverage measures the coverage of the tuner's nominal
// 95% error bars against known answers, in two configurations:
//   - setpoint: a linear level with normal noise (coverSetpoint), gains
//     1.5/(k+1)^0.7 (3/|m′|: with 1/|m′| the averaged reports span fewer
//     than SettledMemories noise memories at 50 000 reports, and the
//     settledness check withholds most runs' bars) and learned; the root
//     is 1.5. Measured with 400 replications with bars at 100 000 reports
//     (after the noise-memory estimate lost its bias): 0.930, bars in 400
//     of 400 runs (offered), and 0.915 in 400 of 927 runs (below the band:
//     a learned gain refuses its bars, which this test checks);
//   - quantile: the median of gonum's Exponential{Rate: 0.25}
//     (m = 4·ln 2, f(m) = 0.125; coverQuantile), gains (1/f)/(k+1)^0.7 and
//     learned. Measured with 400 replications with bars at 100 000
//     reports: 0.915 and 0.912 (0.905 and 0.907 before the noise-memory
//     fix), below the band, although the error of the
//     average matched its asymptotic standard error (RMSE/SE 1.02–1.05
//     over exponents 0.55–0.7 and scales 0.3/f–3/f, 150 replications
//     each, coverage 0.90–0.93). So QuantileTuner refuses its bars, which
//     this test checks, and prints the estimator's coverage.
//
// Long form (STOCHROOT_LONG_TESTS=1): replications until 400 have bars
// (at most 1000), 100 000 reports each; the coverage of those with bars
// must lie in [0.92, 0.98] for the setpoint configurations, the band of
// ±3 binomial standard errors √(0.95·0.05/400) = 0.011 about 0.95
// (common practice). Runs whose bars are withheld (unsettled) are honest
// refusals and are counted apart. Short form (default): the hand-set
// setpoint configuration with 60 replications of 50 000 reports; with at
// least 30 bars, coverage must be ≥ 0.80 (over 3 standard errors
// √(0.95·0.05/30) = 0.04 below 0.95), which catches bars far too narrow.
// Under the race detector: at most 20 replications, 10 bars, coverage
// ≥ 0.70 (more than 3 misses in 10 has binomial probability 0.001 at
// 0.95).
//
// The half-width is printed beside 1.96 times the asymptotic standard
// error of the averaged estimate (Polyak & Juditsky 1992, Theorem 2;
// Tierney 1983 for the quantile: √(p(1−p)/n)/f).
func TestTunerErrorBarsCoverage(t *testing.T) {
	dist := distuv.Exponential{Rate: 0.25}
	f := dist.Prob(dist.Quantile(0.5))
	type config struct {
		name   string
		run    func(testing.TB, schedule.Schedule, int, uint64) (*Tuner, float64)
		gain   schedule.Schedule
		se1    float64 // asymptotic standard error of the average times √n
		refuse bool    // the tuner refuses its bars in this configuration
	}
	long := os.Getenv("STOCHROOT_LONG_TESTS") == "1"
	configs := []config{{"setpoint, gain 1.5/(k+1)^0.7", coverSetpoint, schedule.Power{Scale: 1.5, Exponent: 0.7}, 0.5, false}}
	n, want, most, low, high := 50_000, 30, 60, 0.80, 1.0
	if raceOn && !long {
		want, most, low = 10, 20, 0.70
	}
	if long {
		configs = []config{
			configs[0],
			{"setpoint, learned gain", coverSetpoint, nil, 0.5, true},
			{"quantile, gain (1/f)/(k+1)^0.7", coverQuantile, schedule.Power{Scale: 1 / f, Exponent: 0.7}, 0.5 / f, true},
			{"quantile, learned gain", coverQuantile, nil, 0.5 / f, true},
		}
		n, want, most, low, high = 100_000, 400, 1000, 0.92, 0.98
	}
	for _, c := range configs {
		var runs, bars, covered int
		var hw float64
		for seed := uint64(0); bars < want && runs < most; seed++ {
			runs++
			tu, truth := c.run(t, c.gain, n, seed)
			eb := tu.ErrorBars()
			if c.refuse {
				if eb.Available {
					t.Fatalf("%s: the tuner reported bars in a refused configuration", c.name)
				}
				eb = rawBars(tu)
			}
			if !eb.Available {
				continue
			}
			bars++
			hw += eb.HalfWidth[0]
			if lo, hi, _ := eb.Interval(0); lo <= truth && truth <= hi {
				covered++
			}
		}
		se := c.se1 / math.Sqrt(float64(n-n/10))
		cov := float64(covered) / float64(max(bars, 1))
		verdict := "offered"
		if c.refuse {
			verdict = "refused"
		}
		t.Logf("%-32s n = %d: bars in %d of %d runs, coverage %d/%d = %.3f, mean half-width %.4g (1.96·asymptotic SE %.4g); %s",
			c.name, n, bars, runs, covered, bars, cov, hw/float64(max(bars, 1)), 1.96*se, verdict)
		if c.refuse {
			continue
		}
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
// p = 0.75, a = 0.05, V∞ = a·p(1−p)/(2f) (derived there for any a; exact
// while θ stays inside the support, here within 0.75 ± 0.07, a tenth of
// the margin). Each of R seeded runs gives one estimate
// V̂ = Spread²; their mean must lie within 4 standard errors sd(V̂)/√R of
// V∞ (sd from the R estimates; fixed seeds) plus the second-order bias of
// the block correction, below (τ/L)² ≤ 1/400 of V∞. Every run's estimate
// must also be within 40% of V∞ (the relative standard error of one
// estimate is about √(2τ/(8L)) ≤ 11%, so 40% is over 3.5 of them).
func TestReferenceTrackingNoise(t *testing.T) {
	const (
		p = 0.75
		a = 0.05 // a·f = 0.05: a memory of about 40 reports
	)
	vInf := a * p * (1 - p) / 2
	R, n := 8, 60_000
	switch {
	case os.Getenv("STOCHROOT_LONG_TESTS") == "1":
		R = 40
	case raceOn:
		R = 4
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
// are withheld, and that Override and Restore restart them (the bars'
// state is not in the snapshot).
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
	for range 60_000 {
		x, v := c.Param1()
		c.Report1(v, x-1+rng.NormFloat64())
	}
	if tn := c.TrackingNoise(); !tn.Available {
		t.Fatalf("tracking noise after 60 000 reports at a·s = 0.1: %s", tn.Why)
	}
	if err := c.Override([]float64{2}); err != nil {
		t.Fatal(err)
	}
	if tn := c.TrackingNoise(); tn.Available {
		t.Errorf("tracking noise still available after Override")
	}
	off := newTestTuner(t, []float64{0}, TunerSettings{Gain: schedule.Power{Scale: 1, Exponent: 0.7}, Inference: Inference{Covariance: CovarianceOff}})
	if eb := off.ErrorBars(); eb.Available || eb.Why == "" {
		t.Errorf("inference off: %+v", eb)
	}
}
