package sa

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/stochroot/stochroot/schedule"
)

// cacheHit is the hit rate of a cache of θ entries in the setpoint checks:
// m(θ) = 1 − exp(−θ/20000), an invented curve whose root is known in
// closed form (the closed form is the check, not the scenario): the knob
// that reaches a hit rate r is θ* = −20000·ln(1 − r), and the slope there
// is m′(θ*) = (1 − r)/20000. The knob's scale (tens of thousands of
// entries) against a level in [0, 1] is what made a hand-set gain need a
// guessed scale of about 1/m′(θ*) = 200 000.
func cacheHit(theta float64) float64 { return 1 - math.Exp(-theta/20000) }

// runCache drives a SetpointTuner to the hit rate r for n reports, each
// the hit rate of a batch of 1000 requests (binomial, gonum), and returns
// the tuner and the largest move seen.
func runCache(t *testing.T, r float64, s TunerSettings, n int, seed uint64) (*SetpointTuner, float64) {
	t.Helper()
	var last, biggest float64
	first := true
	s.OnUpdate = func(u Update) {
		if u.Limited && s.Gain == nil {
			t.Errorf("step %d: a learned gain's move was clamped by MaxChange", u.Step)
		}
		if !first {
			biggest = math.Max(biggest, math.Abs(u.X[0]-last))
		}
		first, last = false, u.X[0]
	}
	sp, err := NewSetpointTuner(r, Rising, 5000, s)
	if err != nil {
		t.Fatal(err)
	}
	last, _ = sp.Param()
	first = false
	rng := rand.New(rand.NewPCG(seed, 77))
	const batch = 1000
	for range n {
		x, v := sp.Param()
		hits := distuv.Binomial{N: batch, P: cacheHit(x), Src: rng}.Rand()
		if _, err := sp.Observe(v, hits/batch); err != nil {
			t.Fatal(err)
		}
	}
	return sp, biggest
}

// TestReferenceLearnedGainSetpoint drives the cache hit rate of cacheHit
// to r = 0.9 with a nil gain, from 5000 entries, every move limited to 5000
// entries, and compares the average with the closed-form root
// θ* = 20000·ln 10 = 46051.7.
//
// Tolerance: the averaged Robbins–Monro estimate has the asymptotic
// standard error σ/(|m′(θ*)|·√n) whatever the gain's scale (Polyak &
// Juditsky 1992, SIAM J. Control Optim. 30(4), Theorem 2), with σ² =
// r(1−r)/1000 the binomial variance of a batch's hit rate at the root and
// n the number of averaged iterates; 4 such standard errors (a normal
// deviate beyond 4 has probability 6e-5; fixed seed). The test also checks
// that no move exceeded MaxChange or was clamped by it, and that the guessed gain a new user
// would try (scale 1, the same exponent) is nowhere near the root after
// the same reports: the problem needs the scale the learned gain finds.
func TestReferenceLearnedGainSetpoint(t *testing.T) {
	const (
		r         = 0.9
		n         = 20000
		maxChange = 5000
	)
	want := 20000 * math.Log(10)
	box := Box{Lower: []float64{1000}, Upper: []float64{200000}}
	sp, biggest := runCache(t, r, TunerSettings{MaxChange: []float64{maxChange}, Projection: box}, n, 1)
	if biggest > maxChange*(1+1e-12) {
		t.Errorf("largest move %v exceeds MaxChange = %v", biggest, maxChange)
	}
	lg, ok := sp.Tuner().LearnedGain()
	if !ok || lg.WarmUp || lg.WrongSign {
		t.Fatalf("learned gain state %+v, ok %v: the warm-up should have ended", lg, ok)
	}
	avg := make([]float64, 1)
	m := sp.Tuner().Average(avg)
	se := math.Sqrt(r*(1-r)/1000) / ((1 - r) / 20000) / math.Sqrt(float64(m))
	if d := math.Abs(avg[0] - want); d > 4*se {
		t.Errorf("learned gain: averaged knob = %.6g, closed-form root %.6g: |diff| = %.3g > 4 SE = %.3g", avg[0], want, d, 4*se)
	}
	t.Logf("learned gain: average %.6g vs %.6g (%.2f SE, SE %.3g, %d averaged); warm-up ended at step %d; slope in use %.3g (true slope at the root %.3g); largest move %.4g",
		avg[0], want, (avg[0]-want)/se, se, m, lg.SwitchStep, lg.InUse, (1-r)/20000, biggest)

	guess, _ := runCache(t, r, TunerSettings{Gain: schedule.Power{Scale: 1, Exponent: learnedExponent}, MaxChange: []float64{maxChange}, Projection: box}, n, 1)
	g := make([]float64, 1)
	guess.Tuner().Average(g)
	if math.Abs(g[0]-want) < 100*se {
		t.Errorf("the guessed gain (scale 1) reached %.6g, within 100 SE of the root: the check does not show the need for a learned scale", g[0])
	}
	t.Logf("guessed gain scale 1: average %.6g (%.3g SE away)", g[0], (g[0]-want)/se)
}

// TestReferenceLearnedGainQuantile estimates the 0.99-quantile of a
// log-normal latency (gonum distuv.LogNormal{0, 0.5}: q = 3.20) with a nil
// gain from a start at 10, every move limited to 1, and holds the average
// to 4 standard errors √(p(1−p)/n)/f(q) of the sample quantile (Tierney
// 1983, SIAM J. Sci. Stat. Comput. 4(4); Polyak & Juditsky 1992, Theorem
// 2: the averaged estimate attains it whatever the gain's scale), as
// TestReferenceQuantileDecreasingGain does for a hand-set gain.
func TestReferenceLearnedGainQuantile(t *testing.T) {
	const p = 0.99
	lat := distuv.LogNormal{Mu: 0, Sigma: 0.5, Src: rand.NewPCG(2026, 3)}
	q := lat.Quantile(p)
	f := lat.Prob(q)
	n := 200_000
	qt, err := NewQuantileTuner(p, 10, TunerSettings{
		MaxChange:  []float64{1},
		BurnIn:     n / 10,
		Projection: Box{Lower: []float64{0.01}, Upper: []float64{100}},
	})
	if err != nil {
		t.Fatal(err)
	}
	for range n {
		x, v := qt.Param()
		if _, err := qt.Observe(v, lat.Rand() <= x); err != nil {
			t.Fatal(err)
		}
	}
	avg := make([]float64, 1)
	m := qt.Tuner().Average(avg)
	se := math.Sqrt(p*(1-p)/float64(m)) / f
	lg, _ := qt.Tuner().LearnedGain()
	if d := math.Abs(avg[0] - q); d > 4*se || lg.WarmUp {
		t.Errorf("learned gain: averaged 0.99-quantile = %.5g, gonum = %.5g: |diff| = %.3g (4 SE = %.3g); state %+v", avg[0], q, d, 4*se, lg)
	}
	t.Logf("learned gain: %.5g vs gonum %.5g (%.2f SE, %d averaged); warm-up ended at step %d, slope in use %.3g (f(q) = %.3g)",
		avg[0], q, (avg[0]-q)/se, m, lg.SwitchStep, lg.InUse, f)
}

// TestLearnedGainTracking checks the constant learned gain (Memory = M) on
// a linear level m(θ) = θ/20000 + noise (slope 5·10⁻⁵ exactly): after the
// warm-up the gain in use is 1/(ŝ·M), and ŝ lies within 4 of its standard
// errors of the true slope (least squares on a linear model is unbiased:
// the noise is independent of the design points, which depend only on
// earlier noise; Lai & Robbins 1979).
func TestLearnedGainTracking(t *testing.T) {
	const (
		slope = 5e-5
		M     = 50
	)
	sp, err := NewSetpointTuner(2, Rising, 0, TunerSettings{MaxChange: []float64{2000}, Memory: M})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(3, 3))
	for range 20000 {
		x, v := sp.Param()
		sp.Observe(v, slope*x+0.05*rng.NormFloat64())
	}
	lg, _ := sp.Tuner().LearnedGain()
	if lg.WarmUp || math.Abs(lg.Slope-slope) > 4*lg.StdErr {
		t.Fatalf("slope %.4g ± %.3g, true %.4g (state %+v)", lg.Slope, lg.StdErr, slope, lg)
	}
	if want := 1 / (lg.InUse * M); math.Abs(lg.Gain-want) > 1e-12*want {
		t.Errorf("gain %v, want 1/(ŝ·M) = %v", lg.Gain, want)
	}
	x, _ := sp.Param()
	// The stationary spread is √(a·σ²/(2s)) ≈ √(σ²/(2s²M)) = 141; 8 of them.
	if math.Abs(x-40000) > 8*math.Sqrt(0.05*0.05/(2*slope*slope*M)) {
		t.Errorf("knob %v, root 40000", x)
	}
}

// TestLearnedGainWrongSign reports a rising level to a tuner told it
// falls: once the slope is clearly negative the tuner refuses every report
// with ErrSlopeSign and the parameter stays put.
func TestLearnedGainWrongSign(t *testing.T) {
	sp, err := NewSetpointTuner(2, Falling, 1, TunerSettings{MaxChange: []float64{0.5}, Projection: Box{Lower: []float64{-100}, Upper: []float64{100}}})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(4, 4))
	refused := 0
	var at float64
	for i := range 500 {
		x, v := sp.Param()
		_, err := sp.Observe(v, x+0.1*rng.NormFloat64())
		if errors.Is(err, ErrSlopeSign) {
			if refused == 0 {
				at = x
			} else if x != at {
				t.Fatalf("report %d: parameter moved to %v after the refusal at %v", i, x, at)
			}
			refused++
		} else if err != nil {
			t.Fatal(err)
		}
	}
	lg, _ := sp.Tuner().LearnedGain()
	if refused == 0 || !lg.WrongSign {
		t.Fatalf("no ErrSlopeSign in 500 reports (state %+v)", lg)
	}
	if st := sp.Tuner().Stats(); st.Failed != uint64(refused) {
		t.Errorf("Failed = %d, refused %d", st.Failed, refused)
	}
}

// TestLearnedGainSettings checks the settings a learned gain refuses.
func TestLearnedGainSettings(t *testing.T) {
	for _, c := range []struct {
		name string
		x0   []float64
		s    TunerSettings
	}{
		{"dimension 2", []float64{0, 0}, TunerSettings{MaxChange: []float64{1, 1}}},
		{"no MaxChange", []float64{0}, TunerSettings{}},
		{"infinite MaxChange", []float64{0}, TunerSettings{MaxChange: []float64{math.Inf(1)}}},
		{"Memory with a gain", []float64{0}, TunerSettings{Gain: schedule.Constant(1), Memory: 3}},
		{"negative Memory", []float64{0}, TunerSettings{MaxChange: []float64{1}, Memory: -1}},
	} {
		if _, err := NewTuner(c.x0, c.s); !errors.Is(err, ErrSettings) {
			t.Errorf("%s: NewTuner error %v, want ErrSettings", c.name, err)
		}
	}
	if _, err := NewTuner([]float64{0}, TunerSettings{MaxChange: []float64{1}}); err != nil {
		t.Errorf("nil gain with MaxChange at dimension 1: %v", err)
	}
}

// TestLearnedGainRestore snapshots a nil-gain tuner during the warm-up and
// after it, restores each into a fresh tuner with the same settings, and
// feeds both the same reports: they continue bit for bit. Corrupt
// learned_gain fields are refused.
func TestLearnedGainRestore(t *testing.T) {
	set := TunerSettings{MaxChange: []float64{0.5}, Projection: Box{Lower: []float64{-10}, Upper: []float64{10}}}
	for _, before := range []int{10, 300} {
		a := newTestTuner(t, []float64{3}, set)
		rng := rand.New(rand.NewPCG(8, 8))
		report := func(tu *Tuner, noise float64) {
			x, v := tu.Param1()
			if out, err := tu.Report1(v, 2*(x-1)+noise); out != Applied {
				t.Fatalf("report: %v %v", out, err)
			}
		}
		for range before {
			report(a, rng.NormFloat64())
		}
		data, err := a.Snapshot()
		if err != nil {
			t.Fatal(err)
		}
		b := newTestTuner(t, []float64{0}, set)
		if err := b.Restore(data); err != nil {
			t.Fatal(err)
		}
		for range 500 {
			e := rng.NormFloat64()
			report(a, e)
			report(b, e)
		}
		xa, _ := a.Param1()
		xb, _ := b.Param1()
		ga, _ := a.LearnedGain()
		gb, _ := b.LearnedGain()
		if xa != xb || ga != gb {
			t.Fatalf("after %d reports: restored tuner at %v %+v, original at %v %+v", before, xb, gb, xa, ga)
		}
	}
	a := newTestTuner(t, []float64{3}, set)
	good, _ := a.Snapshot()
	for _, c := range []struct{ from, to string }{
		{`"weight":0`, `"weight":-1`},
		{`"sxx":0`, `"sxx":-1`},
		{`"warm_up":true`, `"warm_up":false`},
		{`"max_abs_y":0`, `"max_abs_y":-2`},
		{`,"learned_gain":{`, `,"learned_gain":{"extra":1,`},
	} {
		bad := []byte(replaceOnce(t, string(good), c.from, c.to))
		if err := a.Restore(bad); !errors.Is(err, ErrSnapshot) {
			t.Errorf("%s → %s: Restore error %v, want ErrSnapshot", c.from, c.to, err)
		}
	}
	set2 := TunerSettings{Gain: schedule.Constant(0.1)}
	c := newTestTuner(t, []float64{3}, set2)
	if err := c.Restore(good); !errors.Is(err, ErrSnapshot) {
		t.Errorf("learned snapshot into a tuner with a set gain: %v, want ErrSnapshot", err)
	}
}

func replaceOnce(t *testing.T, s, from, to string) string {
	t.Helper()
	i := strings.Index(s, from)
	if i < 0 {
		t.Fatalf("%q not in %s", from, s)
	}
	return s[:i] + to + s[i+len(from):]
}
