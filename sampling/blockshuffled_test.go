package sampling_test

import (
	"math/rand/v2"
	"slices"
	"testing"

	"github.com/stretchr/testify/require"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/stochroot/stochroot/sampling"
)

// TestBlockShuffledOncePerEpoch: every item exactly once per epoch
// (definition of an epoch; common practice), for batch sizes that do and do
// not divide n, blocks that do and do not divide n, and blocks above n; and
// the items of one block are handed out contiguously (the property the
// sampler is for).
func TestBlockShuffledOncePerEpoch(t *testing.T) {
	for _, n := range []int{1, 10, 37} {
		for _, blk := range []int{1, 4, 5, 8, 100} {
			for _, bs := range []int{1, 3, 7, 10, 13, 64} {
				s := sampling.NewBlockShuffled(n, blk)
				rng := rand.New(rand.NewPCG(9, uint64(bs*1000+blk)))
				var stream []int
				batch := make([]int, bs)
				for len(stream) < 20*n {
					s.Fill(batch, rng)
					stream = append(stream, batch...)
				}
				b := s.Block()
				require.Equal(t, min(blk, n), b)
				for e := 0; e < 20; e++ {
					ep := stream[e*n : (e+1)*n]
					seen := make([]int, n)
					for _, i := range ep {
						seen[i]++
					}
					for i, c := range seen {
						require.Equal(t, 1, c, "n %d block %d batch %d, epoch %d: item %d seen %d times", n, blk, bs, e, i, c)
					}
					// Contiguity: the first and last position of each block's
					// items are less than the block's size apart.
					first, last := make(map[int]int), make(map[int]int)
					for pos, i := range ep {
						if _, ok := first[i/b]; !ok {
							first[i/b] = pos
						}
						last[i/b] = pos
					}
					for blkNo, f := range first {
						size := min(b, n-blkNo*b)
						require.Equal(t, size-1, last[blkNo]-f, "block %d not contiguous in epoch %d", blkNo, e)
					}
				}
				require.Equal(t, len(stream)/n, s.Epoch())
			}
		}
	}
}

// TestBlockShuffledReproducible: the order is a function of the seed; Reset
// and the same stream give the same order, another seed another one.
func TestBlockShuffledReproducible(t *testing.T) {
	draw := func(s *sampling.BlockShuffled, seed uint64) []int {
		rng := rand.New(rand.NewPCG(seed, 7))
		out := make([]int, 3*1000+17)
		for k := 0; k < len(out); k += 61 {
			s.Fill(out[k:min(k+61, len(out))], rng)
		}
		return out
	}
	s := sampling.NewBlockShuffled(1000, 64)
	a := draw(s, 1)
	s.Reset()
	require.Equal(t, 0, s.Epoch())
	require.Equal(t, a, draw(s, 1), "Reset and the same stream reproduce the order")
	require.Equal(t, a, draw(sampling.NewBlockShuffled(1000, 64), 1), "a new sampler and the same stream reproduce the order")
	require.NotEqual(t, a, draw(sampling.NewBlockShuffled(1000, 64), 2))
	require.NotEqual(t, a[:1000], a[1000:2000], "each epoch draws a fresh order")
}

// TestReferenceBlockShuffledChiSquare checks the claimed distribution with
// Pearson's chi-square goodness-of-fit test (Pearson 1900; a textbook
// result: with k cells and N independent trials, Σ (O − N/k)²/(N/k) is
// asymptotically χ²(k − 1)), at level 0.001 with the critical value from
// gonum's distuv.ChiSquared, on independent epochs of n = 12 items in
// B = 3 blocks of b = 4. The claim is that an epoch is uniform over the
// 3!·(4!)³ block-contiguous orders, with the block order and the orders
// inside the blocks independent. Three joint cells are tested:
//
//   - (block order, order inside block 0): 6·24 = 144 equally likely cells;
//   - (order inside block 1, order inside block 2): 24·24 = 576 cells;
//   - the position of item 5 in the epoch: 12 equally likely cells (b
//     divides n, so every position is equally likely).
//
// The items are drawn one per Fill, which hands out the order itself.
// Epochs are independent (fresh draws each epoch), so the counts over
// epochs are multinomial, as the test needs.
func TestReferenceBlockShuffledChiSquare(t *testing.T) {
	const n, b, epochs = 12, 4, 200000
	s := sampling.NewBlockShuffled(n, b)
	rng := rand.New(rand.NewPCG(2026, 12))
	c1 := make([]float64, 6*24)
	c2 := make([]float64, 24*24)
	c3 := make([]float64, n)
	ep := make([]int, n)
	for range epochs {
		for k := range ep { // one at a time: the order itself (see Fill)
			s.Fill(ep[k:k+1], rng)
		}
		var order []int // block order
		inner := make([][]int, 3)
		for pos, i := range ep {
			blk := i / b
			if len(order) == 0 || order[len(order)-1] != blk {
				order = append(order, blk)
			}
			inner[blk] = append(inner[blk], i%b)
			if i == 5 {
				c3[pos]++
			}
		}
		c1[permIndex(order)*24+permIndex(inner[0])]++
		c2[permIndex(inner[1])*24+permIndex(inner[2])]++
	}
	for name, c := range map[string][]float64{"block order × block 0": c1, "block 1 × block 2": c2, "position of item 5": c3} {
		e := float64(epochs) / float64(len(c))
		chi := 0.0
		for _, o := range c {
			chi += (o - e) * (o - e) / e
		}
		crit := distuv.ChiSquared{K: float64(len(c) - 1)}.Quantile(0.999)
		t.Logf("%s: χ² = %.1f on %d cells, critical value at 0.001 = %.1f", name, chi, len(c), crit)
		require.Less(t, chi, crit, name)
	}
}

// permIndex returns the rank of the permutation p of 0..len(p)−1 in
// lexicographic order (Lehmer code).
func permIndex(p []int) int {
	rank := 0
	for i := range p {
		smaller := 0
		for _, v := range p[i+1:] {
			if v < p[i] {
				smaller++
			}
		}
		rank = rank*(len(p)-i) + smaller
	}
	return rank
}

func TestPermIndex(t *testing.T) {
	seen := make(map[int]bool)
	p := []int{0, 1, 2, 3}
	for {
		seen[permIndex(p)] = true
		if !nextPerm(p) {
			break
		}
	}
	require.Len(t, seen, 24)
	require.Equal(t, 0, permIndex([]int{0, 1, 2, 3}))
	require.Equal(t, 23, permIndex([]int{3, 2, 1, 0}))
}

// nextPerm steps p to the next permutation in lexicographic order.
func nextPerm(p []int) bool {
	i := len(p) - 2
	for i >= 0 && p[i] >= p[i+1] {
		i--
	}
	if i < 0 {
		return false
	}
	j := len(p) - 1
	for p[j] <= p[i] {
		j--
	}
	p[i], p[j] = p[j], p[i]
	slices.Reverse(p[i+1:])
	return true
}

// TestBlockShuffledBatchIsSetOfOrder: a Fill of m items smaller than a
// block writes the same set of items as m Fills of one item with the same
// stream, each block's items ascending (the documented presentation).
func TestBlockShuffledBatchIsSetOfOrder(t *testing.T) {
	for _, m := range []int{2, 7, 63} {
		const n, blk = 1024, 64
		s1, sm := sampling.NewBlockShuffled(n, blk), sampling.NewBlockShuffled(n, blk)
		r1, rm := rand.New(rand.NewPCG(5, 6)), rand.New(rand.NewPCG(5, 6))
		one, batch := make([]int, m), make([]int, m)
		for c := range 3 * n / m {
			for k := range one {
				s1.Fill(one[k:k+1], r1)
			}
			sm.Fill(batch, rm)
			for k := 1; k < m; k++ {
				newEpoch := (c*m+k)%n == 0 // a block may be visited again at once
				if !newEpoch && batch[k]/blk == batch[k-1]/blk && batch[k] <= batch[k-1] {
					t.Fatalf("m %d: items %d, %d of one block not ascending", m, batch[k-1], batch[k])
				}
			}
			require.ElementsMatch(t, one, batch, "m %d", m)
		}
		require.Equal(t, s1.Epoch(), sm.Epoch())
	}
}

// TestReferenceBlockShuffledWholeBlocks checks the path where each call
// takes whole blocks (the inner order is not drawn): every call of b items
// is one block, ascending, and the block order of an epoch is uniform over
// the 3! = 6 orders of B = 3 blocks, by Pearson's chi-square test (Pearson
// 1900) at level 0.001 with gonum's distuv.ChiSquared critical value, over
// independent epochs. Calls of 6 items (a block and a half) check that the
// mixed path still hands out every item once per epoch.
func TestReferenceBlockShuffledWholeBlocks(t *testing.T) {
	const n, b, epochs = 12, 4, 60000
	s := sampling.NewBlockShuffled(n, b)
	rng := rand.New(rand.NewPCG(77, 1))
	counts := make([]float64, 6)
	call := make([]int, b)
	order := make([]int, 3)
	for range epochs {
		for k := range 3 {
			s.Fill(call, rng)
			lo := call[0]
			require.Zero(t, lo%b, "a call of b items starts a block")
			for j, v := range call {
				require.Equal(t, lo+j, v, "a whole block goes out ascending")
			}
			order[k] = lo / b
		}
		counts[permIndex(order)]++
	}
	require.Equal(t, epochs, s.Epoch())
	e := float64(epochs) / 6
	chi := 0.0
	for _, o := range counts {
		chi += (o - e) * (o - e) / e
	}
	crit := distuv.ChiSquared{K: 5}.Quantile(0.999)
	t.Logf("block order: χ² = %.1f on 6 cells, critical value at 0.001 = %.1f", chi, crit)
	require.Less(t, chi, crit)

	s = sampling.NewBlockShuffled(n, b)
	var stream []int
	call = make([]int, 6)
	for len(stream) < 50*n {
		s.Fill(call, rng)
		stream = append(stream, call...)
	}
	for e := range 50 {
		seen := make([]int, n)
		for _, i := range stream[e*n : (e+1)*n] {
			seen[i]++
		}
		for i, c := range seen {
			require.Equal(t, 1, c, "epoch %d: item %d seen %d times", e, i, c)
		}
	}
	require.Equal(t, 50, s.Epoch())
}

func TestBlockShuffledZeroAllocations(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	batch := make([]int, 64)
	s := sampling.NewBlockShuffled(1000, 64)
	if a := testing.AllocsPerRun(200, func() { s.Fill(batch, rng) }); a != 0 {
		t.Errorf("%v allocations per batch, want 0", a)
	}
}

func TestBlockShuffledBadInput(t *testing.T) {
	require.PanicsWithValue(t, "sampling: NewBlockShuffled: block size 0, must be ≥ 1", func() { sampling.NewBlockShuffled(10, 0) })
	require.PanicsWithValue(t, "sampling: number of items n = 0, must be ≥ 1", func() { sampling.NewBlockShuffled(0, 4) })
	var s *sampling.BlockShuffled
	require.PanicsWithValue(t, "sampling: Fill called on a nil *sampling.BlockShuffled (construct it with NewBlockShuffled)", func() { s.Fill(nil, nil) })
	require.PanicsWithValue(t, "sampling: BlockShuffled.Fill: rng is nil; pass a *rand.Rand (only Sequential draws no randomness)", func() {
		sampling.NewBlockShuffled(10, 3).Fill(make([]int, 1), nil)
	})
}
