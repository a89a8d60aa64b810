package oracle_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/schedule"
)

// FuzzGradientFreeSettings builds Kiefer–Wolfowitz and SPSA adapters from
// fuzzed settings. A constructor must either refuse with ErrSettings (or
// the perturbation sizes' own error) or return an adapter whose gradient
// at 0 is finite or a clean error; it must never panic or try to allocate
// more than MaxScratchBytes.
func FuzzGradientFreeSettings(f *testing.F) {
	f.Add(3, 0.1, 0.101, 2, 1, false, false)
	f.Add(1<<40, 0.1, 0.101, 0, 0, true, false)
	f.Add(2, math.NaN(), 0.1, 1, -1, false, true)
	f.Add(4, 1.0, -1.0, 1<<30, 1<<20, true, true)
	f.Fuzz(func(t *testing.T, dim int, c, gamma float64, workers, q int, crn, one bool) {
		sizes := schedule.PowerSizes{Scale: c, Exponent: gamma}
		val := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
			s := 0.0
			for _, v := range x {
				s += v * v
			}
			return s + rng.NormFloat64(), nil
		})
		check := func(name string, g oracle.ContextField, err error) {
			if err != nil {
				if !errors.Is(err, oracle.ErrSettings) {
					t.Fatalf("%s: error %v does not wrap ErrSettings", name, err)
				}
				return
			}
			if dim > 64 || workers > 8 {
				return // valid but too large to measure in a fuzz iteration
			}
			x, dst := make([]float64, dim), make([]float64, dim)
			if err := g.MeasureContext(context.Background(), 3, dst, x, rand.New(rand.NewPCG(1, 2))); err != nil {
				return
			}
			for i, v := range dst {
				if math.IsNaN(v) || math.IsInf(v, 0) {
					t.Fatalf("%s: gradient[%d] = %v with no error", name, i, v)
				}
			}
		}
		kw, err := oracle.NewKieferWolfowitz(val, dim, oracle.KieferWolfowitzSettings{Sizes: sizes, Workers: workers, CommonRandomNumbers: crn})
		check("KieferWolfowitz", kw, err)
		if q > 64 {
			q = q % 64
		}
		sp, err := oracle.NewSPSA(val, dim, oracle.SPSASettings{Sizes: sizes, Workers: workers, Perturbations: q, CommonRandomNumbers: crn, OneMeasurement: one})
		check("SPSA", sp, err)
	})
}
