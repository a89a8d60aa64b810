package oracle

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime/debug"
	"sync"
	"sync/atomic"
)

// evaluator takes the m measurements of one step of a gradient-free
// adapter, on the calling goroutine or spread over worker goroutines, and
// holds everything one call of Measure needs (the point, c_k, the step,
// the perturbations). An adapter takes an evaluator from its evalPool for
// the duration of one call, so that concurrent calls never share one.
//
// Reproducibility: measurement j always receives the stream seeded by
// seedPair(base, id(j)) and writes only vals[j] and errs[j]; which worker
// runs it does not matter, and the results are combined afterwards in the
// order j = 0, 1, …, m−1. The outcome is therefore the same bit for bit for
// every worker count.
type evaluator struct {
	f       Value
	seeded  SeededValue // f as a SeededValue, or nil
	m       int         // measurements per step
	workers int         // ≥ 1
	crn     bool        // measurements 2i and 2i+1 share stream i

	// point writes the point of measurement j into dst (len dim); it is a
	// function of the adapter that reads the call's state from e.
	point func(e *evaluator, dst []float64, j int)

	// The state of the current call.
	ctx   context.Context
	x     []float64
	c     float64
	k     int
	delta []float64 // SPSA: q·dim entries ±1, perturbation r at [r·dim, (r+1)·dim)
	dsrc  rand.PCG  // SPSA: source of delta

	vals    []float64
	errs    []error
	scratch [][]float64 // one point buffer per worker
	srcs    []rand.PCG  // one source per worker, reseeded per measurement
	rngs    []*rand.Rand

	base uint64 // seed of the current step
	next atomic.Int64
	wid  atomic.Int64 // hands out worker numbers 1, 2, … within a step
	wg   sync.WaitGroup
	// work is the bound method value e.worker, made once so that starting
	// a worker goroutine allocates no closure.
	work func()
}

// evalPool hands out evaluators of one adapter: the one of the last call
// when calls do not overlap (no allocation), a new one for each call that
// overlaps another.
type evalPool struct {
	mu   sync.Mutex
	free []*evaluator
	mk   func() *evaluator
}

func (p *evalPool) get(ctx context.Context) *evaluator {
	p.mu.Lock()
	var e *evaluator
	if n := len(p.free); n > 0 {
		e = p.free[n-1]
		p.free[n-1] = nil
		p.free = p.free[:n-1]
	}
	p.mu.Unlock()
	if e == nil {
		e = p.mk()
	}
	e.ctx = ctx
	return e
}

func (p *evalPool) put(e *evaluator) {
	e.ctx, e.x = nil, nil
	clear(e.errs)
	p.mu.Lock()
	p.free = append(p.free, e)
	p.mu.Unlock()
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
	e.seeded, _ = f.(SeededValue)
	e.work = e.worker
	return e
}

// run takes all m measurements of a step whose streams derive from base,
// then reports the error of the lowest-numbered measurement that failed
// (an error, a panic or a non-finite value), described by describe. Once
// the call's context is done no further measurement starts; if it ended
// the step early, the context's error is reported.
func (e *evaluator) run(base uint64, describe func(e *evaluator, j int) string) error {
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
	if e.ctx != nil && e.ctx.Err() != nil {
		for _, err := range e.errs {
			if err != nil {
				return fmt.Errorf("measurements abandoned: %w", context.Cause(e.ctx))
			}
		}
	}
	for j, err := range e.errs {
		if err != nil {
			return fmt.Errorf("%s: %w", describe(e, j), err)
		}
		if v := e.vals[j]; math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%s: %w: %v", describe(e, j), ErrNotFinite, v)
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
	if e.ctx != nil {
		if done := e.ctx.Done(); done != nil {
			select {
			case <-done:
				e.vals[j], e.errs[j] = 0, context.Cause(e.ctx)
				return
			default:
			}
		}
	}
	id := uint64(j)
	if e.crn {
		id = uint64(j / 2)
	}
	s1, s2 := seedPair(e.base, streamMeasurement+id)
	x := e.scratch[w]
	e.point(e, x, j)
	ctx := e.ctx
	if ctx == nil {
		ctx = context.Background()
	}
	if e.seeded != nil {
		e.vals[j], e.errs[j] = measureSeeded(ctx, e.seeded, x, s1, s2)
		return
	}
	e.srcs[w].Seed(s1, s2)
	e.vals[j], e.errs[j] = measureOne(ctx, e.f, x, e.rngs[w])
}

// SeededValue is implemented by a [Value] that takes its measurement from
// the seed of its random stream rather than from a *rand.Rand, such as a
// measurement sent to another process (package oracle/remote).
// [KieferWolfowitz] and [SPSA] call ValueSeeded, when the Value implements
// it, in place of Value and ValueContext, with the run's context and the
// PCG seed pair of the measurement's own stream. The stream the
// measurement must draw from is rand.New(rand.NewPCG(seed1, seed2)): the
// very stream the adapters would hand a local Value for that measurement,
// so a SeededValue that recreates it and calls the same function gives
// the same result bit for bit. A panic of ValueSeeded is recovered into a
// [*PanicError] as for Value.
type SeededValue interface {
	ValueSeeded(ctx context.Context, x []float64, seed1, seed2 uint64) (float64, error)
}

// measureSeeded calls f.ValueSeeded and turns a panic into a *PanicError.
func measureSeeded(ctx context.Context, f SeededValue, x []float64, s1, s2 uint64) (v float64, err error) {
	defer func() {
		if p := recover(); p != nil {
			v, err = 0, &PanicError{Value: p, Stack: debug.Stack()}
		}
	}()
	return f.ValueSeeded(ctx, x, s1, s2)
}

// Stream numbers below the step's base seed: the perturbation vectors and
// measurement j (or pair j/2 with common random numbers) have separate
// streams.
const (
	streamDelta       uint64 = 0
	streamMeasurement uint64 = 1
)

// MeasurementSeed returns the PCG seed pair of measurement j of a step
// whose base seed is base: the stream the gradient-free adapters give
// their measurement j (without common random numbers). Code that takes
// several measurements of one call elsewhere (on other machines, say) uses
// it to give each the stream a local adapter would.
func MeasurementSeed(base uint64, j int) (uint64, uint64) {
	return seedPair(base, streamMeasurement+uint64(j))
}

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
