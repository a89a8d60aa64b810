package sa_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// linear is the field h(x) = x − θ plus unit Gaussian noise, θ_i = i + 1.
func linear(d int) oracle.Field {
	return oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
		for i := range x {
			dst[i] = x[i] - float64(i+1) + rng.NormFloat64()
		}
		return nil
	})
}

var gain = schedule.Power{Scale: 1, Exponent: 0.7}

func TestDeterministic(t *testing.T) {
	s := sa.Settings{Gain: gain, MaxSteps: 500, Seed: 42}
	r1, err1 := sa.RobbinsMonro(context.Background(), linear(3), []float64{0, 0, 0}, s)
	r2, err2 := sa.RobbinsMonro(context.Background(), linear(3), []float64{0, 0, 0}, s)
	require.NoError(t, err1)
	require.NoError(t, err2)
	require.Equal(t, r1, r2, "same seed must give the same result bit for bit")
	s.Seed = 43
	r3, _ := sa.RobbinsMonro(context.Background(), linear(3), []float64{0, 0, 0}, s)
	require.NotEqual(t, r1.X, r3.X, "another seed should give another trajectory")
	require.Equal(t, uint64(42), r1.Seed)
	require.Equal(t, sa.StepLimit, r1.Reason)
	require.Equal(t, 500, r1.Steps)
	require.Equal(t, 500, r1.Measurements)
	require.Equal(t, 500, r1.Averaged)
}

func TestDefaultsResolvedNotWrittenBack(t *testing.T) {
	s := sa.Settings{Gain: gain}
	r, err := sa.RobbinsMonro(context.Background(), linear(1), []float64{0}, s)
	require.NoError(t, err)
	require.Equal(t, 0, s.MaxSteps, "caller's settings must not change")
	require.Equal(t, sa.DefaultMaxSteps, r.Settings.MaxSteps)
	require.Equal(t, sa.DefaultMaxSteps, r.Steps)
}

func TestBurnInAverage(t *testing.T) {
	// A deterministic field h(x) = x − 1 with gain 1/2 halves the distance:
	// x_k = 1 − 2^−k from x_0 = 0. The average of x_3 … x_6 is exact.
	h := oracle.Scalar(func(x float64, _ *rand.Rand) (float64, error) { return x - 1, nil })
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{0},
		sa.Settings{Gain: schedule.Constant(0.5), MaxSteps: 6, BurnIn: 2})
	require.NoError(t, err)
	want := 0.0
	for k := 3; k <= 6; k++ {
		want += (1 - math.Pow(2, -float64(k))) / 4
	}
	require.Equal(t, 4, r.Averaged)
	require.InDelta(t, want, r.Average[0], 1e-15)
	require.InDelta(t, 1-math.Pow(2, -6), r.X[0], 1e-15)

	r, err = sa.RobbinsMonro(context.Background(), h, []float64{0},
		sa.Settings{Gain: schedule.Constant(0.5), MaxSteps: 2, BurnIn: 2})
	require.NoError(t, err)
	require.Nil(t, r.Average, "no iterate averaged yet")
	require.Equal(t, r.X, r.Estimate())
}

func TestMeasurementBudget(t *testing.T) {
	h := counted{linear(2), 3}
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{0, 0},
		sa.Settings{Gain: gain, MaxMeasurements: 10})
	require.NoError(t, err)
	require.Equal(t, sa.MeasurementLimit, r.Reason)
	require.Equal(t, 3, r.Steps)
	require.Equal(t, 9, r.Measurements)
}

type counted struct {
	oracle.Field
	n int
}

func (c counted) MeasurementsPerCall() int { return c.n }

func TestBoxProjection(t *testing.T) {
	box := sa.Box{Lower: []float64{-1, -1}, Upper: []float64{0.5, 10}}
	// Noise-free h(x) = x − (1, 2): the first coordinate is held at its
	// upper bound 0.5, the second reaches its root inside the box.
	h := oracle.FieldFunc(func(dst, x []float64, _ *rand.Rand) error {
		dst[0], dst[1] = x[0]-1, x[1]-2
		return nil
	})
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{0, 0},
		sa.Settings{Gain: gain, MaxSteps: 2000, Projection: box})
	require.NoError(t, err)
	require.Equal(t, 0.5, r.X[0])
	require.True(t, r.Active)
	require.InDelta(t, 2, r.X[1], 1e-9)

	// Inside the box at the end: not active.
	r, err = sa.RobbinsMonro(context.Background(), h, []float64{0, 0},
		sa.Settings{Gain: gain, MaxSteps: 2000, Projection: sa.Box{Lower: []float64{-5, -5}, Upper: []float64{5, 5}}})
	require.NoError(t, err)
	require.False(t, r.Active)
}

func TestKestenThroughCore(t *testing.T) {
	// Scripted measurements; the gain of each step is read back from the
	// change of x. Kesten: index 0, 1, then advance only on a sign change.
	ys := []float64{1, 1, -1, -1, 1}
	k := 0
	h := oracle.Scalar(func(float64, *rand.Rand) (float64, error) { y := ys[k]; k++; return y, nil })
	sv, err := sa.NewSolver(h, []float64{0}, sa.Settings{Gain: schedule.Kesten{Base: schedule.Harmonic(1)}})
	require.NoError(t, err)
	want := []float64{1, 1.0 / 2, 1.0 / 2, 1.0 / 3, 1.0 / 3}
	for i, w := range want {
		before := sv.X()[0]
		require.NoError(t, sv.Step())
		got := (before - sv.X()[0]) / ys[i]
		require.InDelta(t, w, got, 1e-15, "gain of step %d", i)
	}
}

func TestCancelledContext(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	n := 0
	h := oracle.Scalar(func(x float64, rng *rand.Rand) (float64, error) {
		n++
		if n == 10 {
			cancel()
		}
		return x - 1, nil
	})
	r, err := sa.RobbinsMonro(ctx, h, []float64{0}, sa.Settings{Gain: gain, MaxSteps: sa.NoLimit})
	require.ErrorIs(t, err, context.Canceled)
	require.Equal(t, sa.Cancelled, r.Reason)
	require.Equal(t, 10, r.Steps, "the result so far is returned")
	require.NotNil(t, r.Average)

	// Already cancelled: no step, x0 returned.
	r, err = sa.RobbinsMonro(ctx, h, []float64{7}, sa.Settings{Gain: gain})
	require.ErrorIs(t, err, context.Canceled)
	require.Equal(t, []float64{7}, r.X)
	require.Equal(t, 0, r.Steps)
}

func TestNonFiniteMeasurement(t *testing.T) {
	for _, bad := range []float64{math.NaN(), math.Inf(1), math.Inf(-1)} {
		k := 0
		h := oracle.FieldFunc(func(dst, x []float64, _ *rand.Rand) error {
			dst[0], dst[1] = x[0]-1, x[1]-1
			if k == 5 {
				dst[1] = bad
			}
			k++
			return nil
		})
		sv, err := sa.NewSolver(h, []float64{0, 0}, sa.Settings{Gain: schedule.Constant(0.5)})
		require.NoError(t, err)
		r, err := sv.Run(context.Background())
		require.ErrorIs(t, err, sa.ErrNotFinite)
		var se *sa.StepError
		require.ErrorAs(t, err, &se)
		require.Equal(t, 5, se.Step, "error names the step")
		require.Contains(t, err.Error(), "step 5")
		require.Equal(t, sa.Failed, r.Reason)
		require.Equal(t, 5, r.Steps)
		// The state is the last finite iterate: 1 − 2^−5 in both coordinates.
		require.Equal(t, []float64{1 - 1.0/32, 1 - 1.0/32}, r.X)
		require.Equal(t, 6, r.Measurements)
	}
}

func TestDivergence(t *testing.T) {
	// A repelling field h(x) = −x with a constant gain doubles x each step
	// until it overflows.
	h := oracle.Scalar(func(x float64, _ *rand.Rand) (float64, error) { return -x, nil })
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{1}, sa.Settings{Gain: schedule.Constant(1), MaxSteps: 5000})
	require.ErrorIs(t, err, sa.ErrDiverged)
	require.False(t, math.IsInf(r.X[0], 0), "the last iterate is finite")
	require.Equal(t, 1023, r.Steps) // 2^1023 is finite, 2^1024 overflows

	r, err = sa.RobbinsMonro(context.Background(), h, []float64{1}, sa.Settings{Gain: schedule.Constant(1), MaxAbs: 1000})
	require.ErrorIs(t, err, sa.ErrDiverged)
	require.Equal(t, 512.0, r.X[0])
}

func TestOracleError(t *testing.T) {
	boom := errors.New("sensor offline")
	h := oracle.Scalar(func(float64, *rand.Rand) (float64, error) { return 0, boom })
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{3}, sa.Settings{Gain: gain})
	require.ErrorIs(t, err, boom)
	require.Equal(t, sa.Failed, r.Reason)
	require.Equal(t, []float64{3}, r.X)
}

func TestBadGains(t *testing.T) {
	for _, g := range []float64{-0.1, math.NaN(), math.Inf(1)} {
		s := schedule.Func(func(k int) float64 {
			if k == 3 {
				return g
			}
			return 0.1
		})
		r, err := sa.RobbinsMonro(context.Background(), linear(1), []float64{0}, sa.Settings{Gain: s})
		require.ErrorIs(t, err, sa.ErrGain, "gain %v", g)
		var se *sa.StepError
		require.ErrorAs(t, err, &se)
		require.Equal(t, 3, se.Step)
		require.Equal(t, 3, r.Steps)
	}
}

func TestBadInput(t *testing.T) {
	ok := sa.Settings{Gain: gain}
	cases := []struct {
		name  string
		h     oracle.Field
		x0    []float64
		s     sa.Settings
		is    error
		field string
	}{
		{"nil oracle", nil, []float64{0}, ok, sa.ErrNilOracle, ""},
		{"zero dimension", linear(1), nil, ok, sa.ErrDimension, ""},
		{"oracle dimension", oracle.Scalar(nil), []float64{0, 0}, ok, sa.ErrDimension, ""},
		{"non-finite x0", linear(1), []float64{math.NaN()}, ok, sa.ErrSettings, "x0"},
		{"bad power", linear(1), []float64{0}, sa.Settings{Gain: schedule.Power{Scale: -1, Exponent: 1}}, sa.ErrSettings, "Power.Scale"},
		{"bad constant", linear(1), []float64{0}, sa.Settings{Gain: schedule.Constant(0)}, sa.ErrSettings, "Constant"},
		{"MaxSteps", linear(1), []float64{0}, sa.Settings{Gain: gain, MaxSteps: -5}, sa.ErrSettings, "Settings.MaxSteps"},
		{"MaxMeasurements", linear(1), []float64{0}, sa.Settings{Gain: gain, MaxMeasurements: -1}, sa.ErrSettings, "Settings.MaxMeasurements"},
		{"BurnIn", linear(1), []float64{0}, sa.Settings{Gain: gain, BurnIn: -1}, sa.ErrSettings, "Settings.BurnIn"},
		{"MaxAbs", linear(1), []float64{0}, sa.Settings{Gain: gain, MaxAbs: math.NaN()}, sa.ErrSettings, "Settings.MaxAbs"},
		{"never stops", linear(1), []float64{0}, sa.Settings{Gain: gain, MaxSteps: sa.NoLimit}, sa.ErrSettings, "never stop"},
		{"box length", linear(2), []float64{0, 0}, sa.Settings{Gain: gain, Projection: sa.Box{Lower: []float64{0}, Upper: []float64{1}}}, sa.ErrDimension, "Box"},
		{"box order", linear(1), []float64{0}, sa.Settings{Gain: gain, Projection: sa.Box{Lower: []float64{2}, Upper: []float64{1}}}, sa.ErrSettings, "Box"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			x0 := append([]float64(nil), tc.x0...)
			r, err := sa.RobbinsMonro(context.Background(), tc.h, tc.x0, tc.s)
			require.ErrorIs(t, err, tc.is)
			require.True(t, strings.Contains(err.Error(), tc.field), "error %q should name %q", err, tc.field)
			require.Equal(t, 0, r.Steps)
			require.Equal(t, sa.NotStarted, r.Reason)
			require.Equal(t, len(x0), len(r.X))
			if len(x0) > 0 && !math.IsNaN(x0[0]) {
				require.Equal(t, x0, r.X, "the result holds the starting point")
			}
		})
	}
}

func TestStartingPointNotModified(t *testing.T) {
	x0 := []float64{0, 0}
	_, err := sa.RobbinsMonro(context.Background(), linear(2), x0, sa.Settings{Gain: gain, MaxSteps: 10})
	require.NoError(t, err)
	require.Equal(t, []float64{0, 0}, x0)
}

func TestReasonString(t *testing.T) {
	for r, want := range map[sa.Reason]string{sa.StepLimit: "step limit reached", sa.Cancelled: "cancelled", sa.Reason(99): "unknown reason"} {
		require.Equal(t, want, r.String())
	}
}

func TestSolverStepHasErrorBars(t *testing.T) {
	sv, err := sa.NewSolver(linear(1), []float64{0}, sa.Settings{Gain: schedule.Power{Scale: 1, Exponent: 0.6}, Trace: &sa.Tracing{Every: 100}})
	require.NoError(t, err)
	for range 30000 {
		require.NoError(t, sv.Step())
	}
	r := sv.Result()
	require.True(t, r.ErrorBars.Available, r.ErrorBars.Why)
	require.NotNil(t, r.Trace)
	require.Greater(t, r.Trace.Len(), 0)
}

// stepRecorder records the step index the driver passes through
// oracle.StepAware.
type stepRecorder struct {
	oracle.Field
	ks []int
}

func (s *stepRecorder) SetStep(k int) { s.ks = append(s.ks, k) }

func TestStepAwareThroughRunAndStep(t *testing.T) {
	rec := &stepRecorder{Field: linear(1)}
	sv, err := sa.NewSolver(rec, []float64{0}, sa.Settings{Gain: gain, MaxSteps: 5})
	require.NoError(t, err)
	require.NoError(t, sv.Step())
	require.NoError(t, sv.Step())
	_, err = sv.Run(context.Background())
	require.NoError(t, err)
	require.Equal(t, []int{0, 1, 2, 3, 4}, rec.ks)
}
