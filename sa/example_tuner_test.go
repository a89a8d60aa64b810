package sa_test

import (
	"fmt"
	"math"
	"math/rand/v2"

	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// A request timeout tuned so that 99% of calls finish within it. The
// service reads the timeout without a lock, runs the call, and reports
// whether it finished in time together with the version it read.
func ExampleQuantileTuner() {
	rng := rand.New(rand.NewPCG(1, 2))
	callMs := func() float64 { return 20 * rng.ExpFloat64() } // mean 20 ms; 0.99-quantile 92.1 ms

	q, err := sa.NewQuantileTuner(0.99, 500, sa.TunerSettings{
		Gain:       schedule.Constant(20), // ms per unit of Y; time constant ≈ 1/(a·f(q)) = 100 calls
		Projection: sa.Box{Lower: []float64{10}, Upper: []float64{2000}},
		MaxChange:  []float64{50}, // ms per update
		BurnIn:     10000,         // average the second half
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	for range 20000 {
		timeout, version := q.Param()
		q.Observe(version, callMs() <= timeout)
	}
	timeout, version := q.Param()
	avg := make([]float64, 1)
	n := q.Tuner().Average(avg)
	fmt.Printf("timeout now %.4g ms (version %d); mean of the last %d: %.4g ms; true 0.99-quantile 92.1 ms\n",
		timeout, version, n, avg[0])
	// The constant gain keeps the timeout about 14 ms (one stationary
	// standard deviation) around a point ≈ 5 ms above the quantile: the
	// second-order bias |f′/(2f)|·V of a falling density (QuantileTuner).

	// Output:
	// timeout now 100 ms (version 20000); mean of the last 10000: 99.31 ms; true 0.99-quantile 92.1 ms
}

// Freeze, override and snapshot: what an operator needs around a live
// tuner.
func ExampleTuner_Snapshot() {
	t, _ := sa.NewTuner([]float64{8}, sa.TunerSettings{
		Gain:       schedule.Constant(0.5),
		Projection: sa.Box{Lower: []float64{1}, Upper: []float64{64}},
	})
	_, v := t.Param1()
	t.Report1(v, 2) // the level is too high: lower the knob by 0.5·2
	x, v := t.Param1()
	fmt.Printf("after one report: %.4g (version %d)\n", x, v)

	t.Freeze()                // stop tuning ...
	t.Override([]float64{16}) // ... and pin the knob by hand
	data, _ := t.Snapshot()   // store before a restart

	u, _ := sa.NewTuner([]float64{8}, sa.TunerSettings{
		Gain:       schedule.Constant(0.5),
		Projection: sa.Box{Lower: []float64{1}, Upper: []float64{64}},
	})
	if err := u.Restore(data); err != nil {
		fmt.Println(err)
		return
	}
	x, v = u.Param1()
	fmt.Printf("restored: %.4g (version %d), frozen %v\n", x, v, u.IsFrozen())
	// Output:
	// after one report: 7 (version 1)
	// restored: 16 (version 1), frozen true
}

// A concurrency limit that holds a measured queueing delay at 50 ms. The
// delay rises with the limit (Rising); the knob is bounded to [1, 256] and
// moves at most 4 per update.
func ExampleSetpointTuner() {
	rng := rand.New(rand.NewPCG(3, 4))
	delayMs := func(limit float64) float64 { return 0.8*limit + 5*rng.NormFloat64() } // invented: 0.8 ms per slot

	s, err := sa.NewSetpointTuner(50, sa.Rising, 16, sa.TunerSettings{
		Gain:       schedule.Constant(0.25), // ≈ 1/(5·slope): averages the noise over ~5 reports
		Projection: sa.Box{Lower: []float64{1}, Upper: []float64{256}},
		MaxChange:  []float64{4},
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	for range 2000 {
		limit, version := s.Param()
		s.Observe(version, delayMs(limit))
	}
	limit, _ := s.Param()
	fmt.Printf("limit %.4g (the delay is 50 ms at 62.5; stationary spread ±2.1)\n", limit)
	// Output:
	// limit 63.44 (the delay is 50 ms at 62.5; stationary spread ±2.1)
}

// A cache sized so that 90% of lookups hit, with no idea of the gain: the
// knob is in entries (thousands), the level a fraction, so the right gain
// is in the hundreds of thousands. With a nil Gain the tuner moves at most
// MaxChange per report while it learns the slope of the hit rate from the
// reports, then decreases its gain and averages.
func ExampleSetpointTuner_learnedGain() {
	rng := rand.New(rand.NewPCG(5, 6))
	hitRate := func(entries float64) float64 { // invented: 90% at 46 052 entries
		p := 1 - math.Exp(-entries/20000)
		hits := 0
		for range 100 { // the hit rate of the last 100 lookups
			if rng.Float64() < p {
				hits++
			}
		}
		return float64(hits) / 100
	}
	s, err := sa.NewSetpointTuner(0.9, sa.Rising, 5000, sa.TunerSettings{
		MaxChange:  []float64{4000}, // entries per report
		Projection: sa.Box{Lower: []float64{1000}, Upper: []float64{500000}},
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	for range 100000 {
		size, version := s.Param()
		s.Observe(version, hitRate(size))
	}
	lg, _ := s.Tuner().LearnedGain()
	avg := make([]float64, 1)
	s.Tuner().Average(avg)
	fmt.Printf("warm-up ended after %d reports; slope in use %.2g per entry\n", lg.SwitchStep+1, lg.InUse)
	fmt.Printf("average %.0f entries (true 46052)\n", avg[0])
	// A learned gain reports no error bars (their measured coverage was
	// short of nominal; Tuner.ErrorBars says why). Watch the parameter,
	// and keep Freeze and Override at hand.
	fmt.Printf("error bars available: %v\n", s.Tuner().ErrorBars().Available)

	// Output:
	// warm-up ended after 32 reports; slope in use 1.1e-05 per entry
	// average 46055 entries (true 46052)
	// error bars available: false
}
