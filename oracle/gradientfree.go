package oracle

import (
	"fmt"
	"math"
	"math/rand/v2"

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
// The step index k reaches the adapter through [StepAware]: the drivers of
// package sa call SetStep before every Measure.
//
// A KieferWolfowitz owns its scratch buffers and is not safe for concurrent
// use: give each run its own. Measure allocates nothing when Workers is 1.
type KieferWolfowitz struct {
	dim   int
	sizes Sizes
	k     int
	x     []float64 // the point of the current step, only during Measure
	c     float64
	ev    *evaluator
}

// NewKieferWolfowitz returns the central-difference gradient of f in
// dimension dim. It returns an error wrapping [ErrSettings] if f or
// s.Sizes is nil, dim < 1 or s.Workers < 0, and the error of
// s.Sizes.Validate() if it has one.
func NewKieferWolfowitz(f Value, dim int, s KieferWolfowitzSettings) (*KieferWolfowitz, error) {
	if err := checkCommon(f, dim, s.Sizes, s.Workers); err != nil {
		return nil, err
	}
	g := &KieferWolfowitz{dim: dim, sizes: s.Sizes}
	g.ev = newEvaluator(f, dim, 2*dim, s.Workers, s.CommonRandomNumbers)
	g.ev.point = g.point
	return g, nil
}

func checkCommon(f Value, dim int, sizes Sizes, workers int) error {
	switch {
	case f == nil:
		return fmt.Errorf("%w: the Value is nil", ErrSettings)
	case dim < 1:
		return fmt.Errorf("%w: dimension %d: must be ≥ 1", ErrSettings, dim)
	case sizes == nil:
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

// point writes x ± c·e_i for measurement j = 2i (plus) or 2i+1 (minus).
func (g *KieferWolfowitz) point(dst []float64, j int) {
	copy(dst, g.x)
	if j&1 == 0 {
		dst[j>>1] += g.c
	} else {
		dst[j>>1] -= g.c
	}
}

func (g *KieferWolfowitz) describe(j int) string {
	sign := "+"
	if j&1 == 1 {
		sign = "−"
	}
	return fmt.Sprintf("Kiefer–Wolfowitz measurement %d of %d, at x %s c_%d·e_%d", j+1, 2*g.dim, sign, g.k, j>>1)
}

// Measure writes the central-difference gradient at x into dst, using the
// perturbation size c_k of the step set by SetStep. It draws one number
// from rng and derives every measurement's stream from it. On error dst is
// left unchanged; the error names the failing measurement and wraps
// [ErrDimension], [ErrSize], [ErrNotFinite], [ErrPanic] or the Value's own
// error. When several measurements fail, the lowest-numbered one is
// reported, whatever the worker count.
func (g *KieferWolfowitz) Measure(dst, x []float64, rng *rand.Rand) error {
	if len(x) != g.dim || len(dst) != g.dim {
		return fmt.Errorf("%w: Kiefer–Wolfowitz of dimension %d given x of length %d and dst of length %d", ErrDimension, g.dim, len(x), len(dst))
	}
	c, err := size(g.sizes, g.k)
	if err != nil {
		return err
	}
	g.x, g.c = x, c
	err = g.ev.run(rng.Uint64(), g.describe)
	g.x = nil
	if err != nil {
		return err
	}
	v := g.ev.vals
	inv := 1 / (2 * c)
	for i := range dst {
		dst[i] = (v[2*i] - v[2*i+1]) * inv
	}
	return nil
}

// SetStep sets the step index k used for c_k by the next Measure.
func (g *KieferWolfowitz) SetStep(k int) { g.k = k }

// Dim returns the dimension p.
func (g *KieferWolfowitz) Dim() int { return g.dim }

// MeasurementsPerCall returns 2p.
func (g *KieferWolfowitz) MeasurementsPerCall() int { return 2 * g.dim }

func size(s Sizes, k int) (float64, error) {
	c := s.Size(k)
	if !(c > 0) || math.IsInf(c, 1) {
		return 0, fmt.Errorf("%w: c_%d = %v", ErrSize, k, c)
	}
	return c, nil
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
// The step index k reaches the adapter through [StepAware]: the drivers of
// package sa call SetStep before every Measure.
//
// An SPSA owns its scratch buffers and is not safe for concurrent use: give
// each run its own. Measure allocates nothing when Workers is 1.
type SPSA struct {
	dim   int
	q     int
	one   bool
	sizes Sizes
	k     int
	x     []float64
	c     float64
	delta []float64 // q·dim entries ±1, perturbation r at [r·dim, (r+1)·dim)
	dsrc  rand.PCG
	ev    *evaluator
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
	g := &SPSA{dim: dim, q: q, one: s.OneMeasurement, sizes: s.Sizes, delta: make([]float64, q*dim)}
	m := 2 * q
	if g.one {
		m = q
	}
	g.ev = newEvaluator(f, dim, m, s.Workers, s.CommonRandomNumbers)
	g.ev.point = g.point
	return g, nil
}

// point writes x + c·Δ_r (even j or one-measurement) or x − c·Δ_r.
func (g *SPSA) point(dst []float64, j int) {
	r, c := j>>1, g.c
	if g.one {
		r = j
	} else if j&1 == 1 {
		c = -c
	}
	d := g.delta[r*g.dim : (r+1)*g.dim]
	x := g.x[:len(d)]
	dst = dst[:len(d)]
	for i, di := range d {
		dst[i] = x[i] + c*di
	}
}

func (g *SPSA) describe(j int) string {
	if g.one {
		return fmt.Sprintf("SPSA measurement %d of %d, at x + c_%d·Δ of perturbation %d", j+1, g.q, g.k, j+1)
	}
	sign := "+"
	if j&1 == 1 {
		sign = "−"
	}
	return fmt.Sprintf("SPSA measurement %d of %d, at x %s c_%d·Δ of perturbation %d", j+1, 2*g.q, sign, g.k, j>>1+1)
}

// Measure writes the simultaneous-perturbation gradient at x into dst,
// using c_k of the step set by SetStep. It draws one number from rng; the
// perturbations Δ and every measurement get their own streams derived from
// it, so the j-th perturbation of a step does not depend on q or on the
// worker count. On error dst is left unchanged; the error names the
// failing measurement and wraps [ErrDimension], [ErrSize], [ErrNotFinite],
// [ErrPanic] or the Value's own error. When several measurements fail, the
// lowest-numbered one is reported, whatever the worker count.
func (g *SPSA) Measure(dst, x []float64, rng *rand.Rand) error {
	if len(x) != g.dim || len(dst) != g.dim {
		return fmt.Errorf("%w: SPSA of dimension %d given x of length %d and dst of length %d", ErrDimension, g.dim, len(x), len(dst))
	}
	c, err := size(g.sizes, g.k)
	if err != nil {
		return err
	}
	base := rng.Uint64()
	g.dsrc.Seed(seedPair(base, streamDelta))
	fillSigns(g.delta, &g.dsrc)
	g.x, g.c = x, c
	err = g.ev.run(base, g.describe)
	g.x = nil
	if err != nil {
		return err
	}
	v, p := g.ev.vals, g.dim
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
		floats.AddScaled(dst, w, g.delta[r*p:(r+1)*p])
	}
	return nil
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

// SetStep sets the step index k used for c_k by the next Measure.
func (g *SPSA) SetStep(k int) { g.k = k }

// Dim returns the dimension p.
func (g *SPSA) Dim() int { return g.dim }

// MeasurementsPerCall returns 2q, or q for the one-measurement form.
func (g *SPSA) MeasurementsPerCall() int { return g.ev.m }

// PilotGradientSize estimates the typical magnitude of a gradient estimate
// at x0, for choosing the gain scale (see schedule.SpallGains): it takes
// reps two-measurement SPSA estimates with the fixed perturbation size c
// and returns the mean of |ĝ_i| over all coordinates and repetitions. It
// uses 2·reps measurements, serially, with streams derived from rng.
func PilotGradientSize(f Value, x0 []float64, c float64, reps int, rng *rand.Rand) (float64, error) {
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
	_ Gradient    = (*KieferWolfowitz)(nil)
	_ StepAware   = (*KieferWolfowitz)(nil)
	_ Dimensioned = (*KieferWolfowitz)(nil)
	_ Counted     = (*KieferWolfowitz)(nil)
	_ Gradient    = (*SPSA)(nil)
	_ StepAware   = (*SPSA)(nil)
	_ Dimensioned = (*SPSA)(nil)
	_ Counted     = (*SPSA)(nil)
)
