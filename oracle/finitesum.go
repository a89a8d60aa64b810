package oracle

import (
	"errors"
	"fmt"
	"math/rand/v2"
	"reflect"
	"runtime"
	"runtime/debug"
	"sync"
	"sync/atomic"
	"time"

	"gonum.org/v1/gonum/floats"

	"github.com/stochroot/stochroot/sampling"
)

// FiniteSum is an objective that is the mean of n sample losses,
//
//	f(x) = (1/n) Σ_{i=0}^{n−1} f_i(x),
//
// as in empirical risk minimisation. It gives access to the gradient of
// one sample at a time; [MiniBatch] turns it into a mini-batch gradient
// oracle for the drivers in package sa.
//
// AddGradient adds w·∇f_i(x) into dst (dst += w·∇f_i(x)), for 0 ≤ i < Len()
// and len(dst) == len(x) == Dim(). It must not allocate, must not modify or
// retain x, and must be safe to call from several goroutines at once with
// different dst (the parallel mini-batch evaluation does that). It may panic
// on an index out of range or a length mismatch: the callers in this module
// check both before calling.
type FiniteSum interface {
	// Len returns the number of samples n ≥ 1.
	Len() int
	// Dim returns the dimension of x.
	Dim() int
	// AddGradient adds w·∇f_i(x) into dst.
	AddGradient(dst, x []float64, i int, w float64)
}

// Errors of the finite-sum adapters and models besides ErrSettings (which
// also covers their invalid arguments: a batch size, a worker count, a model
// parameter). Test for them with errors.Is; the messages say which argument
// and why.
var (
	// ErrData is wrapped by errors about invalid data (empty, ragged,
	// non-finite, bad labels, a constant column under standardisation).
	ErrData = errors.New("oracle: invalid data")
)

// BatchSettings holds the optional knobs of [NewMiniBatch] and
// [NewFullBatch]. The zero value is a sensible default.
type BatchSettings struct {
	// Workers is the largest number of goroutines that evaluate one large
	// batch (the calling goroutine counts as one). 0 means
	// runtime.GOMAXPROCS(0) at construction; 1 evaluates every batch on the
	// calling goroutine. More workers than GOMAXPROCS only add overhead. The result does not depend on Workers: it is the
	// same bit for bit for every value.
	Workers int
}

// Work per chunk of a batch, in multiply–adds (batch samples × dimension).
// A batch with less work than 2·chunkWork is one chunk and is evaluated on
// the calling goroutine; larger batches are split into a power of two of
// chunks (at most maxChunks), so that two workers get equal shares. The
// chunking depends only on the batch size and the dimension, never on the
// number of workers, which is what makes the reduction the same bit for
// bit for every worker count.
//
// The threshold 2·chunkWork = 2^13 multiply–adds was chosen with
// BenchmarkMiniBatchWorkers at d = 100 and 1000, m = 16…1024, on the 2-core
// test machine while it was otherwise idle (load ≈ 1.3; BENCHMARKS.md),
// against chunkWork = 2^11 and 2^14. With 2^12, 2 workers against 1 gave
// 1.09–2.07 on every split batch (d = 100, m ≥ 128; d = 1000, all m) and
// 0.99–1.03 on batches left whole; 2^14 left d = 100, m ≤ 256 and
// d = 1000, m ≤ 32 unsplit (1.0), and 2^11 split d = 100, m = 64 (1.15–1.41)
// but made the larger batches slower (d = 1000, m = 256: 1.28–1.53 against
// 1.82–1.86) through more, smaller chunks. Earlier measurements on the same
// machine with other processes using both cores found every split slower
// than one worker (0.5–0.9×: a worker's thread descheduled while it holds
// a chunk makes the batch wait), hence the caution in the package doc to
// keep Workers: 1 on an oversubscribed machine.
const (
	chunkWork = 1 << 12
	maxChunks = 64
)

// MiniBatch is the gradient oracle of a finite sum evaluated on batches:
// each Measure draws a batch of indices B from a sampler (or takes every
// index, for a full batch) and writes the batch mean
//
//	Y = (1/|B|) Σ_{i∈B} ∇f_i(x).
//
// With a batch of 1 this is the stochastic gradient of SGD, with a batch of
// m that of mini-batch gradient descent (MBGD), and with the full batch
// (see [NewFullBatch]) the exact gradient ∇f(x) of batch gradient descent
// (BGD), summed in a fixed order.
//
// # Parallel evaluation
//
// A batch whose work |B|·Dim() reaches 2^13 multiply–adds is split into
// chunks of consecutive batch positions; the chunks are evaluated on up to
// BatchSettings.Workers goroutines and their partial sums are added in
// chunk order. The chunks depend only on |B| and Dim(), so Y is the same bit
// for bit for every number of workers, including 1. Smaller batches are
// evaluated on the calling goroutine. Worker goroutines are started on the
// first parallel batch and stopped by [MiniBatch.Close] (or, if Close is
// never called, when the MiniBatch becomes unreachable). After a batch
// they keep watching for the next one for 50µs before they sleep, so that
// the batches of a descent loop reach them without an operating-system
// wake-up; that watching uses CPU time.
//
// Caution: parallel batches pay off only on cores that are otherwise idle.
// When the machine runs more busy threads than it has cores, a worker can
// be descheduled while it holds a chunk, and the batch waits for it: two
// workers were measured 10–50% slower than one on such a machine (see
// BENCHMARKS.md). Measure before raising Workers above 1 on shared
// machines, watch the time per batch, and keep Workers: 1 as the manual
// fallback; the result does not depend on it.
//
// # Counting
//
// MiniBatch implements [Counted]: one Measure uses |B| sample gradients, and
// the drivers count measurement budgets in sample gradients. Epochs reports
// the work done in passes over the data.
//
// # Concurrency
//
// A MiniBatch is not safe for concurrent use: it owns its sampler, whose
// position within an epoch belongs to one run, and its scratch buffers.
// Misuse is detected rather than left to corrupt a run: a Measure that
// overlaps another fails with [ErrBusy], and a run that holds the
// MiniBatch ([MiniBatch.Claim], as sa.MinimizeSum does for its whole run)
// makes a second Claim fail with ErrBusy. Give each concurrent run its own
// MiniBatch (they may share the FiniteSum).
//
// # Panics
//
// A panic of AddGradient, on the calling goroutine or on a worker, is
// recovered and returned by Measure as a [*PanicError] (of the
// lowest-numbered chunk that panicked); the worker goroutines survive it.
type MiniBatch struct {
	f       FiniteSum
	s       sampling.Sampler // nil for a full batch
	size    int
	n, d    int
	idx     []int // batch indices, len size; nil for a full batch
	evals   int   // sample gradients evaluated since construction or Reset
	workers int   // resolved worker count ≥ 1
	sh      *batchShared
	pool    *workerPool // nil until the first parallel batch
	held    atomic.Bool // claimed by a run
	inUse   atomic.Bool // inside Measure
}

// batchShared is the part of a MiniBatch the worker goroutines use. It does
// not point back to the MiniBatch, so an abandoned MiniBatch can be
// collected and its workers stopped.
type batchShared struct {
	f       FiniteSum
	rf      *Regression // f when it is a *Regression (fast contiguous ranges), or nil
	d       int
	chunks  int
	size    int           // batch size
	partial []float64     // chunks partial sums of d values, stride apart
	stride  int           // d rounded up to whole cache lines, plus one line
	panics  []*PanicError // per chunk: the recovered panic of the current batch
	next    atomic.Int64  // next chunk to claim
	done    atomic.Int64  // chunks finished
	gen     atomic.Uint64 // parallel batches started; spinning workers watch it
	waiting atomic.Bool   // the calling goroutine sleeps on finished
	// finished receives a token when the last chunk of a batch is done
	// while the calling goroutine sleeps (see waitDone).
	finished chan struct{}

	// The current job, written by the calling goroutine before the workers
	// are woken.
	x   []float64
	idx []int // nil: indices are batch positions (full batch)
	w   float64
}

// workerPool is a set of goroutines waiting for batches.
type workerPool struct {
	wake   chan struct{}
	n      int
	closed bool
	once   sync.Once
}

// stop closes the wake channel once; the workers then return.
func (p *workerPool) stop() { p.once.Do(func() { close(p.wake) }) }

// NewMiniBatch returns the mini-batch gradient oracle of f with batches of
// size drawn by s. s must sample from f's n items (s.Len() == f.Len()). A
// size above n is accepted only for *sampling.Uniform, which draws with
// replacement; every other sampler hands out items without repetition
// within a pass, so it needs 1 ≤ size ≤ n. The MiniBatch owns s from now
// on: it calls s.Fill with the stream it is given and s.Reset on Reset.
func NewMiniBatch(f FiniteSum, s sampling.Sampler, size int, bs BatchSettings) (*MiniBatch, error) {
	if isNil(f) {
		return nil, fmt.Errorf("%w: finite sum is nil (%T)", ErrSettings, f)
	}
	if isNil(s) {
		return nil, fmt.Errorf("%w: sampler is nil (%T; use NewFullBatch for every sample)", ErrSettings, s)
	}
	n := f.Len()
	if err := checkSum(f); err != nil {
		return nil, err
	}
	if s.Len() != n {
		return nil, fmt.Errorf("%w: sampler draws from %d items, finite sum has %d", ErrSettings, s.Len(), n)
	}
	if size < 1 {
		return nil, fmt.Errorf("%w: batch size %d: must be ≥ 1", ErrSettings, size)
	}
	if _, with := s.(*sampling.Uniform); !with && size > n {
		return nil, fmt.Errorf("%w: batch size %d exceeds the %d samples and %T draws without replacement", ErrSettings, size, n, s)
	}
	b, err := newBatch(f, size, bs)
	if err != nil {
		return nil, err
	}
	b.s = s
	b.idx = make([]int, size)
	return b, nil
}

// NewFullBatch returns the full-batch gradient oracle of f: every Measure
// writes the exact gradient (1/n) Σ ∇f_i(x), summed over i = 0, …, n−1 in a
// fixed order (see the type documentation for the chunked order of large
// batches). It draws no random numbers. For the ready-made models
// ([Regression]) the samples of a chunk are summed by a fused kernel that
// reads each row from memory once (its margin, then its contribution while
// it is in cache), the same sum in another rounding order, and faster
// than one AddGradient call at a time.
func NewFullBatch(f FiniteSum, bs BatchSettings) (*MiniBatch, error) {
	if isNil(f) {
		return nil, fmt.Errorf("%w: finite sum is nil (%T)", ErrSettings, f)
	}
	if err := checkSum(f); err != nil {
		return nil, err
	}
	return newBatch(f, f.Len(), bs)
}

// isNil reports whether v is nil or an interface holding a nil pointer,
// map, slice, channel or function (a typed nil, such as a nil
// *sampling.Shuffled), which would otherwise panic far from the cause.
func isNil(v any) bool {
	if v == nil {
		return true
	}
	switch r := reflect.ValueOf(v); r.Kind() {
	case reflect.Pointer, reflect.Map, reflect.Slice, reflect.Chan, reflect.Func, reflect.Interface:
		return r.IsNil()
	}
	return false
}

func checkSum(f FiniteSum) error {
	if n := f.Len(); n < 1 {
		return fmt.Errorf("%w: finite sum has %d samples", ErrData, n)
	}
	if d := f.Dim(); d < 1 {
		return fmt.Errorf("%w: finite sum has dimension %d", ErrData, d)
	}
	return nil
}

func newBatch(f FiniteSum, size int, bs BatchSettings) (*MiniBatch, error) {
	w := bs.Workers
	switch {
	case w == 0:
		w = runtime.GOMAXPROCS(0)
	case w < 0:
		return nil, fmt.Errorf("%w: BatchSettings.Workers = %d: must be ≥ 0", ErrSettings, w)
	}
	n, d := f.Len(), f.Dim()
	chunks := chunkCount(size, d)
	sh := &batchShared{f: f, d: d, chunks: chunks, size: size, panics: make([]*PanicError, chunks), finished: make(chan struct{}, 1)}
	// Only the concrete model type takes the block path: a wrapper that
	// embeds a *Regression and overrides AddGradient must not be bypassed.
	sh.rf, _ = f.(*Regression)
	if chunks > 1 {
		// Partial sums sit whole cache lines apart so that two workers
		// never write to the same line (false sharing).
		sh.stride = (d+7)/8*8 + 8
		sh.partial = make([]float64, chunks*sh.stride)
	}
	return &MiniBatch{f: f, size: size, n: n, d: d, workers: min(w, chunks), sh: sh}, nil
}

// chunkCount returns the number of chunks of a batch of size samples in
// dimension d: the largest power of two c with c·chunkWork ≤ size·d,
// at most maxChunks and at most size (1 below 2·chunkWork). A power of two
// splits evenly between two workers.
func chunkCount(size, d int) int {
	work := float64(size) * float64(d)
	c := 1
	for c < maxChunks && 2*c <= size && float64(2*c)*chunkWork <= work {
		c *= 2
	}
	return c
}

// chunkRange returns the batch positions [lo, hi) of chunk c.
func (sh *batchShared) chunkRange(c int) (lo, hi int) {
	return c * sh.size / sh.chunks, (c + 1) * sh.size / sh.chunks
}

// accumulate adds w·∇f_i(x) for the batch positions [lo, hi) of chunk c
// into dst.
func (sh *batchShared) accumulate(dst []float64, c, lo, hi int) {
	f, x, w := sh.f, sh.x, sh.w
	if sh.idx == nil {
		if sh.rf != nil {
			sh.rf.addRange(dst, x, lo, hi, w)
			return
		}
		for i := lo; i < hi; i++ {
			f.AddGradient(dst, x, i, w)
		}
		return
	}
	if sh.rf != nil {
		sh.rf.addIndexed(dst, x, sh.idx[lo:hi], w)
		return
	}
	for _, i := range sh.idx[lo:hi] {
		f.AddGradient(dst, x, i, w)
	}
}

// work evaluates chunks until none is left to claim.
func (sh *batchShared) work() {
	d := sh.d
	for {
		c := int(sh.next.Add(1)) - 1
		if c >= sh.chunks {
			return
		}
		p := sh.partial[c*sh.stride : c*sh.stride+d]
		clear(p)
		lo, hi := sh.chunkRange(c)
		sh.safeAccumulate(p, c, lo, hi)
		if sh.done.Add(1) == int64(sh.chunks) && sh.waiting.Load() {
			select { // wake the calling goroutine if it sleeps
			case sh.finished <- struct{}{}:
			default:
			}
		}
	}
}

// safeAccumulate is accumulate with a panic of the finite sum recovered
// into sh.panics[c].
func (sh *batchShared) safeAccumulate(dst []float64, c, lo, hi int) {
	defer func() {
		if p := recover(); p != nil {
			sh.panics[c] = &PanicError{Value: p, Stack: debug.Stack()}
		}
	}()
	sh.accumulate(dst, c, lo, hi)
}

// firstPanic returns the panic of the lowest-numbered chunk of the batch,
// or nil, and clears them all for the next batch.
func (sh *batchShared) firstPanic() error {
	var first error
	for c, p := range sh.panics {
		if p != nil {
			if first == nil {
				first = fmt.Errorf("oracle: gradient of batch chunk %d of %d: %w", c+1, sh.chunks, p)
			}
			sh.panics[c] = nil
		}
	}
	return first
}

// waitSpin is how long the calling goroutine, its own chunks done, checks
// for the chunks that workers hold before it sleeps until the last one is
// finished. Spinning longer would take processor time from a worker that
// shares the core (on a machine with more busy threads than cores, the
// worker may be waiting for that very core).
const waitSpin = 20 * time.Microsecond

// waitDone returns when every chunk of the batch is done: it checks for
// up to waitSpin, then sleeps on finished. A token left over from an
// earlier batch only makes it check again.
func (sh *batchShared) waitDone() {
	all := int64(sh.chunks)
	start := time.Now()
	for i := 0; sh.done.Load() < all; i++ {
		if i%64 == 63 && time.Since(start) > waitSpin {
			sh.waiting.Store(true)
			for sh.done.Load() < all {
				<-sh.finished
			}
			sh.waiting.Store(false)
			return
		}
		runtime.Gosched()
	}
}

// spinWait is how long a worker keeps checking for the next batch after
// finishing one before it parks. Waking a parked goroutine on an idle core
// can take a hundred microseconds or more (the core must be woken by the
// operating system), longer than a whole mini-batch; batches that follow
// each other quickly, as in a descent loop, are picked up at once.
const spinWait = 50 * time.Microsecond

// spinFor waits up to spinWait for a batch after generation seen and
// reports whether one started.
func (sh *batchShared) spinFor(seen uint64) bool {
	start := time.Now()
	for i := 0; ; i++ {
		if sh.gen.Load() != seen {
			return true
		}
		if i%64 == 63 {
			if time.Since(start) > spinWait {
				return false
			}
			runtime.Gosched() // let other goroutines of this P run
		}
	}
}

// serve is the loop of a worker goroutine: park until woken, help with
// the batch, keep helping with the batches that follow within spinWait,
// park again. It returns when wake is closed.
func (sh *batchShared) serve(wake <-chan struct{}) {
	for {
		if _, ok := <-wake; !ok {
			return
		}
		for {
			seen := sh.gen.Load()
			sh.work()
			if !sh.spinFor(seen) {
				break
			}
			select { // take the wake-up of the batch just seen, if sent
			case _, ok := <-wake:
				if !ok {
					return
				}
			default:
			}
		}
	}
}

// Measure writes the batch-mean gradient at x into dst. It draws the batch
// from the sampler with rng (a full batch uses no randomness and accepts a
// nil rng). It panics if len(dst) or len(x) differs from Dim(). It does
// not modify or retain x, and it allocates nothing once the worker
// goroutines are running. It returns an error wrapping [ErrBusy] when
// another Measure of b is under way (dst is then unchanged), and a
// [*PanicError] when AddGradient panicked (dst is then unspecified);
// non-finite values in dst are left for the driver to detect.
func (b *MiniBatch) Measure(dst, x []float64, rng *rand.Rand) error {
	if len(dst) != b.d || len(x) != b.d {
		panic("oracle: MiniBatch length mismatch")
	}
	if !b.inUse.CompareAndSwap(false, true) {
		return fmt.Errorf("%w: two Measure calls overlap; give each run its own MiniBatch", ErrBusy)
	}
	defer b.inUse.Store(false)
	return b.measure(dst, x, rng)
}

// measure is Measure without the check for overlapping calls.
func (b *MiniBatch) measure(dst, x []float64, rng *rand.Rand) error {
	sh := b.sh
	sh.x, sh.w, sh.idx = x, 1/float64(b.size), nil
	if b.s != nil {
		b.s.Fill(b.idx, rng)
		sh.idx = b.idx
	}
	b.evals += b.size
	if sh.chunks == 1 {
		clear(dst)
		sh.safeAccumulate(dst, 0, 0, b.size)
		sh.x, sh.idx = nil, nil
		return sh.firstPanic()
	}
	// Publish the job: done is reset before next, so that a worker that
	// claims a chunk of this batch counts it in this batch's done.
	sh.done.Store(0)
	sh.next.Store(0)
	if b.workers > 1 && b.startPool() {
		sh.gen.Add(1)
		for range b.pool.n {
			select { // wake parked workers; spinning ones see gen
			case b.pool.wake <- struct{}{}:
			default:
			}
		}
	}
	// The calling goroutine works too, then waits only for chunks that
	// workers have claimed and not finished (never for a worker that has
	// not woken up yet).
	sh.work()
	sh.waitDone()
	// Reduce in chunk order: the same sums in the same order for every
	// worker count.
	d := b.d
	st := sh.stride
	copy(dst, sh.partial[:d])
	for c := 1; c < sh.chunks; c++ {
		floats.Add(dst, sh.partial[c*st:c*st+d])
	}
	sh.x, sh.idx = nil, nil
	return sh.firstPanic()
}

// RankOne is the gradient of one sample of a linear model in factored
// form, as [MiniBatch.MeasureRankOne] returns it: with o = 1 when
// Intercept is set and 0 otherwise, the measurement Y that Measure writes
// into a dst of length len(Row)+o is, with every operation rounded in
// this order,
//
//	Y_0     = 0 + Scale                                  (if Intercept)
//	Y_{o+j} = (0 + Scale·Row[j]) + Penalty·x_{o+j}       (j < len(Row))
//
// where the penalty term is left out when Penalty is 0 and the "0 +"
// (Measure adds into a cleared dst) turns a −0 into +0. Row aliases the
// model's data: read it, never write to it.
type RankOne struct {
	Scale     float64   // w·ℓ'(z_i): the sample's loss slope times the batch weight
	Row       []float64 // the sample's features a_i
	Intercept bool      // Y_0 is the intercept's component
	Penalty   float64   // w·L2, the weight of the ridge term
}

// MeasureRankOne takes the measurement of Measure at x, drawing the batch
// from the sampler with rng exactly as Measure does. When b's batch is one
// sample of a *[Regression] (the batch of SGD) it does not write the
// gradient out: it returns it in factored form (see [RankOne]), the same
// Y bit for bit, with ok true, so that a driver can apply the update and
// its bookkeeping in one pass over x. Otherwise it writes Y into dst as
// Measure does and returns ok false. The rank-one form costs one pass over
// the sample's row (its margin) instead of the three of Measure (clearing
// dst, the margin, adding into dst).
//
// MeasureRankOne is for a driver loop that holds b ([MiniBatch.Hold]) on
// its own goroutine; it returns an error wrapping ErrBusy if b is not
// held, and does not itself detect overlapping calls (Hold does, once per
// run instead of twice per measurement). Its other errors and panics are
// those of Measure (*PanicError, a length mismatch); dst is then
// unspecified.
func (b *MiniBatch) MeasureRankOne(dst, x []float64, rng *rand.Rand) (g RankOne, ok bool, err error) {
	if !b.inUse.Load() {
		return g, false, fmt.Errorf("%w: MeasureRankOne on a MiniBatch that is not held (MiniBatch.Hold)", ErrBusy)
	}
	rf := b.sh.rf
	if b.size != 1 || rf == nil || b.s == nil {
		return g, false, b.measure(dst, x, rng)
	}
	if len(dst) != b.d || len(x) != b.d {
		panic("oracle: MiniBatch length mismatch")
	}
	b.s.Fill(b.idx, rng)
	b.evals++
	if i := b.idx[0]; i >= 0 && i < b.n {
		return rf.rankOne(x, i, 1), true, nil
	}
	// An index out of range from a faulty sampler: the general path
	// panics on it and returns the *PanicError, as Measure does.
	sh := b.sh
	sh.x, sh.w, sh.idx = x, 1, b.idx
	clear(dst)
	sh.safeAccumulate(dst, 0, 0, 1)
	sh.x, sh.idx = nil, nil
	return g, false, sh.firstPanic()
}

// Hold marks b as in use, as a Measure call does for its duration, until
// [MiniBatch.Unhold]: meanwhile Measure and a second Hold fail with an
// error wrapping ErrBusy, and the holder takes its measurements with
// [MiniBatch.MeasureRankOne]. sa.MinimizeSum holds its oracle for the
// steps of a run this way.
func (b *MiniBatch) Hold() error {
	if !b.inUse.CompareAndSwap(false, true) {
		return fmt.Errorf("%w: Hold while a Measure is under way or b is held", ErrBusy)
	}
	return nil
}

// Unhold ends a [MiniBatch.Hold].
func (b *MiniBatch) Unhold() { b.inUse.Store(false) }

// Claim marks b as held by one run until [MiniBatch.Release], so that a
// second run started on the same MiniBatch fails at once with an error
// wrapping [ErrBusy] instead of mixing its batches (and its Reset) into
// the first run's. sa.MinimizeSum claims its oracle for the whole run.
func (b *MiniBatch) Claim() error {
	if !b.held.CompareAndSwap(false, true) {
		return fmt.Errorf("%w: the MiniBatch is held by another run; give each run its own", ErrBusy)
	}
	return nil
}

// Release ends a [MiniBatch.Claim].
func (b *MiniBatch) Release() { b.held.Store(false) }

// startPool starts the worker goroutines if they are not running and
// reports whether they are.
func (b *MiniBatch) startPool() bool {
	if b.pool != nil {
		return !b.pool.closed
	}
	p := &workerPool{wake: make(chan struct{}, b.workers-1), n: b.workers - 1}
	for range p.n {
		go b.sh.serve(p.wake)
	}
	b.pool = p
	runtime.AddCleanup(b, func(p *workerPool) { p.stop() }, p)
	return true
}

// Close stops the worker goroutines, if any were started. Later batches are
// evaluated on the calling goroutine, with the same result bit for bit.
// Close is optional (abandoned workers are stopped when the MiniBatch is
// collected) and may be called more than once.
func (b *MiniBatch) Close() {
	if b.pool != nil && !b.pool.closed {
		b.pool.closed = true
		b.pool.stop()
	}
}

// Dim returns the dimension of the finite sum.
func (b *MiniBatch) Dim() int { return b.d }

// Len returns the number of samples n of the finite sum.
func (b *MiniBatch) Len() int { return b.n }

// BatchSize returns the number of sample gradients in one batch (n for a
// full batch).
func (b *MiniBatch) BatchSize() int { return b.size }

// MeasurementsPerCall returns the batch size: the number of sample
// gradients one Measure evaluates.
func (b *MiniBatch) MeasurementsPerCall() int { return b.size }

// Full reports whether b is a full-batch oracle from [NewFullBatch].
func (b *MiniBatch) Full() bool { return b.s == nil }

// Workers returns the largest number of goroutines one batch uses: the
// resolved BatchSettings.Workers, capped by the number of chunks of a batch
// (1 for batches too small to split).
func (b *MiniBatch) Workers() int { return b.workers }

// Evaluations returns the number of sample gradients evaluated since
// construction or the last Reset.
func (b *MiniBatch) Evaluations() int { return b.evals }

// Epochs returns the work done since construction or the last Reset in
// passes over the data: Evaluations()/n. For a sampler without replacement
// and a batch size that divides n this is the number of completed passes;
// otherwise it is the work-equivalent.
func (b *MiniBatch) Epochs() float64 { return float64(b.evals) / float64(b.n) }

// Reset sets the evaluation count to zero and resets the sampler, so that
// the next batches are those of a freshly built MiniBatch given the same
// random stream.
func (b *MiniBatch) Reset() {
	b.evals = 0
	if b.s != nil {
		b.s.Reset()
	}
}

var (
	_ Gradient    = (*MiniBatch)(nil)
	_ Counted     = (*MiniBatch)(nil)
	_ Dimensioned = (*MiniBatch)(nil)
)
