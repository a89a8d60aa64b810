package sa_test

import (
	"bytes"
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"strconv"
	"testing"

	"github.com/stretchr/testify/require"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// noisyLinearRoot is the field h(x) = x − root plus standard normal noise.
func noisyLinearRoot(root []float64) oracle.FieldFunc {
	return func(dst, x []float64, rng *rand.Rand) error {
		for i := range dst {
			dst[i] = x[i] - root[i] + rng.NormFloat64()
		}
		return nil
	}
}

func TestInferenceBadInput(t *testing.T) {
	root := []float64{1, 2}
	base := func() sa.Settings {
		return sa.Settings{Gain: schedule.Power{Scale: 1, Exponent: 0.7}, MaxSteps: 100}
	}
	cases := []struct {
		name string
		edit func(*sa.Settings)
	}{
		{"level negative", func(s *sa.Settings) { s.Inference.Level = -0.1 }},
		{"level one", func(s *sa.Settings) { s.Inference.Level = 1 }},
		{"level above one", func(s *sa.Settings) { s.Inference.Level = 1.5 }},
		{"level NaN", func(s *sa.Settings) { s.Inference.Level = math.NaN() }},
		{"min batches one", func(s *sa.Settings) { s.Inference.MinBatches = 1 }},
		{"min batches negative", func(s *sa.Settings) { s.Inference.MinBatches = -3 }},
		{"batch exponent one", func(s *sa.Settings) { s.Inference.BatchExponent = 1 }},
		{"batch exponent negative", func(s *sa.Settings) { s.Inference.BatchExponent = -0.5 }},
		{"batch scale negative", func(s *sa.Settings) { s.Inference.BatchScale = -1 }},
		{"batch scale Inf", func(s *sa.Settings) { s.Inference.BatchScale = math.Inf(1) }},
		{"covariance mode unknown", func(s *sa.Settings) { s.Inference.Covariance = 42 }},
		{"tolerances both zero", func(s *sa.Settings) { s.Precision = &sa.Precision{} }},
		{"absolute tolerance negative", func(s *sa.Settings) { s.Precision = &sa.Precision{Absolute: -1e-3} }},
		{"relative tolerance negative", func(s *sa.Settings) { s.Precision = &sa.Precision{Absolute: 1, Relative: -1} }},
		{"absolute tolerance NaN", func(s *sa.Settings) { s.Precision = &sa.Precision{Absolute: math.NaN()} }},
		{"precision without inference", func(s *sa.Settings) {
			s.Precision = &sa.Precision{Absolute: 1}
			s.Inference.Covariance = sa.CovarianceOff
		}},
		{"trace interval zero", func(s *sa.Settings) { s.Trace = &sa.Tracing{} }},
		{"trace interval negative", func(s *sa.Settings) { s.Trace = &sa.Tracing{Every: -5} }},
		{"trace max one", func(s *sa.Settings) { s.Trace = &sa.Tracing{Every: 1, Max: 1} }},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			s := base()
			tc.edit(&s)
			before := fmt.Sprintf("%+v %+v %+v", s, s.Precision, s.Trace)
			x0 := []float64{0.5, 0.5}
			r, err := sa.RobbinsMonro(context.Background(), noisyLinearRoot(root), x0, s)
			if !errors.Is(err, sa.ErrSettings) {
				t.Fatalf("RobbinsMonro(%s) error = %v, want ErrSettings", tc.name, err)
			}
			if r.Reason != sa.NotStarted || r.Steps != 0 || !reflect.DeepEqual(r.X, x0) {
				t.Errorf("Result after a settings error = %+v, want the untouched start", r)
			}
			if fmt.Sprintf("%+v %+v %+v", s, s.Precision, s.Trace) != before {
				t.Errorf("the caller's Settings changed")
			}
		})
	}
}

// TestErrorBarsNotYetAvailable: a run too short for MinBatches batches
// reports no error bars, with nil slices (never NaN) and an error wrapping
// ErrNotAvailable from every accessor.
func TestErrorBarsNotYetAvailable(t *testing.T) {
	for _, steps := range []int{0, 1, 30} {
		s := sa.Settings{Gain: schedule.Power{Scale: 1, Exponent: 0.7}, MaxSteps: max(steps, 1)}
		if steps == 0 {
			s.BurnIn = 5 // nothing averaged
		}
		r, err := sa.RobbinsMonro(context.Background(), noisyLinearRoot([]float64{3}), []float64{0}, s)
		if err != nil {
			t.Fatal(err)
		}
		e := r.ErrorBars
		if e.Available || e.StdErr != nil || e.HalfWidth != nil || e.Covariance != nil || e.Why == "" {
			t.Errorf("steps %d: ErrorBars = %+v, want unavailable with nil slices and a reason", steps, e)
		}
		if err := e.Err(); !errors.Is(err, sa.ErrNotAvailable) {
			t.Errorf("steps %d: Err() = %v, want ErrNotAvailable", steps, err)
		}
		if _, _, err := e.Interval(0); !errors.Is(err, sa.ErrNotAvailable) {
			t.Errorf("steps %d: Interval error = %v, want ErrNotAvailable", steps, err)
		}
		if _, err := e.HalfWidthsAt(nil, 0.9); !errors.Is(err, sa.ErrNotAvailable) {
			t.Errorf("steps %d: HalfWidthsAt error = %v, want ErrNotAvailable", steps, err)
		}
	}
	// Inference off.
	r, err := sa.RobbinsMonro(context.Background(), noisyLinearRoot([]float64{3}), []float64{0},
		sa.Settings{Gain: schedule.Harmonic(1), Inference: sa.Inference{Covariance: sa.CovarianceOff}})
	require.NoError(t, err)
	require.ErrorIs(t, r.ErrorBars.Err(), sa.ErrNotAvailable)
}

// TestHalfWidthsAtLevel checks HalfWidthsAt against gonum's t quantiles
// (batch means) and RandomScalingQuantile (the default, random scaling),
// and rejects levels outside (0, 1) and, for random scaling, levels
// without a known critical value.
func TestHalfWidthsAtLevel(t *testing.T) {
	r, err := sa.RobbinsMonro(context.Background(), noisyLinearRoot([]float64{3, -1}), []float64{0, 0},
		sa.Settings{Gain: schedule.Power{Scale: 1, Exponent: 0.6}, MaxSteps: 20000})
	require.NoError(t, err)
	e := r.ErrorBars
	require.NoError(t, e.Err())
	require.Equal(t, sa.MethodRandomScaling, e.Method)
	for _, level := range []float64{0.9, 0.95, 0.99} {
		h, err := e.HalfWidthsAt(nil, level)
		require.NoError(t, err)
		q, _ := sa.RandomScalingQuantile(level)
		for i := range h {
			require.InDelta(t, q*e.StdErr[i], h[i], 1e-15*h[i])
		}
	}
	if _, err := e.HalfWidthsAt(nil, 0.5); !errors.Is(err, sa.ErrSettings) {
		t.Errorf("random scaling at level 0.5: error %v, want ErrSettings", err)
	}
	r, err = sa.RobbinsMonro(context.Background(), noisyLinearRoot([]float64{3, -1}), []float64{0, 0},
		sa.Settings{Gain: schedule.Power{Scale: 1, Exponent: 0.6}, MaxSteps: 20000, Inference: sa.Inference{Method: sa.MethodBatchMeans}})
	require.NoError(t, err)
	e = r.ErrorBars
	require.Equal(t, sa.MethodBatchMeans, e.Method)
	require.NoError(t, e.Err())
	for _, level := range []float64{0.5, 0.9, 0.99} {
		h, err := e.HalfWidthsAt(nil, level)
		require.NoError(t, err)
		q := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(e.DF)}.Quantile((1 + level) / 2)
		for i := range h {
			require.InDelta(t, q*e.StdErr[i], h[i], 1e-15*h[i])
		}
	}
	for _, level := range []float64{0, 1, -0.2, 2, math.NaN()} {
		if _, err := e.HalfWidthsAt(nil, level); err == nil {
			t.Errorf("HalfWidthsAt(level %v) error = nil, want an error", level)
		}
	}
}

// TestPrecisionStop: a precision stop ends the run early with Reason
// Precise and half-widths within tolerance; with a tolerance that cannot be
// met the budget ends the run.
func TestPrecisionStop(t *testing.T) {
	root := []float64{3, -1, 200}
	s := sa.Settings{
		Gain:      schedule.Power{Scale: 1, Exponent: 0.6},
		MaxSteps:  1_000_000,
		Precision: &sa.Precision{Absolute: 0.02, Relative: 1e-4},
		Seed:      7,
	}
	r, err := sa.RobbinsMonro(context.Background(), noisyLinearRoot(root), make([]float64, 3), s)
	require.NoError(t, err)
	if r.Reason != sa.Precise || r.Steps >= s.MaxSteps {
		t.Fatalf("Reason = %v after %d steps, want %v before %d", r.Reason, r.Steps, sa.Precise, s.MaxSteps)
	}
	for i, h := range r.ErrorBars.HalfWidth {
		if !(h <= 0.02 || h <= 1e-4*math.Abs(r.Average[i])) {
			t.Errorf("HalfWidth[%d] = %v, above both tolerances", i, h)
		}
	}
	// A tolerance too tight for the budget: the step limit ends the run.
	s.Precision = &sa.Precision{Absolute: 1e-9}
	s.MaxSteps = 5000
	r, err = sa.RobbinsMonro(context.Background(), noisyLinearRoot(root), make([]float64, 3), s)
	require.NoError(t, err)
	require.Equal(t, sa.StepLimit, r.Reason)
	require.Equal(t, "confidence intervals within tolerance", sa.Precise.String())
}

// TestTrace checks the records, thinning, the iterator and the CSV.
func TestTrace(t *testing.T) {
	root := []float64{1, -2}
	s := sa.Settings{Gain: schedule.Power{Scale: 1, Exponent: 0.6}, MaxSteps: 95, Trace: &sa.Tracing{Every: 10}, BurnIn: 15}
	r, err := sa.RobbinsMonro(context.Background(), noisyLinearRoot(root), []float64{0, 0}, s)
	require.NoError(t, err)
	tr := r.Trace
	require.NotNil(t, tr)
	var steps []int
	for p := range tr.All() {
		steps = append(steps, p.Step)
		require.Equal(t, p.Step, p.Measurements)
		require.Len(t, p.X, 2)
		if p.Step <= 15 {
			require.Nil(t, p.Average, "average before burn-in ends")
		} else {
			require.Len(t, p.Average, 2)
		}
		require.Greater(t, p.Gain, 0.0)
		require.Greater(t, p.MeasurementNorm, 0.0)
	}
	require.Equal(t, []int{10, 20, 30, 40, 50, 60, 70, 80, 90, 95}, steps)
	last := tr.At(tr.Len() - 1)
	require.Equal(t, r.X, last.X)
	require.Equal(t, r.Average, last.Average)

	// Thinning keeps the span of the run in at most Max records.
	s.MaxSteps, s.Trace = 1000, &sa.Tracing{Every: 1, Max: 8}
	r, err = sa.RobbinsMonro(context.Background(), noisyLinearRoot(root), []float64{0, 0}, s)
	require.NoError(t, err)
	steps = steps[:0]
	for p := range r.Trace.All() {
		steps = append(steps, p.Step)
	}
	// Every doubles 1→2→…→128: records at 128·k for k ≤ 7, then the end.
	require.Equal(t, 128, r.Trace.Every())
	require.Equal(t, []int{128, 256, 384, 512, 640, 768, 896, 1000}, steps)
	// Early break from the iterator.
	n := 0
	for range r.Trace.All() {
		n++
		if n == 3 {
			break
		}
	}
	require.Equal(t, 3, n)

	// CSV: header, one row per record, values that read back exactly, empty
	// cells for values that do not exist yet.
	s.MaxSteps, s.Trace, s.BurnIn = 10000, &sa.Tracing{Every: 500}, 0
	r, err = sa.RobbinsMonro(context.Background(), noisyLinearRoot(root), []float64{0, 0}, s)
	require.NoError(t, err)
	var buf bytes.Buffer
	require.NoError(t, r.Trace.WriteCSV(&buf))
	rows, err := csv.NewReader(&buf).ReadAll()
	require.NoError(t, err)
	require.Equal(t, []string{"step", "measurements", "gain", "measurement_norm", "x_1", "x_2", "average_1", "average_2", "half_width_1", "half_width_2"}, rows[0])
	require.Len(t, rows, r.Trace.Len()+1)
	sawEmpty, sawHalf := false, false
	for i, row := range rows[1:] {
		p := r.Trace.At(i)
		require.Equal(t, strconv.Itoa(p.Step), row[0])
		g, err := strconv.ParseFloat(row[2], 64)
		require.NoError(t, err)
		require.Equal(t, p.Gain, g)
		if p.HalfWidth == nil {
			require.Equal(t, "", row[8])
			sawEmpty = true
		} else {
			h, err := strconv.ParseFloat(row[9], 64)
			require.NoError(t, err)
			require.Equal(t, p.HalfWidth[1], h)
			sawHalf = true
		}
	}
	require.True(t, sawEmpty && sawHalf, "the trace should start before and end after the error bars exist")
	require.Equal(t, r.ErrorBars.HalfWidth, r.Trace.At(r.Trace.Len()-1).HalfWidth)
}

// TestReferenceReplicationQuantiles checks the replication intervals
// against Student's t: the half-width is t_{R−1}(0.975)·s/√R with the
// quantile of gonum distuv.StudentsT, which for R = 10 is 2.2622 (table of
// Student's t, e.g. Abramowitz & Stegun 1964, Table 26.10, from memory to 4
// digits).
func TestReferenceReplicationQuantiles(t *testing.T) {
	values := []float64{4.1, 3.7, 5.2, 4.4, 3.9, 4.8, 4.0, 4.6, 5.0, 3.5}
	rep, err := sa.Replicate(context.Background(), sa.Replications{Runs: len(values), Workers: 3},
		func(_ context.Context, run int, _ uint64) (sa.Result, error) {
			return sa.Result{X: []float64{values[run]}}, nil
		})
	require.NoError(t, err)
	mean, ss := 0.0, 0.0
	for _, v := range values {
		mean += v / 10
	}
	for _, v := range values {
		ss += (v - mean) * (v - mean)
	}
	se := math.Sqrt(ss / 9 / 10)
	q := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: 9}.Quantile(0.975)
	require.InDelta(t, 2.2622, q, 5e-5)
	e := rep.ErrorBars
	require.InDelta(t, mean, e.Center[0], 1e-14)
	require.InDelta(t, se, e.StdErr[0], 1e-14)
	require.InDelta(t, q*se, e.HalfWidth[0], 1e-14)
	require.Equal(t, 9, e.DF)
}

// TestReferenceReplicationCoverage: for normal estimates the t interval
// with R − 1 degrees of freedom covers the mean with probability exactly
// Level (Student 1908, Biometrika 6(1)). With R = 5 runs per study a normal
// (z) interval would cover only ≈ 0.88. Over 2000 seeded studies the
// coverage lies within 0.95 ± 3·√(0.95·0.05/2000) = 0.95 ± 0.0146 (binomial
// band, common practice).
func TestReferenceReplicationCoverage(t *testing.T) {
	const studies = 2000
	covered := 0
	for k := range studies {
		rep, err := sa.Replicate(context.Background(), sa.Replications{Runs: 5, Workers: 1, Seed: uint64(k)},
			func(_ context.Context, _ int, seed uint64) (sa.Result, error) {
				rng := rand.New(rand.NewPCG(seed, 1))
				return sa.Result{X: []float64{10 + 3*rng.NormFloat64()}}, nil
			})
		require.NoError(t, err)
		if lo, hi, _ := rep.ErrorBars.Interval(0); lo <= 10 && 10 <= hi {
			covered++
		}
	}
	p := float64(covered) / studies
	band := 3 * math.Sqrt(0.95*0.05/studies)
	if math.Abs(p-0.95) > band {
		t.Errorf("coverage of replication t intervals = %.4f, want 0.95 ± %.4f", p, band)
	}
}

// TestReplicateDeterministic: the same answer bit for bit for any number of
// workers.
func TestReplicateDeterministic(t *testing.T) {
	run := func(ctx context.Context, _ int, seed uint64) (sa.Result, error) {
		return sa.RobbinsMonro(ctx, noisyLinearRoot([]float64{1, 2, 3}), make([]float64, 3),
			sa.Settings{Gain: schedule.Power{Scale: 1, Exponent: 0.7}, MaxSteps: 500, Seed: seed})
	}
	var first sa.Replicated
	for i, w := range []int{1, 2, 3, 7, 0} {
		rep, err := sa.Replicate(context.Background(), sa.Replications{Runs: 23, Workers: w, Seed: 99}, run)
		require.NoError(t, err)
		if i == 0 {
			first = rep
			continue
		}
		if !reflect.DeepEqual(rep, first) {
			t.Errorf("Workers = %d gives a different answer than Workers = 1", w)
		}
	}
}

func TestReplicateBadInput(t *testing.T) {
	ok := func(context.Context, int, uint64) (sa.Result, error) { return sa.Result{X: []float64{1}}, nil }
	for _, s := range []sa.Replications{{Runs: 0}, {Runs: 1}, {Runs: -4}, {Runs: 5, Level: 1}, {Runs: 5, Level: -0.5}, {Runs: 5, Level: math.NaN()}, {Runs: 5, Workers: -1}} {
		if _, err := sa.Replicate(context.Background(), s, ok); !errors.Is(err, sa.ErrSettings) {
			t.Errorf("Replicate(%+v) error = %v, want ErrSettings", s, err)
		}
	}
	if _, err := sa.Replicate(context.Background(), sa.Replications{Runs: 3}, nil); !errors.Is(err, sa.ErrSettings) {
		t.Errorf("Replicate(nil run) error = %v, want ErrSettings", err)
	}
	// A failing run: the smallest failing index is reported, whatever the
	// number of workers.
	boom := errors.New("boom")
	for _, w := range []int{1, 2, 4} {
		rep, err := sa.Replicate(context.Background(), sa.Replications{Runs: 20, Workers: w},
			func(_ context.Context, run int, _ uint64) (sa.Result, error) {
				if run == 6 || run == 11 {
					return sa.Result{}, boom
				}
				return sa.Result{X: []float64{1}}, nil
			})
		var re *sa.ReplicationError
		if !errors.As(err, &re) || re.Run != 6 || !errors.Is(err, boom) {
			t.Errorf("Workers %d: error = %v, want run 6 wrapping boom", w, err)
		}
		require.False(t, rep.ErrorBars.Available)
		require.ErrorIs(t, rep.ErrorBars.Err(), sa.ErrNotAvailable)
	}
	// Cancellation.
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, err := sa.Replicate(ctx, sa.Replications{Runs: 4}, ok)
	require.ErrorIs(t, err, context.Canceled)
}

// TestDiagonalMatchesFull: keeping only the diagonal gives the same
// standard errors and intervals, bit for bit, as the full matrix.
func TestDiagonalMatchesFull(t *testing.T) {
	run := func(mode sa.CovarianceMode) sa.Result {
		r, err := sa.RobbinsMonro(context.Background(), noisyLinearRoot([]float64{1, 2, 3}), make([]float64, 3),
			sa.Settings{Gain: schedule.Power{Scale: 1, Exponent: 0.6}, MaxSteps: 30000, Seed: 4, Inference: sa.Inference{Covariance: mode}})
		require.NoError(t, err)
		return r
	}
	full, diag := run(sa.CovarianceFull), run(sa.CovarianceDiagonal)
	require.NoError(t, full.ErrorBars.Err())
	require.NotNil(t, full.ErrorBars.Covariance)
	require.Nil(t, diag.ErrorBars.Covariance)
	require.Equal(t, full.ErrorBars.StdErr, diag.ErrorBars.StdErr)
	require.Equal(t, full.ErrorBars.HalfWidth, diag.ErrorBars.HalfWidth)
	require.Equal(t, full.Average, diag.Average)
	// Auto keeps the full matrix at small d.
	require.NotNil(t, run(sa.CovarianceAuto).ErrorBars.Covariance)
}

// TestPrecisionRelative: a relative tolerance alone stops the run once
// every half-width is below Relative·|x̄_i|.
func TestPrecisionRelative(t *testing.T) {
	root := []float64{50, -20}
	r, err := sa.RobbinsMonro(context.Background(), noisyLinearRoot(root), []float64{0, 0}, sa.Settings{
		Gain: schedule.Power{Scale: 1, Exponent: 0.6}, MaxSteps: 1_000_000, BurnIn: 100,
		Precision: &sa.Precision{Relative: 1e-3}, Seed: 8,
	})
	require.NoError(t, err)
	require.Equal(t, sa.Precise, r.Reason)
	for i, h := range r.ErrorBars.HalfWidth {
		require.LessOrEqual(t, h, 1e-3*math.Abs(r.Average[i]))
	}
}

// TestErrorBarsDeterministicAndCounted: the same seed gives the same error
// bars and trace bit for bit, and a mini-batch oracle's measurements are
// counted in the trace.
func TestErrorBarsDeterministicAndCounted(t *testing.T) {
	o := newStreamLSQ([]float64{1, 2, 3}, 0.3, 1, 4) // mini-batches of 4
	run := func() sa.Result {
		r, err := sa.RobbinsMonro(context.Background(), o, make([]float64, 3), sa.Settings{
			Gain: schedule.Power{Scale: 1, Offset: 5, Exponent: 0.6}, MaxSteps: 20000, Seed: 21,
			Trace: &sa.Tracing{Every: 1000},
		})
		require.NoError(t, err)
		return r
	}
	a, b := run(), run()
	require.NoError(t, a.ErrorBars.Err())
	require.True(t, reflect.DeepEqual(a.ErrorBars, b.ErrorBars), "error bars differ between identical runs")
	// Traces hold NaN for values that do not exist yet, so compare the CSV.
	var ca, cb bytes.Buffer
	require.NoError(t, a.Trace.WriteCSV(&ca))
	require.NoError(t, b.Trace.WriteCSV(&cb))
	require.Equal(t, ca.String(), cb.String(), "traces differ between identical runs")
	require.Equal(t, 4*20000, a.Measurements)
	for p := range a.Trace.All() {
		require.Equal(t, 4*p.Step, p.Measurements)
	}
}
