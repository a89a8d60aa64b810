package oracle

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"sync/atomic"

	"gonum.org/v1/gonum/floats"
)

// KieferWolfowitzSettings configures a [KieferWolfowitz] gradient. The zero
// value of every field except Sizes is a sensible default.
type KieferWolfowitzSettings struct {
	// Sizes is the perturbation size sequence c_k. Required; see
	// schedule.PowerSizes and schedule.CheckKieferWolfowitz for the joint
	// conditions with the gain that make the method converge.
	Sizes Sizes

	// CommonRandomNumbers, if true, gives the two measurements of each
	// coordinate pair, at x + c_k·e_i and x − c_k·e_i, identically seeded
	// random streams, so that noise a simulation draws the same way at
	// both points cancels in the difference.
	CommonRandomNumbers bool

	// Workers is the number of goroutines that take the 2p measurements of
	// a step; 0 or 1 takes them one after another on the calling
	// goroutine. The result is the same bit for bit for every value.
	// Above 1 the Value must be safe for concurrent use.
	Workers int
}

// KieferWolfowitz turns a noisy [Value] into a [Gradient] by central
// finite differences (Kiefer & Wolfowitz 1952, "Stochastic estimation of
// the maximum of a regression function", Ann. Math. Statist. 23(3)):
//
//	ĝ_i = [ f̃(x + c_k·e_i) − f̃(x − c_k·e_i) ] / (2·c_k),   i = 1, …, p,
//
// with e_i the i-th unit vector. The divisor is 2·c_k, not the difference
// of the two points as rounded in floating point. One gradient uses 2p
// measurements ([KieferWolfowitz.MeasurementsPerCall]).
//
// The step index k reaches the adapter with the call: the drivers of
// package sa call [KieferWolfowitz.MeasureContext] with the run's context
// and k. Measure uses the step last set by SetStep.
//
// A KieferWolfowitz may be shared by concurrent runs: each call takes
// scratch buffers of its own (reused by the next call that does not
// overlap it), provided the Value is safe for concurrent use. Only
// SetStep followed by Measure is a two-call protocol that concurrent
// callers cannot share; they use MeasureContext. A call allocates nothing
// when Workers is 1 and no other call overlaps it.
type KieferWolfowitz struct {
	f     Value
	dim   int
	sizes Sizes
	step  atomic.Int64 // k for Measure, set by SetStep
	pool  evalPool
}

// NewKieferWolfowitz returns the central-difference gradient of f in
// dimension dim. It returns an error wrapping [ErrSettings] if f or
// s.Sizes is nil, dim < 1 or s.Workers < 0, and the error of
// s.Sizes.Validate() if it has one.
func NewKieferWolfowitz(f Value, dim int, s KieferWolfowitzSettings) (*KieferWolfowitz, error) {
	if err := checkCommon(f, dim, s.Sizes, s.Workers); err != nil {
		return nil, err
	}
	if err := checkMemory("dimension", dim, 2*float64(dim)+float64(max(1, min(s.Workers, 2*dim)))*float64(dim)); err != nil {
		return nil, err
	}
	g := &KieferWolfowitz{f: f, dim: dim, sizes: s.Sizes}
	workers, crn := s.Workers, s.CommonRandomNumbers
	g.pool.mk = func() *evaluator {
		e := newEvaluator(f, dim, 2*dim, workers, crn)
		e.point = kwPoint
		return e
	}
	g.pool.free = []*evaluator{g.pool.mk()}
	return g, nil
}

// MaxScratchBytes is the most scratch memory, in bytes, that one call of a
// gradient-free adapter may need (the points, values and perturbations of
// a step): 1 GiB. Constructors refuse larger settings with an error that
// names the setting and the bytes it would need, instead of failing in the
// allocator.
const MaxScratchBytes = 1 << 30

// checkMemory refuses a setting whose scratch of floats float64 values
// would exceed MaxScratchBytes.
func checkMemory(field string, value int, floats float64) error {
	if b := 8 * floats; b > MaxScratchBytes {
		return fmt.Errorf("%w: %s %d needs %.3g bytes of scratch per call, more than MaxScratchBytes (%d)", ErrSettings, field, value, b, MaxScratchBytes)
	}
	return nil
}

func checkCommon(f Value, dim int, sizes Sizes, workers int) error {
	switch {
	case isNil(f):
		return fmt.Errorf("%w: the Value is nil (%T)", ErrSettings, f)
	case dim < 1:
		return fmt.Errorf("%w: dimension %d: must be ≥ 1", ErrSettings, dim)
	case isNil(sizes):
		return fmt.Errorf("%w: Sizes is nil: a perturbation size sequence is required, for example schedule.PowerSizes{Scale: c, Exponent: 0.101}", ErrSettings)
	case workers < 0:
		return fmt.Errorf("%w: Workers = %d: must be ≥ 0", ErrSettings, workers)
	}
	if v, ok := sizes.(interface{ Validate() error }); ok {
		if err := v.Validate(); err != nil {
			return fmt.Errorf("%w: Sizes: %w", ErrSettings, err)
		}
	}
	return nil
}

// kwPoint writes x ± c·e_i for measurement j = 2i (plus) or 2i+1 (minus).
func kwPoint(e *evaluator, dst []float64, j int) {
	copy(dst, e.x)
	if j&1 == 0 {
		dst[j>>1] += e.c
	} else {
		dst[j>>1] -= e.c
	}
}

func kwDescribe(e *evaluator, j int) string {
	sign := "+"
	if j&1 == 1 {
		sign = "−"
	}
	return fmt.Sprintf("Kiefer–Wolfowitz measurement %d of %d, at x %s c_%d·e_%d", j+1, e.m, sign, e.k, j>>1)
}

// Measure is MeasureContext with context.Background() and the step set by
// SetStep (0 if it was never called).
func (g *KieferWolfowitz) Measure(dst, x []float64, rng *rand.Rand) error {
	return g.MeasureContext(context.Background(), int(g.step.Load()), dst, x, rng)
}

// MeasureContext writes the central-difference gradient at x into dst,
// using the perturbation size c_k of step k. It draws one number from rng
// and derives every measurement's stream from it. A Value that implements
// [ContextValue] receives ctx; once ctx is done no further measurement of
// the step starts and the error wraps the context's. On error dst is left
// unchanged; the error names the failing measurement and wraps
// [ErrDimension], [ErrSize], [ErrNotFinite], [ErrPanic] or the Value's own
// error. When several measurements fail, the lowest-numbered one is
// reported, whatever the worker count.
func (g *KieferWolfowitz) MeasureContext(ctx context.Context, k int, dst, x []float64, rng *rand.Rand) error {
	if len(x) != g.dim || len(dst) != g.dim {
		return fmt.Errorf("%w: Kiefer–Wolfowitz of dimension %d given x of length %d and dst of length %d", ErrDimension, g.dim, len(x), len(dst))
	}
	c, err := size(g.sizes, k)
	if err != nil {
		return err
	}
	e := g.pool.get(ctx)
	defer g.pool.put(e)
	e.x, e.c, e.k = x, c, k
	if err := e.run(rng.Uint64(), kwDescribe); err != nil {
		return err
	}
	v := e.vals
	inv := 1 / (2 * c)
	for i := range dst {
		if q := (v[2*i] - v[2*i+1]) * inv; math.IsNaN(q) || math.IsInf(q, 0) {
			return fmt.Errorf("%w: Kiefer–Wolfowitz gradient entry %d = %v: the difference divided by 2·c_%d = %v overflowed", ErrNotFinite, i, q, k, 2*c)
		}
	}
	for i := range dst {
		dst[i] = (v[2*i] - v[2*i+1]) * inv
	}
	return nil
}

// SetStep sets the step index k used for c_k by later calls of Measure
// (not MeasureContext, which is given k).
func (g *KieferWolfowitz) SetStep(k int) { g.step.Store(int64(k)) }

// Dim returns the dimension p.
func (g *KieferWolfowitz) Dim() int { return g.dim }

// MeasurementsPerCall returns 2p.
func (g *KieferWolfowitz) MeasurementsPerCall() int { return 2 * g.dim }

// size returns c_k, checked: a finite value > 0 whose reciprocal 1/(2c_k)
// (the scale of every difference quotient) is finite too; a c_k so small
// that it overflows (below about 2.8e-309) would turn any difference into
// ±Inf or NaN.
func size(s Sizes, k int) (float64, error) {
	c := s.Size(k)
	if !(c > 0) || math.IsInf(c, 1) {
		return 0, fmt.Errorf("%w: c_%d = %v", ErrSize, k, c)
	}
	if math.IsInf(1/(2*c), 0) {
		return 0, fmt.Errorf("%w: c_%d = %v is so small that 1/(2·c_%d) overflows", ErrSize, k, c, k)
	}
	return c, nil
}

// checkQuotients reports a non-finite entry of an SPSA gradient estimate:
// the measurements were finite, but a difference divided by a tiny c_k
// overflowed (dst then holds the overflowed estimate).
func checkQuotients(method string, dst []float64, k int, c float64) error {
	for i, v := range dst {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%w: %s gradient entry %d = %v: a difference divided by c_%d = %v overflowed", ErrNotFinite, method, i, v, k, c)
		}
	}
	return nil
}

// SPSASettings configures an [SPSA] gradient. The zero value of every field
// except Sizes is a sensible default (two measurements, one perturbation,
// independent streams, serial measurements).
type SPSASettings struct {
	// Sizes is the perturbation size sequence c_k. Required; see
	// schedule.PowerSizes and schedule.CheckSPSA.
	Sizes Sizes

	// OneMeasurement selects the one-measurement form of Spall (1997),
	// ĝ_i = f̃(x + c_k·Δ)/(c_k·Δ_i). It costs half as much per perturbation
	// but its variance is much larger (f(x) itself enters every estimate);
	// use it when the system can be observed only at one setting at a time.
	OneMeasurement bool

	// Perturbations is the number q of independent perturbations averaged
	// per gradient; 0 means 1. One gradient uses 2q measurements (q with
	// OneMeasurement).
	Perturbations int

	// CommonRandomNumbers, if true, gives the two measurements of each
	// perturbation, at x + c_k·Δ and x − c_k·Δ, identically seeded random
	// streams. It cannot be combined with OneMeasurement (there is no pair).
	CommonRandomNumbers bool

	// Workers is the number of goroutines that take the measurements of a
	// step; 0 or 1 takes them one after another on the calling goroutine.
	// The result is the same bit for bit for every value. Above 1 the
	// Value must be safe for concurrent use.
	Workers int
}

// SPSA turns a noisy [Value] into a [Gradient] by simultaneous perturbation
// (Spall 1992, "Multivariate stochastic approximation using a simultaneous
// perturbation gradient approximation", IEEE Trans. Automat. Control 37(3)):
// with Δ a vector of independent symmetric Bernoulli ±1 entries,
//
//	ĝ_i = [ f̃(x + c_k·Δ) − f̃(x − c_k·Δ) ] / (2·c_k·Δ_i),   i = 1, …, p,
//
// two measurements whatever the dimension p. The one-measurement form
// (Spall 1997, "A one-measurement form of simultaneous perturbation
// stochastic approximation", Automatica 33(1)) is
//
//	ĝ_i = f̃(x + c_k·Δ) / (c_k·Δ_i).
//
// With Perturbations = q > 1 the adapter averages q such estimates with
// independent Δ. Each gradient uses 2q (or q) measurements
// ([SPSA.MeasurementsPerCall]).
//
// The step index k reaches the adapter with the call: the drivers of
// package sa call [SPSA.MeasureContext] with the run's context and k.
// Measure uses the step last set by SetStep.
//
// An SPSA may be shared by concurrent runs, as a [KieferWolfowitz] may:
// each call takes scratch of its own, reused by the next call that does
// not overlap it. A call allocates nothing when Workers is 1 and no other
// call overlaps it.
type SPSA struct {
	f     Value
	dim   int
	q     int
	one   bool
	m     int
	sizes Sizes
	step  atomic.Int64
	pool  evalPool
}

// NewSPSA returns the simultaneous-perturbation gradient of f in dimension
// dim. It returns an error wrapping [ErrSettings] if f or s.Sizes is nil,
// dim < 1, s.Workers or s.Perturbations < 0, or CommonRandomNumbers is
// combined with OneMeasurement, and the error of s.Sizes.Validate() if it
// has one.
func NewSPSA(f Value, dim int, s SPSASettings) (*SPSA, error) {
	if err := checkCommon(f, dim, s.Sizes, s.Workers); err != nil {
		return nil, err
	}
	if s.Perturbations < 0 {
		return nil, fmt.Errorf("%w: Perturbations = %d: must be ≥ 0 (0 means 1)", ErrSettings, s.Perturbations)
	}
	if s.OneMeasurement && s.CommonRandomNumbers {
		return nil, fmt.Errorf("%w: CommonRandomNumbers needs the pair of the two-measurement form; OneMeasurement takes one measurement per perturbation", ErrSettings)
	}
	q := max(1, s.Perturbations)
	m := 2 * q
	if s.OneMeasurement {
		m = q
	}
	if err := checkMemory("dimension (times Perturbations)", dim, float64(q)*float64(dim)+float64(m)+float64(max(1, min(s.Workers, m)))*float64(dim)); err != nil {
		return nil, err
	}
	g := &SPSA{f: f, dim: dim, q: q, one: s.OneMeasurement, m: m, sizes: s.Sizes}
	workers, crn := s.Workers, s.CommonRandomNumbers
	point := spsaPoint
	if g.one {
		point = spsaPointOne
	}
	g.pool.mk = func() *evaluator {
		e := newEvaluator(f, dim, m, workers, crn)
		e.point = point
		e.delta = make([]float64, q*dim)
		return e
	}
	g.pool.free = []*evaluator{g.pool.mk()}
	return g, nil
}

// spsaPoint writes x + c·Δ_r (even j) or x − c·Δ_r (odd j), r = j/2.
func spsaPoint(e *evaluator, dst []float64, j int) {
	c := e.c
	if j&1 == 1 {
		c = -c
	}
	spsaAt(e, dst, j>>1, c)
}

// spsaPointOne writes x + c·Δ_j (one-measurement form).
func spsaPointOne(e *evaluator, dst []float64, j int) { spsaAt(e, dst, j, e.c) }

func spsaAt(e *evaluator, dst []float64, r int, c float64) {
	dim := len(dst)
	d := e.delta[r*dim : (r+1)*dim]
	x := e.x[:len(d)]
	dst = dst[:len(d)]
	for i, di := range d {
		dst[i] = x[i] + c*di
	}
}

func spsaDescribe(e *evaluator, j int) string {
	q := len(e.delta) / len(e.x)
	if e.m == q {
		return fmt.Sprintf("SPSA measurement %d of %d, at x + c_%d·Δ of perturbation %d", j+1, q, e.k, j+1)
	}
	sign := "+"
	if j&1 == 1 {
		sign = "−"
	}
	return fmt.Sprintf("SPSA measurement %d of %d, at x %s c_%d·Δ of perturbation %d", j+1, e.m, sign, e.k, j>>1+1)
}

// Measure is MeasureContext with context.Background() and the step set by
// SetStep (0 if it was never called).
func (g *SPSA) Measure(dst, x []float64, rng *rand.Rand) error {
	return g.MeasureContext(context.Background(), int(g.step.Load()), dst, x, rng)
}

// MeasureContext writes the simultaneous-perturbation gradient at x into
// dst, using c_k of step k. A Value that implements [ContextValue]
// receives ctx; once ctx is done no further measurement of the step starts
// and the error wraps the context's. It draws one number from rng; the
// perturbations Δ and every measurement get their own streams derived from
// it, so the j-th perturbation of a step does not depend on q or on the
// worker count. On error dst is left unchanged (except when the measured
// values were finite but their quotients overflowed, ErrNotFinite, after
// which dst holds the overflowed estimate); the error names the failing
// measurement and wraps [ErrDimension], [ErrSize], [ErrNotFinite],
// [ErrPanic] or the Value's own error. When several measurements fail, the
// lowest-numbered one is reported, whatever the worker count.
func (g *SPSA) MeasureContext(ctx context.Context, k int, dst, x []float64, rng *rand.Rand) error {
	if len(x) != g.dim || len(dst) != g.dim {
		return fmt.Errorf("%w: SPSA of dimension %d given x of length %d and dst of length %d", ErrDimension, g.dim, len(x), len(dst))
	}
	c, err := size(g.sizes, k)
	if err != nil {
		return err
	}
	e := g.pool.get(ctx)
	defer g.pool.put(e)
	base := rng.Uint64()
	e.dsrc.Seed(seedPair(base, streamDelta))
	fillSigns(e.delta, &e.dsrc)
	e.x, e.c, e.k = x, c, k
	if err := e.run(base, spsaDescribe); err != nil {
		return err
	}
	v, p := e.vals, g.dim
	for i := range dst {
		dst[i] = 0
	}
	// Δ_i = ±1, so 1/Δ_i = Δ_i.
	for r := range g.q {
		var w float64
		if g.one {
			w = v[r] / (c * float64(g.q))
		} else {
			w = (v[2*r] - v[2*r+1]) / (2 * c * float64(g.q))
		}
		floats.AddScaled(dst, w, e.delta[r*p:(r+1)*p])
	}
	return checkQuotients("SPSA", dst, k, c)
}

// fillSigns fills d with independent symmetric ±1 values, one bit of src
// per entry.
func fillSigns(d []float64, src *rand.PCG) {
	for t := 0; t < len(d); t += 64 {
		u := src.Uint64()
		blk := d[t:min(t+64, len(d))]
		for b := range blk {
			blk[b] = float64(int64(u>>uint(b)&1)*2 - 1)
		}
	}
}

// SetStep sets the step index k used for c_k by later calls of Measure
// (not MeasureContext, which is given k).
func (g *SPSA) SetStep(k int) { g.step.Store(int64(k)) }

// Dim returns the dimension p.
func (g *SPSA) Dim() int { return g.dim }

// MeasurementsPerCall returns 2q, or q for the one-measurement form.
func (g *SPSA) MeasurementsPerCall() int { return g.m }

// PilotGradientSize estimates the typical magnitude of a gradient estimate
// at x0, for choosing the gain scale (see schedule.SpallGains): it takes
// reps two-measurement SPSA estimates with the fixed perturbation size c
// and returns the mean of |ĝ_i| over all coordinates and repetitions. It
// uses 2·reps measurements, serially, with streams derived from rng. A nil
// rng or f is an error wrapping ErrSettings.
func PilotGradientSize(f Value, x0 []float64, c float64, reps int, rng *rand.Rand) (float64, error) {
	if rng == nil {
		return 0, fmt.Errorf("%w: PilotGradientSize given a nil rng", ErrSettings)
	}
	if reps < 1 {
		return 0, fmt.Errorf("%w: PilotGradientSize needs reps ≥ 1, got %d", ErrSettings, reps)
	}
	if !(c > 0) || math.IsInf(c, 1) {
		return 0, fmt.Errorf("%w: PilotGradientSize given c = %v", ErrSize, c)
	}
	g, err := NewSPSA(f, len(x0), SPSASettings{Sizes: fixedSize(c)})
	if err != nil {
		return 0, err
	}
	dst := make([]float64, len(x0))
	sum := 0.0
	for range reps {
		if err := g.Measure(dst, x0, rng); err != nil {
			return 0, err
		}
		for _, v := range dst {
			sum += math.Abs(v)
		}
	}
	return sum / float64(reps*len(x0)), nil
}

type fixedSize float64

func (c fixedSize) Size(int) float64 { return float64(c) }

var (
	_ ContextField = (*KieferWolfowitz)(nil)
	_ ContextField = (*SPSA)(nil)
	_ Gradient     = (*KieferWolfowitz)(nil)
	_ StepAware    = (*KieferWolfowitz)(nil)
	_ Dimensioned  = (*KieferWolfowitz)(nil)
	_ Counted      = (*KieferWolfowitz)(nil)
	_ Gradient     = (*SPSA)(nil)
	_ StepAware    = (*SPSA)(nil)
	_ Dimensioned  = (*SPSA)(nil)
	_ Counted      = (*SPSA)(nil)
)
