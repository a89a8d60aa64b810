package sampling_test

import (
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/stochroot/stochroot/sampling"
)

// TestReferenceUniformChiSquare applies Pearson's chi-square goodness-of-fit
// test to with-replacement draws: with n cells and N draws the statistic
// Σ (O_i − N/n)² / (N/n) is asymptotically χ²(n − 1) (Pearson 1900; a
// textbook result). We reject at level 0.001, the critical value taken from
// gonum's distuv.ChiSquared, for several seeds and batch sizes.
func TestReferenceUniformChiSquare(t *testing.T) {
	const n, draws = 50, 200000
	crit := distuv.ChiSquared{K: n - 1}.Quantile(0.999)
	for seed := uint64(1); seed <= 5; seed++ {
		s := sampling.NewUniform(n)
		rng := rand.New(rand.NewPCG(seed, 0))
		counts := make([]float64, n)
		batch := make([]int, 37)
		total := 0
		for total+len(batch) <= draws {
			s.Fill(batch, rng)
			for _, i := range batch {
				counts[i]++
			}
			total += len(batch)
		}
		e := float64(total) / n
		chi := 0.0
		for _, o := range counts {
			chi += (o - e) * (o - e) / e
		}
		t.Logf("seed %d: χ² = %.1f, critical value at 0.001 = %.1f", seed, chi, crit)
		require.Less(t, chi, crit)
		require.Equal(t, total/n, s.Epoch())
	}
}

// TestReferenceShuffledOncePerEpoch: sampling without replacement hands out
// every item exactly once per epoch (definition of an epoch; common
// practice), including batches that cross epoch boundaries.
func TestReferenceShuffledOncePerEpoch(t *testing.T) {
	for _, bs := range []int{1, 3, 7, 10, 13} {
		const n = 10
		s := sampling.NewShuffled(n)
		rng := rand.New(rand.NewPCG(9, uint64(bs)))
		var stream []int
		batch := make([]int, bs)
		for len(stream) < 20*n {
			s.Fill(batch, rng)
			stream = append(stream, batch...)
		}
		for e := 0; e < 20; e++ {
			seen := make([]int, n)
			for _, i := range stream[e*n : (e+1)*n] {
				seen[i]++
			}
			for i, c := range seen {
				require.Equal(t, 1, c, "batch %d, epoch %d: item %d seen %d times", bs, e, i, c)
			}
		}
		require.Equal(t, len(stream)/n, s.Epoch())
	}
}

func TestShuffledOrdersDiffer(t *testing.T) {
	s := sampling.NewShuffled(20)
	rng := rand.New(rand.NewPCG(1, 1))
	a, b := make([]int, 20), make([]int, 20)
	s.Fill(a, rng)
	s.Fill(b, rng)
	require.NotEqual(t, a, b, "each epoch draws a fresh order")
	require.Equal(t, 2, s.Epoch())
	s.Reset()
	require.Equal(t, 0, s.Epoch())
	c := make([]int, 20)
	s.Fill(c, rand.New(rand.NewPCG(1, 1)))
	require.Equal(t, a, c, "Reset and the same stream reproduce the order")
}

func TestSequential(t *testing.T) {
	s := sampling.NewSequential(4)
	b := make([]int, 3)
	s.Fill(b, nil)
	require.Equal(t, []int{0, 1, 2}, b)
	s.Fill(b, nil)
	require.Equal(t, []int{3, 0, 1}, b)
	require.Equal(t, 1, s.Epoch())
	require.Equal(t, 4, s.Len())
	s.Reset()
	s.Fill(b, nil)
	require.Equal(t, []int{0, 1, 2}, b)
}

func TestZeroAllocations(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	batch := make([]int, 64)
	for _, s := range []sampling.Sampler{sampling.NewUniform(1000), sampling.NewShuffled(1000), sampling.NewSequential(1000)} {
		if a := testing.AllocsPerRun(200, func() { s.Fill(batch, rng) }); a != 0 {
			t.Errorf("%T: %v allocations per batch, want 0", s, a)
		}
	}
}

func TestBadN(t *testing.T) {
	require.PanicsWithValue(t, "sampling: number of items n = 0, must be ≥ 1", func() { sampling.NewUniform(0) })
	require.Panics(t, func() { sampling.NewShuffled(-1) })
	require.Panics(t, func() { sampling.NewSequential(0) })
}

func BenchmarkFill(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 2))
	batch := make([]int, 256)
	for _, s := range []sampling.Sampler{sampling.NewUniform(1 << 20), sampling.NewShuffled(1 << 20), sampling.NewSequential(1 << 20)} {
		b.Run(fmtType(s), func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				s.Fill(batch, rng)
			}
		})
	}
}

func fmtType(s sampling.Sampler) string {
	switch s.(type) {
	case *sampling.Uniform:
		return "uniform"
	case *sampling.Shuffled:
		return "shuffled"
	}
	return "sequential"
}
