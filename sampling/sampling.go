// Package sampling draws indices of the items of a finite sum for
// stochastic-gradient methods: with replacement ([Uniform]), without
// replacement in a fresh random order each epoch ([Shuffled]), without
// replacement in shuffled blocks of consecutive items, which reads memory
// far faster ([BlockShuffled]; read its statement of the distribution),
// and in sequential full passes ([Sequential]).
//
// Every sampler fills a caller-owned batch and allocates nothing per batch.
// Randomness comes from the *rand.Rand passed to Fill, so that a driver can
// derive it from its one seed and a run reproduces bit for bit; the sampler
// itself holds only its position (and, for Shuffled, the current order).
//
// # Epochs
//
// An epoch is one pass over the n items. Epoch reports the number of
// completed epochs: for Shuffled and Sequential the number of times the last
// position of a pass was handed out; for Uniform, which has no passes, the
// number of draws divided by n (rounded down), i.e. epoch-equivalents of
// work.
//
// # Concurrency
//
// A sampler is not safe for concurrent use.
//
// # Programmer errors
//
// A bad item count given to a constructor, a method called on a nil
// sampler pointer, and a nil rng given to a Fill that draws randomness are
// programmer errors: they panic, with a message that says what was wrong,
// rather than return errors from the batch loop.
package sampling

import (
	"fmt"
	bits64 "math/bits"
	"math/rand/v2"
)

// Sampler is implemented by the samplers of this package. Fill writes
// len(dst) indices in [0, Len()) into dst, drawing any randomness from rng.
type Sampler interface {
	Fill(dst []int, rng *rand.Rand)
	// Len returns the number of items n.
	Len() int
	// Epoch returns the number of completed epochs.
	Epoch() int
	// Reset returns the sampler to its state right after construction.
	Reset()
}

func checkN(n int) {
	if n < 1 {
		panic(fmt.Sprintf("sampling: number of items n = %d, must be ≥ 1", n))
	}
}

// MaxShuffledItems is the largest n [NewShuffled] accepts: its order of n
// ints then takes at most 8 GiB. Larger counts are refused with a panic
// that names n and the bytes the order would need, instead of a fatal
// out-of-memory error in the allocator (which no recover catches); draw
// with replacement ([Uniform], no memory per item) from larger sets.
const MaxShuffledItems = 1 << 30

// panicNil is the panic of a method called on a nil sampler pointer.
func panicNil(typ, method string) {
	panic(fmt.Sprintf("sampling: %s called on a nil %s (construct it with New%s)", method, typ, typ[len("*sampling."):]))
}

// panicNilRng is the panic of Fill with a nil rng.
func panicNilRng(typ string) {
	panic(fmt.Sprintf("sampling: %s.Fill: rng is nil; pass a *rand.Rand (only Sequential draws no randomness)", typ))
}

// Uniform draws indices independently and uniformly from [0, n): sampling
// with replacement, so a batch may repeat an item and miss others.
type Uniform struct {
	n     int
	draws int
}

// NewUniform returns a with-replacement sampler over n items. It panics if
// n < 1.
func NewUniform(n int) *Uniform {
	checkN(n)
	return &Uniform{n: n}
}

// Fill writes len(dst) independent uniform indices into dst.
//
// It panics with a message saying which if s or rng is nil.
func (s *Uniform) Fill(dst []int, rng *rand.Rand) {
	if s == nil {
		panicNil("*sampling.Uniform", "Fill")
	}
	if rng == nil && len(dst) > 0 {
		panicNilRng("Uniform")
	}
	for i := range dst {
		dst[i] = rng.IntN(s.n)
	}
	s.draws += len(dst)
}

// Len returns n.
func (s *Uniform) Len() int {
	if s == nil {
		panicNil("*sampling.Uniform", "Len")
	}
	return s.n
}

// Epoch returns the number of draws so far divided by n, rounded down.
func (s *Uniform) Epoch() int {
	if s == nil {
		panicNil("*sampling.Uniform", "Epoch")
	}
	return s.draws / s.n
}

// Reset sets the draw count to zero.
func (s *Uniform) Reset() {
	if s == nil {
		panicNil("*sampling.Uniform", "Reset")
	}
	s.draws = 0
}

// Shuffled draws without replacement: it hands out the items in a random
// order and, when all n have been handed out (one epoch), draws a fresh
// random order (Fisher–Yates shuffle) for the next epoch.
//
// A batch that crosses an epoch boundary is filled with the remaining items
// of the current epoch followed by the first items of the next one, so every
// epoch still hands out each item exactly once, and such a batch may contain
// an item twice (once from each epoch). Batches of size n that start at an
// epoch boundary are exactly the n items once each.
type Shuffled struct {
	order []int
	pos   int
	epoch int
	fresh bool
}

// NewShuffled returns a without-replacement sampler over n items. It panics
// if n < 1 or n > [MaxShuffledItems]. It allocates the order of n ints
// once.
func NewShuffled(n int) *Shuffled {
	checkN(n)
	if n > MaxShuffledItems {
		panic(fmt.Sprintf("sampling: NewShuffled: number of items n = %d: its order would need %.4g bytes, more than MaxShuffledItems = %d allow (%d bytes); use NewUniform for larger sets", n, 8*float64(n), MaxShuffledItems, 8*MaxShuffledItems))
	}
	s := &Shuffled{order: make([]int, n)}
	s.Reset()
	return s
}

// Fill writes the next len(dst) items of the current random order into dst,
// starting a new epoch with a new order where needed. It panics with a
// message saying which if s or rng is nil (an empty dst needs no rng).
func (s *Shuffled) Fill(dst []int, rng *rand.Rand) {
	if s == nil {
		panicNil("*sampling.Shuffled", "Fill")
	}
	if rng == nil && len(dst) > 0 {
		panicNilRng("Shuffled")
	}
	for i := range dst {
		if s.fresh || s.pos == len(s.order) {
			s.shuffle(rng)
		}
		dst[i] = s.order[s.pos]
		s.pos++
		if s.pos == len(s.order) {
			s.epoch++
		}
	}
}

// shuffle draws a fresh order with the Fisher–Yates shuffle.
func (s *Shuffled) shuffle(rng *rand.Rand) {
	o := s.order
	for i := len(o) - 1; i > 0; i-- {
		j := rng.IntN(i + 1)
		o[i], o[j] = o[j], o[i]
	}
	s.pos = 0
	s.fresh = false
}

// Len returns n.
func (s *Shuffled) Len() int {
	if s == nil {
		panicNil("*sampling.Shuffled", "Len")
	}
	return len(s.order)
}

// Epoch returns the number of completed passes.
func (s *Shuffled) Epoch() int {
	if s == nil {
		panicNil("*sampling.Shuffled", "Epoch")
	}
	return s.epoch
}

// Reset restores the identity order and position 0 and forgets the epochs;
// the next Fill starts with a fresh shuffle.
func (s *Shuffled) Reset() {
	if s == nil {
		panicNil("*sampling.Shuffled", "Reset")
	}
	for i := range s.order {
		s.order[i] = i
	}
	s.pos, s.epoch, s.fresh = 0, 0, true
}

// BlockShuffled draws without replacement like [Shuffled], but keeps
// consecutive items together, so that the rows a finite sum reads in an
// epoch come from memory in runs of Block() consecutive rows instead of one
// row at a time from anywhere: at n = 10^6 rows of 10 values a BlockShuffled
// epoch with blocks of 64 rows costs about as much as a sequential pass
// (see BENCHMARKS.md), where a Shuffled epoch costs several times more.
//
// # Distribution of the visiting order
//
// The items are cut into B = ⌈n/b⌉ blocks of b consecutive items
// (0…b−1, b…2b−1, …; the last block has n − (B−1)·b items). Each epoch
// draws, independently of every other epoch,
//
//   - a uniformly random order of the B blocks (Fisher–Yates shuffle), and
//   - for each block, when it is reached, a uniformly random order of its
//     items (Fisher–Yates shuffle), independently of the other blocks,
//
// and hands out the blocks in that order, each one's items in its own
// order. So each epoch is uniformly distributed over the B!·∏ (size of
// block)! orders that keep every block's items contiguous, and it hands
// out every item exactly once.
//
// How it differs from a full uniform permutation ([Shuffled]): items of the
// same block are always within b positions of each other, so a mini-batch
// of m ≤ b items holds items of at most two blocks (instead of a uniform
// random subset of all n), and items of different blocks never interleave.
// Each item is still equally likely at every position of the epoch when b
// divides n, and the block order is as random as a full shuffle at the
// level of blocks. The guarantee is therefore weaker than Shuffled's unless
// the storage order carries no information: when the rows were put in a
// uniformly random order once (permute the data rows and their targets
// together with one seeded permutation before building the model), every
// block is a uniform random subset of the rows, and, over the draw of that
// one permutation, the order of each epoch is a uniform permutation of the
// original rows; what remains different is that successive epochs are not
// independent (the same rows stay together in blocks).
// Data stored sorted (by time, by label, by a feature) must be permuted
// once that way, or sampled with Shuffled. b = 1 is exactly Shuffled's
// distribution; b ≥ n is one block, which is also a uniform permutation.
//
// Fill hands out the order in its sequence, with one difference of
// presentation: the items that one call writes from one visit of a block
// (a block can be visited twice in one call, at the end of an epoch and at
// the start of the next) are written in ascending order (so that their rows are read in
// storage order, which the memory prefetcher follows). Which items a call
// writes, the batch as a set, is exactly as in the order described above;
// only their order within the call differs, which does not change a batch
// mean (up to rounding). With batches of one item (plain SGD) the items
// come in the random order itself. When a call takes a whole block from
// its first item, the order inside that block could not change the call's
// set and is not drawn (the items go out ascending): this saves one random
// draw per item for batches of whole blocks. The random stream then
// advances differently than with smaller calls, but every order that is
// drawn is still a fresh uniform draw, so the distribution of the batches
// is the one stated; the sequence is reproducible from the seed and the
// batch sizes.
//
// A batch that crosses an epoch boundary is filled as by Shuffled: the rest
// of the current epoch, then the first items of the next.
//
// The memory cost is ⌈n/b⌉ + b ints and ⌈b/64⌉ words; the random cost is
// one bounded draw per block and one per item of the blocks that calls take
// in parts.
type BlockShuffled struct {
	n, b   int
	blocks []int    // the block order of the current epoch
	buf    []int    // the items of the current block, capacity b
	bits   []uint64 // ⌈b/64⌉ words of scratch for ascending
	cur    []int    // buf[:size of the current block], in their random order
	bpos   int      // next position in blocks
	ipos   int      // next position in cur
	epoch  int
	fresh  bool
}

// NewBlockShuffled returns a without-replacement sampler over n items that
// visits shuffled blocks of block consecutive items, each block's items in
// a random order (see the type documentation for the distribution). A block
// larger than n is taken as n. It panics if n < 1, n > [MaxShuffledItems] or
// block < 1. It allocates ⌈n/block⌉ + block ints once.
func NewBlockShuffled(n, block int) *BlockShuffled {
	checkN(n)
	if n > MaxShuffledItems {
		panic(fmt.Sprintf("sampling: NewBlockShuffled: number of items n = %d exceeds MaxShuffledItems = %d; use NewUniform for larger sets", n, MaxShuffledItems))
	}
	if block < 1 {
		panic(fmt.Sprintf("sampling: NewBlockShuffled: block size %d, must be ≥ 1", block))
	}
	block = min(block, n)
	s := &BlockShuffled{n: n, b: block, blocks: make([]int, (n+block-1)/block), buf: make([]int, block), bits: make([]uint64, (block+63)/64)}
	s.Reset()
	return s
}

// Fill writes the next len(dst) items of the current order into dst,
// starting a new epoch with a new order where needed. It panics with a
// message saying which if s or rng is nil (an empty dst needs no rng).
func (s *BlockShuffled) Fill(dst []int, rng *rand.Rand) {
	if s == nil {
		panicNil("*sampling.BlockShuffled", "Fill")
	}
	if rng == nil && len(dst) > 0 {
		panicNilRng("BlockShuffled")
	}
	for i := 0; i < len(dst); {
		if s.ipos == len(s.cur) {
			lo, size := s.enterBlock(rng)
			if size <= len(dst)-i {
				// The call takes the whole block: its set does not
				// depend on the order inside the block, which is not
				// drawn; the items go out ascending.
				for k := range size {
					dst[i+k] = lo + k
				}
				s.cur, s.ipos = s.buf[:size], size
				i += size
				if s.bpos == len(s.blocks) {
					s.epoch++
				}
				continue
			}
			s.shuffleBlock(lo, size, rng)
		}
		k := copy(dst[i:], s.cur[s.ipos:])
		s.ascending(dst[i : i+k])
		s.ipos += k
		i += k
		if s.ipos == len(s.cur) && s.bpos == len(s.blocks) {
			s.epoch++
		}
	}
}

// ascending rewrites seg, items of the current block, in ascending order
// (a bit set over the block's offsets: linear time, no allocation), so that
// the rows of a batch are read in storage order.
func (s *BlockShuffled) ascending(seg []int) {
	if len(seg) < 2 {
		return
	}
	lo := s.cur[0] - s.cur[0]%s.b // first item of the block
	bits := s.bits
	for _, i := range seg {
		o := i - lo
		bits[o>>6] |= 1 << (o & 63)
	}
	k := 0
	for w, word := range bits {
		for word != 0 {
			seg[k] = lo + w<<6 + bits64.TrailingZeros64(word)
			k++
			word &= word - 1
		}
		bits[w] = 0
	}
}

// enterBlock moves to the next block of the epoch, drawing a new block
// order first when the epoch is over, and returns the block's first item
// and size.
func (s *BlockShuffled) enterBlock(rng *rand.Rand) (lo, size int) {
	if s.fresh || s.bpos == len(s.blocks) {
		o := s.blocks
		for i := len(o) - 1; i > 0; i-- {
			j := rng.IntN(i + 1)
			o[i], o[j] = o[j], o[i]
		}
		s.bpos, s.fresh = 0, false
	}
	lo = s.blocks[s.bpos] * s.b
	s.bpos++
	return lo, min(s.b, s.n-lo)
}

// shuffleBlock draws the order inside the block of size items from lo.
func (s *BlockShuffled) shuffleBlock(lo, size int, rng *rand.Rand) {
	c := s.buf[:size]
	for k := range c {
		c[k] = lo + k
	}
	for i := len(c) - 1; i > 0; i-- {
		j := rng.IntN(i + 1)
		c[i], c[j] = c[j], c[i]
	}
	s.cur, s.ipos = c, 0
}

// Len returns n.
func (s *BlockShuffled) Len() int {
	if s == nil {
		panicNil("*sampling.BlockShuffled", "Len")
	}
	return s.n
}

// Block returns the block size b (at most n).
func (s *BlockShuffled) Block() int {
	if s == nil {
		panicNil("*sampling.BlockShuffled", "Block")
	}
	return s.b
}

// Epoch returns the number of completed passes.
func (s *BlockShuffled) Epoch() int {
	if s == nil {
		panicNil("*sampling.BlockShuffled", "Epoch")
	}
	return s.epoch
}

// Reset restores the identity block order and position 0 and forgets the
// epochs; the next Fill starts with a fresh shuffle.
func (s *BlockShuffled) Reset() {
	if s == nil {
		panicNil("*sampling.BlockShuffled", "Reset")
	}
	for i := range s.blocks {
		s.blocks[i] = i
	}
	s.cur, s.bpos, s.ipos, s.epoch, s.fresh = s.buf[:0], 0, 0, 0, true
}

// Sequential hands out 0, 1, …, n−1, 0, 1, … in order; it uses no
// randomness. Batches of size n starting at position 0 are full passes.
type Sequential struct {
	n, pos, epoch int
}

// NewSequential returns a sequential sampler over n items. It panics if
// n < 1.
func NewSequential(n int) *Sequential {
	checkN(n)
	return &Sequential{n: n}
}

// Fill writes the next len(dst) positions, wrapping around after n−1. rng is
// not used and may be nil. It panics with a message saying so if s is nil.
func (s *Sequential) Fill(dst []int, _ *rand.Rand) {
	if s == nil {
		panicNil("*sampling.Sequential", "Fill")
	}
	for i := range dst {
		dst[i] = s.pos
		s.pos++
		if s.pos == s.n {
			s.pos = 0
			s.epoch++
		}
	}
}

// Len returns n.
func (s *Sequential) Len() int {
	if s == nil {
		panicNil("*sampling.Sequential", "Len")
	}
	return s.n
}

// Epoch returns the number of completed passes.
func (s *Sequential) Epoch() int {
	if s == nil {
		panicNil("*sampling.Sequential", "Epoch")
	}
	return s.epoch
}

// Reset returns to position 0 and forgets the epochs.
func (s *Sequential) Reset() {
	if s == nil {
		panicNil("*sampling.Sequential", "Reset")
	}
	s.pos, s.epoch = 0, 0
}

var (
	_ Sampler = (*Uniform)(nil)
	_ Sampler = (*Shuffled)(nil)
	_ Sampler = (*Sequential)(nil)
	_ Sampler = (*BlockShuffled)(nil)
)
