package sa

import (
	"fmt"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/stochroot/stochroot/schedule"
)

// BenchmarkInferenceOverhead measures what the batch-means inference adds
// to one step of the update core at d = 10 and 100. Each dimension runs:
//
//   - naive: a hand-written SGD step with averaging (the baseline loop),
//   - off: the core with CovarianceOff,
//   - full, diagonal: the core with batch means,
//
// first on the bare update with a fixed measurement (the harshest
// comparison: the step does nothing else), then with a cheap measurement
// (a noisy linear field, d normal draws) as a driver step would. Compare
// ns/op of full and diagonal with off in the same run; allocs/op must be 0.
func BenchmarkInferenceOverhead(b *testing.B) {
	for _, d := range []int{10, 100} {
		for _, measure := range []bool{false, true} {
			kind := "bare"
			if measure {
				kind = "measured"
			}
			b.Run(fmt.Sprintf("d=%d/%s/naive", d, kind), func(b *testing.B) {
				x, avg, y := make([]float64, d), make([]float64, d), make([]float64, d)
				rng := rand.New(rand.NewPCG(1, 2))
				for i := range y {
					y[i] = 1e-3 * rng.NormFloat64()
				}
				g := schedule.Power{Scale: 0.5, Exponent: 0.6}
				k := 0
				b.ReportAllocs()
				for b.Loop() {
					if measure {
						for i := range y {
							y[i] = x[i] - 1 + rng.NormFloat64()
						}
					}
					a := g.Gain(k)
					k++
					w := 1 / float64(k)
					for i, yi := range y {
						x[i] -= a * yi
						avg[i] += (x[i] - avg[i]) * w
					}
				}
			})
			for _, mode := range []CovarianceMode{CovarianceOff, CovarianceFull, CovarianceDiagonal} {
				name := map[CovarianceMode]string{CovarianceOff: "off", CovarianceFull: "full", CovarianceDiagonal: "diagonal"}[mode]
				b.Run(fmt.Sprintf("d=%d/%s/%s", d, kind, name), func(b *testing.B) {
					s, err := Settings{Gain: schedule.Power{Scale: 0.5, Exponent: 0.6}, Inference: Inference{Covariance: mode}}.resolve(d)
					if err != nil {
						b.Fatal(err)
					}
					c := newCore(make([]float64, d), s.Gain, 0, nil, 0)
					c.configure(s, 1)
					y := make([]float64, d)
					rng := rand.New(rand.NewPCG(1, 2))
					for i := range y {
						y[i] = 1e-3 * rng.NormFloat64()
					}
					b.ReportAllocs()
					for b.Loop() {
						if measure {
							for i := range y {
								y[i] = c.x[i] - 1 + rng.NormFloat64()
							}
						}
						if err := c.step(y); err != nil {
							b.Fatal(err)
						}
					}
				})
			}
		}
	}
}

// BenchmarkInferenceRatio times the core with inference off and on in
// alternating chunks of 256 steps within one benchmark, so that drift in
// machine load hits both alike, and reports the ratio on/off as the metric
// "on/off" (the target is ≤ 1.2). One op is one chunk of each.
func BenchmarkInferenceRatio(b *testing.B) {
	for _, d := range []int{10, 100} {
		for _, mode := range []CovarianceMode{CovarianceFull, CovarianceDiagonal} {
			for _, measure := range []bool{false, true} {
				kind := map[bool]string{false: "bare", true: "measured"}[measure]
				name := map[CovarianceMode]string{CovarianceFull: "full", CovarianceDiagonal: "diagonal"}[mode]
				b.Run(fmt.Sprintf("d=%d/%s/%s", d, kind, name), func(b *testing.B) {
					mk := func(m CovarianceMode) *core {
						s, err := Settings{Gain: schedule.Power{Scale: 0.5, Exponent: 0.6}, Inference: Inference{Covariance: m}}.resolve(d)
						if err != nil {
							b.Fatal(err)
						}
						c := newCore(make([]float64, d), s.Gain, 0, nil, 0)
						c.configure(s, 1)
						return c
					}
					off, on := mk(CovarianceOff), mk(mode)
					y := make([]float64, d)
					rng := rand.New(rand.NewPCG(1, 2))
					for i := range y {
						y[i] = 1e-3 * rng.NormFloat64()
					}
					chunk := func(c *core) {
						for range 256 {
							if measure {
								for i := range y {
									y[i] = c.x[i] - 1 + rng.NormFloat64()
								}
							}
							if err := c.step(y); err != nil {
								b.Fatal(err)
							}
						}
					}
					var tOff, tOn time.Duration
					b.ReportAllocs()
					for b.Loop() {
						t0 := time.Now()
						chunk(off)
						t1 := time.Now()
						chunk(on)
						t2 := time.Now()
						tOff += t1.Sub(t0)
						tOn += t2.Sub(t1)
					}
					b.ReportMetric(float64(tOn)/float64(tOff), "on/off")
				})
			}
		}
	}
}
