package oracle_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/schedule"
)

// seededBowl is a SeededValue that recreates the measurement's stream from
// its seed pair, as a remote worker does.
type seededBowl struct{ src rand.PCG }

func bowl(x []float64, rng *rand.Rand) (float64, error) {
	f := 0.0
	for i, v := range x {
		f += (v - float64(i)) * (v - float64(i))
	}
	return f + rng.NormFloat64(), nil
}

// Value must not be called: the adapters use ValueSeeded.
func (s *seededBowl) Value([]float64, *rand.Rand) (float64, error) {
	panic("seededBowl.Value called: the adapters should call ValueSeeded")
}

func (s *seededBowl) ValueSeeded(_ context.Context, x []float64, s1, s2 uint64) (float64, error) {
	s.src.Seed(s1, s2)
	var r rand.Rand = *rand.New(&s.src)
	return bowl(x, &r)
}

// TestSeededValueSameBits: the adapters hand a SeededValue the seed pair of
// the stream a plain Value would get, so both give the same gradients bit
// for bit; with one worker the seeded path allocates nothing per call.
func TestSeededValueSameBits(t *testing.T) {
	sizes := schedule.PowerSizes{Scale: 0.1, Exponent: 0.101}
	plain, _ := oracle.NewSPSA(oracle.ValueFunc(bowl), 3, oracle.SPSASettings{Sizes: sizes, Perturbations: 3})
	sv := &seededBowl{}
	seeded, _ := oracle.NewSPSA(sv, 3, oracle.SPSASettings{Sizes: sizes, Perturbations: 3})
	r1, r2 := rand.New(rand.NewPCG(1, 2)), rand.New(rand.NewPCG(1, 2))
	x := []float64{0.5, -1, 2}
	a, b := make([]float64, 3), make([]float64, 3)
	for k := range 5 {
		if err := plain.MeasureContext(context.Background(), k, a, x, r1); err != nil {
			t.Fatal(err)
		}
		if err := seeded.MeasureContext(context.Background(), k, b, x, r2); err != nil {
			t.Fatal(err)
		}
		for i := range a {
			if math.Float64bits(a[i]) != math.Float64bits(b[i]) {
				t.Fatalf("step %d: plain %v, seeded %v", k, a, b)
			}
		}
	}
	if n := testing.AllocsPerRun(50, func() {
		_ = seeded.MeasureContext(context.Background(), 1, b, x, r2)
	}); n != 0 {
		t.Errorf("%v allocations per call with a SeededValue", n)
	}
}
