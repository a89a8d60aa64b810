package oracle

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sync"
	"sync/atomic"
)

// evaluator takes the m measurements of one step of a gradient-free
// adapter, on the calling goroutine or spread over worker goroutines.
//
// Reproducibility: measurement j always receives the stream seeded by
// seedPair(base, id(j)) and writes only vals[j] and errs[j]; which worker
// runs it does not matter, and the results are combined afterwards in the
// order j = 0, 1, …, m−1. The outcome is therefore the same bit for bit for
// every worker count.
type evaluator struct {
	f       Value
	m       int  // measurements per step
	workers int  // ≥ 1
	crn     bool // measurements 2i and 2i+1 share stream i

	// point writes the point of measurement j into dst (len dim).
	point func(dst []float64, j int)

	vals    []float64
	errs    []error
	scratch [][]float64 // one point buffer per worker
	srcs    []rand.PCG  // one source per worker, reseeded per measurement
	rngs    []*rand.Rand

	base uint64 // seed of the current step
	next atomic.Int64
	wid  atomic.Int64 // hands out worker numbers 1, 2, … within a step
	wg   sync.WaitGroup
	// work is the bound method value e.work, made once so that starting a
	// worker goroutine allocates no closure.
	work func()
}

func newEvaluator(f Value, dim, m, workers int, crn bool) *evaluator {
	workers = max(1, min(workers, m))
	e := &evaluator{
		f: f, m: m, workers: workers, crn: crn,
		vals:    make([]float64, m),
		errs:    make([]error, m),
		scratch: make([][]float64, workers),
		srcs:    make([]rand.PCG, workers),
		rngs:    make([]*rand.Rand, workers),
	}
	buf := make([]float64, workers*dim)
	for w := range workers {
		e.scratch[w] = buf[w*dim : (w+1)*dim : (w+1)*dim]
		e.rngs[w] = rand.New(&e.srcs[w])
	}
	e.work = e.worker
	return e
}

// run takes all m measurements of a step whose streams derive from base,
// then reports the error of the lowest-numbered measurement that failed
// (an error, a panic or a non-finite value), described by describe.
func (e *evaluator) run(base uint64, describe func(j int) string) error {
	e.base = base
	if e.workers == 1 {
		for j := range e.m {
			e.eval(0, j)
		}
	} else {
		e.next.Store(0)
		e.wid.Store(0)
		e.wg.Add(e.workers - 1)
		for w := 1; w < e.workers; w++ {
			go e.work()
		}
		e.loop(0)
		e.wg.Wait()
	}
	for j, err := range e.errs {
		if err != nil {
			return fmt.Errorf("%s: %w", describe(j), err)
		}
		if v := e.vals[j]; math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%s: %w: %v", describe(j), ErrNotFinite, v)
		}
	}
	return nil
}

// worker runs on a goroutine of its own with worker number 1, 2, …
func (e *evaluator) worker() {
	defer e.wg.Done()
	e.loop(int(e.wid.Add(1)))
}

func (e *evaluator) loop(w int) {
	for {
		j := int(e.next.Add(1)) - 1
		if j >= e.m {
			return
		}
		e.eval(w, j)
	}
}

func (e *evaluator) eval(w, j int) {
	id := uint64(j)
	if e.crn {
		id = uint64(j / 2)
	}
	e.srcs[w].Seed(seedPair(e.base, streamMeasurement+id))
	x := e.scratch[w]
	e.point(x, j)
	e.vals[j], e.errs[j] = measureOne(e.f, x, e.rngs[w])
}

// Stream numbers below the step's base seed: the perturbation vectors and
// measurement j (or pair j/2 with common random numbers) have separate
// streams.
const (
	streamDelta       uint64 = 0
	streamMeasurement uint64 = 1
)

// seedPair derives the PCG seed of stream s of a step from the step's base
// seed with the splitmix64 finaliser (Steele, Lea & Flood 2014,
// "Fast splittable pseudorandom number generators", OOPSLA), so that
// neighbouring streams start from unrelated states.
func seedPair(base, s uint64) (uint64, uint64) {
	return mix64(base ^ mix64(s)), mix64(base + 0x9e3779b97f4a7c15*(s+1))
}

func mix64(z uint64) uint64 {
	z += 0x9e3779b97f4a7c15
	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9
	z = (z ^ (z >> 27)) * 0x94d049bb133111eb
	return z ^ (z >> 31)
}
