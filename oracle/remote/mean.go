package remote

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"runtime/debug"
	"sync"

	"github.com/stochroot/stochroot/oracle"
)

// Mean is the average of m measurements of a Field at the same point, all
// taken at once: a Field whose noise variance is 1/m of one measurement's,
// for the Robbins–Monro driver of package sa. With a remote [Field] the m
// requests are in flight together, one per free worker slot.
//
// Each call draws one number from the run's stream; measurement j gets
// the stream oracle.MeasurementSeed derives from it and j (the one the
// gradient-free adapters of package oracle give their measurement j). The values are summed in the order j = 0, …, m−1,
// whatever order they arrive in, so a Mean over a remote Field gives the
// bits of a Mean over the same Field run locally. A Field that implements
// [SeededField] is handed the seed pair; any other Field is called through
// oracle.MeasureStep with rand.New(rand.NewPCG(seed1, seed2)) on a
// goroutine of its own, and must then be safe for concurrent use.
type Mean struct {
	f   oracle.Field
	dim int
	m   int
}

// NewMean returns the average of m ≥ 1 measurements of f in dimension
// dim. It returns an error wrapping oracle.ErrSettings if f is nil, dim <
// 1, m < 1, or m·dim values would need more than oracle.MaxScratchBytes.
func NewMean(f oracle.Field, dim, m int) (*Mean, error) {
	switch {
	case f == nil || isNilValue(f):
		return nil, fmt.Errorf("%w: the Field of Mean is nil", oracle.ErrSettings)
	case dim < 1:
		return nil, fmt.Errorf("%w: Mean of dimension %d: must be ≥ 1", oracle.ErrSettings, dim)
	case m < 1:
		return nil, fmt.Errorf("%w: Mean of m = %d measurements: must be ≥ 1", oracle.ErrSettings, m)
	case 8*float64(m)*float64(dim) > oracle.MaxScratchBytes:
		return nil, fmt.Errorf("%w: Mean of m = %d measurements in dimension %d needs more than oracle.MaxScratchBytes of scratch", oracle.ErrSettings, m, dim)
	}
	return &Mean{f: f, dim: dim, m: m}, nil
}

// MeasureContext writes the average of m measurements at x for step k into
// dst. It draws one number from rng. Once ctx is done the measurements
// still running are abandoned (a remote one at once). On error dst is left
// unchanged and the error names the lowest-numbered measurement that
// failed: its own error, oracle.ErrPanic for a panic or
// oracle.ErrNotFinite for a NaN or ±Inf value.
func (a *Mean) MeasureContext(ctx context.Context, k int, dst, x []float64, rng *rand.Rand) error {
	if len(x) != a.dim || len(dst) != a.dim {
		return fmt.Errorf("%w: Mean of dimension %d given x of length %d and dst of length %d", oracle.ErrDimension, a.dim, len(x), len(dst))
	}
	base := rng.Uint64()
	vals := make([]float64, a.m*a.dim)
	errs := make([]error, a.m)
	var wg sync.WaitGroup
	for j := range a.m {
		wg.Go(func() {
			s1, s2 := oracle.MeasurementSeed(base, j)
			errs[j] = a.one(ctx, k, vals[j*a.dim:(j+1)*a.dim], x, s1, s2)
		})
	}
	wg.Wait()
	if ctx.Err() != nil {
		for _, err := range errs {
			if err != nil {
				return fmt.Errorf("Mean: measurements abandoned: %w", context.Cause(ctx))
			}
		}
	}
	for j, err := range errs {
		if err != nil {
			return fmt.Errorf("Mean measurement %d of %d: %w", j+1, a.m, err)
		}
		for i, v := range vals[j*a.dim : (j+1)*a.dim] {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("Mean measurement %d of %d, entry %d: %w: %v", j+1, a.m, i, oracle.ErrNotFinite, v)
			}
		}
	}
	for i := range dst {
		s := 0.0
		for j := range a.m {
			s += vals[j*a.dim+i]
		}
		dst[i] = s / float64(a.m)
	}
	return nil
}

// one takes measurement j and turns a panic into an *oracle.PanicError.
func (a *Mean) one(ctx context.Context, k int, dst, x []float64, s1, s2 uint64) (err error) {
	defer func() {
		if p := recover(); p != nil {
			err = &oracle.PanicError{Value: p, Stack: debug.Stack()}
		}
	}()
	if sf, ok := a.f.(SeededField); ok {
		return sf.MeasureSeeded(ctx, k, dst, x, s1, s2)
	}
	return oracle.MeasureStep(ctx, a.f, k, dst, x, rand.New(rand.NewPCG(s1, s2)))
}

// Measure is MeasureContext with context.Background() and step 0.
func (a *Mean) Measure(dst, x []float64, rng *rand.Rand) error {
	return a.MeasureContext(context.Background(), 0, dst, x, rng)
}

// Dim returns the dimension.
func (a *Mean) Dim() int { return a.dim }

// MeasurementsPerCall returns m, so that measurement budgets of package sa
// count every measurement.
func (a *Mean) MeasurementsPerCall() int { return a.m }

// isNilValue reports whether v holds a nil pointer, function, map, slice
// or channel (a typed nil), whose methods would panic far from the cause.
func isNilValue(v any) bool {
	switch r := reflect.ValueOf(v); r.Kind() {
	case reflect.Pointer, reflect.Func, reflect.Map, reflect.Slice, reflect.Chan, reflect.Interface:
		return r.IsNil()
	}
	return false
}
