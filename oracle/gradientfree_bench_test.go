package oracle_test

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/schedule"
)

var sink float64

// cheap is a measurement that costs almost nothing, so that a benchmark of
// a step measures the adapter's own overhead.
func cheap(x []float64, rng *rand.Rand) (float64, error) { return x[0] + x[len(x)-1], nil }

// baselineSPSA is a hand-written two-measurement SPSA gradient with the
// same work as the adapter minus its bookkeeping: one Uint64 per 64 signs,
// the two perturbed points, the two measurements (on one shared stream)
// and ĝ = (y⁺ − y⁻)/(2c)·Δ.
type baselineSPSA struct {
	delta, plus, minus []float64
}

func (s *baselineSPSA) step(dst, x []float64, c float64, rng *rand.Rand) {
	d := s.delta
	for t := 0; t < len(d); t += 64 {
		u := rng.Uint64()
		for b := t; b < min(t+64, len(d)); b++ {
			d[b] = float64(int64(u>>uint(b-t)&1)*2 - 1) // branch-free, as a careful hand-written loop would be
		}
	}
	for i := range x {
		s.plus[i] = x[i] + c*d[i]
		s.minus[i] = x[i] - c*d[i]
	}
	yp, _ := cheap(s.plus, rng)
	ym, _ := cheap(s.minus, rng)
	w := (yp - ym) / (2 * c)
	for i := range dst {
		dst[i] = w * d[i]
	}
}

// BenchmarkSPSAStep measures one SPSA gradient (two measurements that cost
// nothing) through the adapter and through the hand-written baseline, at
// p = 10 and p = 1000. Compare adapter/baseline within one run.
func BenchmarkSPSAStep(b *testing.B) {
	for _, p := range []int{10, 1000} {
		x, dst := make([]float64, p), make([]float64, p)
		for i := range x {
			x[i] = float64(i) / float64(p)
		}
		b.Run(fmt.Sprintf("p=%d/adapter", p), func(b *testing.B) {
			g, err := oracle.NewSPSA(oracle.ValueFunc(cheap), p, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.1, Exponent: 0.101}})
			if err != nil {
				b.Fatal(err)
			}
			rng := rand.New(rand.NewPCG(1, 2))
			b.ReportAllocs()
			k := 0
			for b.Loop() {
				g.SetStep(k)
				k++
				if err := g.Measure(dst, x, rng); err != nil {
					b.Fatal(err)
				}
			}
			sink += dst[0]
		})
		b.Run(fmt.Sprintf("p=%d/baseline", p), func(b *testing.B) {
			s := &baselineSPSA{delta: make([]float64, p), plus: make([]float64, p), minus: make([]float64, p)}
			c := schedule.PowerSizes{Scale: 0.1, Exponent: 0.101}
			rng := rand.New(rand.NewPCG(1, 2))
			b.ReportAllocs()
			k := 0
			for b.Loop() {
				s.step(dst, x, c.Size(k), rng)
				k++
			}
			sink += dst[0]
		})
	}
}

// spinIters is the number of iterations of spin that take about 1 ms of
// CPU on this machine, calibrated once from the fastest of 5 timings of
// 2^16 iterations (the fastest is the least disturbed by other load).
var spinIters = func() int {
	const n = 1 << 16
	best := time.Duration(math.MaxInt64)
	for range 5 {
		start := time.Now()
		sink += spin(n)
		best = min(best, time.Since(start))
	}
	return max(1, int(float64(n)*float64(time.Millisecond)/float64(best)))
}()

// spin does n dependent floating-point operations (CPU work that cannot be
// skipped).
func spin(n int) float64 {
	v := 1.0
	for range n {
		v = v*1.0000001 + 1e-9
	}
	return v
}

// BenchmarkSPSAParallel measures a two-measurement SPSA step whose
// measurements each take about 1 ms of CPU, on 1 and on 2 workers. The
// speed-up is the ratio of the two times per step (ideal 2 on 2 free
// cores).
func BenchmarkSPSAParallel(b *testing.B) {
	n := spinIters
	f := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		return x[0] + 1e-12*spin(n) + rng.Float64(), nil
	})
	for _, w := range []int{1, 2} {
		b.Run(fmt.Sprintf("workers=%d", w), func(b *testing.B) {
			g, err := oracle.NewSPSA(f, 10, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.1}, Workers: w})
			if err != nil {
				b.Fatal(err)
			}
			x, dst := make([]float64, 10), make([]float64, 10)
			rng := rand.New(rand.NewPCG(1, 2))
			b.ReportAllocs()
			for b.Loop() {
				if err := g.Measure(dst, x, rng); err != nil {
					b.Fatal(err)
				}
			}
			if math.IsNaN(dst[0]) {
				b.Fatal("NaN")
			}
		})
	}
}

// BenchmarkSPSAParallelSpeedup alternates one step on 1 worker and one on
// 2 workers (measurements of about 1 ms CPU each), so that both see the
// same machine load, and reports speedup = time(1 worker)/time(2 workers).
// As a hand-written baseline in the same loop it times the same two spins
// run one after the other and on two plain goroutines: baseline-speedup is
// what the machine offers at that moment (below 2 when other processes
// hold a core), and the adapter's speed-up should match it.
func BenchmarkSPSAParallelSpeedup(b *testing.B) {
	n := spinIters
	f := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		return x[0] + 1e-12*spin(n) + rng.Float64(), nil
	})
	c := schedule.PowerSizes{Scale: 0.1}
	g1, _ := oracle.NewSPSA(f, 10, oracle.SPSASettings{Sizes: c, Workers: 1})
	g2, _ := oracle.NewSPSA(f, 10, oracle.SPSASettings{Sizes: c, Workers: 2})
	x, dst := make([]float64, 10), make([]float64, 10)
	r1, r2 := rand.New(rand.NewPCG(1, 2)), rand.New(rand.NewPCG(1, 2))
	var t1, t2, b1, b2 time.Duration
	var out [2]float64
	b.ReportAllocs()
	for b.Loop() {
		s := time.Now()
		if err := g1.Measure(dst, x, r1); err != nil {
			b.Fatal(err)
		}
		m := time.Now()
		if err := g2.Measure(dst, x, r2); err != nil {
			b.Fatal(err)
		}
		t1 += m.Sub(s)
		t2 += time.Since(m)

		s = time.Now()
		out[0] = spin(n)
		out[1] = spin(n)
		m = time.Now()
		done := make(chan float64)
		go func() { done <- spin(n) }()
		v := spin(n)
		out[0], out[1] = v, <-done
		b1 += m.Sub(s)
		b2 += time.Since(m)
	}
	sink += out[0] + out[1]
	b.ReportMetric(float64(t1)/float64(t2), "speedup")
	b.ReportMetric(float64(b1)/float64(b2), "baseline-speedup")
	b.ReportMetric(float64(t1)/float64(b.N)/2/1e6, "ms/measurement")
}
