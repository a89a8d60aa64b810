package sa_test

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// noisyLinear measures h(x) = x − θ + N(0, 1) noise, θ_i = 1: the same
// arithmetic as the hand-written baseline below.
func noisyLinear(dst, x []float64, rng *rand.Rand) error {
	for i := range x {
		dst[i] = x[i] - 1 + rng.NormFloat64()
	}
	return nil
}

func TestStepAllocations(t *testing.T) {
	for _, g := range []schedule.Schedule{gain, schedule.Kesten{Base: gain}} {
		sv, err := sa.NewSolver(oracle.FieldFunc(noisyLinear), make([]float64, 100),
			sa.Settings{Gain: g, Projection: sa.Box{Lower: filled(100, -5), Upper: filled(100, 5)}})
		if err != nil {
			t.Fatal(err)
		}
		if a := testing.AllocsPerRun(1000, func() {
			if err := sv.Step(); err != nil {
				t.Fatal(err)
			}
		}); a != 0 {
			t.Errorf("%T: %v allocations per step, want 0", g, a)
		}
	}
	// Through the driver: the allocations of a run do not grow with its
	// length. Inference is off here because building the final error bars
	// formats messages, and under the race detector fmt's sync.Pool drops
	// buffers at random; the steps with inference on are covered above.
	run := func(steps int) float64 {
		return testing.AllocsPerRun(5, func() {
			_, _ = sa.RobbinsMonro(context.Background(), oracle.FieldFunc(noisyLinear), make([]float64, 10),
				sa.Settings{Gain: gain, MaxSteps: steps, Inference: sa.Inference{Covariance: sa.CovarianceOff}})
		})
	}
	if short, long := run(1000), run(20000); short != long {
		t.Errorf("RobbinsMonro allocates %v for 1000 steps and %v for 20000: steps allocate", short, long)
	}
}

func filled(n int, v float64) []float64 {
	s := make([]float64, n)
	for i := range s {
		s[i] = v
	}
	return s
}

// BenchmarkStep compares one Robbins–Monro step through the public API
// (Solver.Step: oracle call through an interface, gain from the schedule,
// finiteness check, update, Polyak–Ruppert average) with a hand-written loop
// doing the same arithmetic inline.
func BenchmarkStep(b *testing.B) {
	for _, d := range []int{10, 100, 1000} {
		b.Run(fmt.Sprintf("api/d=%d", d), func(b *testing.B) {
			sv, err := sa.NewSolver(oracle.FieldFunc(noisyLinear), make([]float64, d), sa.Settings{Gain: gain, Seed: 1})
			if err != nil {
				b.Fatal(err)
			}
			b.ReportAllocs()
			for b.Loop() {
				if err := sv.Step(); err != nil {
					b.Fatal(err)
				}
			}
		})
		b.Run(fmt.Sprintf("handwritten/d=%d", d), func(b *testing.B) {
			x := make([]float64, d)
			y := make([]float64, d)
			avg := make([]float64, d)
			rng := rand.New(rand.NewPCG(1, 2))
			k := 0
			b.ReportAllocs()
			for b.Loop() {
				for i := range x {
					y[i] = x[i] - 1 + rng.NormFloat64()
				}
				a := 1 / math.Pow(float64(k)+1, 0.7)
				for i := range x {
					x[i] -= a * y[i]
				}
				k++
				w := 1 / float64(k)
				for i := range x {
					avg[i] += (x[i] - avg[i]) * w
				}
			}
			stepSink = avg[0]
		})
	}
}

var stepSink float64
