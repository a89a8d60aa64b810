package sa_test

// Bad-input tests of the pull drivers (RobbinsMonro, NewSolver,
// MinimizeSum) and of an oracle that writes into the point it was given.
// The measurement-contract cases (blocking, sharing, counted, starting
// point, typed nils) are in contract_test.go.

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// scribbler measures x − 1 and, at measurement number at, writes v into
// x[0] (against the contract) and, when fail, returns an error as well.
type scribbler struct {
	calls, at int
	v         float64
	fail      bool
}

func (s *scribbler) Measure(dst, x []float64, rng *rand.Rand) error {
	for i := range x {
		dst[i] = x[i] - 1
	}
	s.calls++
	if s.calls-1 == s.at {
		x[0] = s.v
		if s.fail {
			return errors.New("broken simulator")
		}
	}
	return nil
}

func TestOracleModifyingXIsReported(t *testing.T) {
	for _, tc := range []struct {
		name string
		v    float64
		fail bool
	}{
		{"NaN", math.NaN(), false},
		{"+Inf", math.Inf(1), false},
		{"-Inf", math.Inf(-1), false},
		{"NaN and an error", math.NaN(), true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			// Gain 0.5 on x − 1 from 0: x_k = 1 − 2^(−k), exact in binary.
			s := sa.Settings{Gain: schedule.Constant(0.5), MaxSteps: 10}
			want := 1 - math.Ldexp(1, -3) // the iterate after 3 steps
			check := func(via string, x []float64, err error) {
				t.Helper()
				var se *sa.StepError
				if !errors.Is(err, sa.ErrNotFinite) || errors.Is(err, sa.ErrDiverged) || !strings.Contains(err.Error(), "modified x") ||
					!errors.As(err, &se) || se.Step != 3 {
					t.Errorf("%s: error %v, want a StepError at step 3 wrapping ErrNotFinite that says the oracle modified x", via, err)
				}
				if len(x) != 2 || x[0] != want || x[1] != want {
					t.Errorf("%s: X = %v, want the last accepted iterate [%v %v]", via, x, want, want)
				}
			}
			x0 := []float64{0, 0}
			r, err := sa.RobbinsMonro(context.Background(), &scribbler{at: 3, v: tc.v, fail: tc.fail}, x0, s)
			check("RobbinsMonro", r.X, err)
			if r.Steps != 3 || r.Reason != sa.Failed || x0[0] != 0 {
				t.Errorf("RobbinsMonro: steps %d, reason %v, x0 %v", r.Steps, r.Reason, x0)
			}
			sv, err := sa.NewSolver(&scribbler{at: 3, v: tc.v, fail: tc.fail}, x0, s)
			if err != nil {
				t.Fatal(err)
			}
			for range 3 {
				if err := sv.Step(); err != nil {
					t.Fatal(err)
				}
			}
			err = sv.Step()
			check("Solver.Step", sv.X(), err)
			rr := sv.Result()
			check("Solver.Result", rr.X, err)
		})
	}
}

func TestPullDriversBadInput(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	ok := sa.Settings{Gain: gain, MaxSteps: 5}
	with := func(f func(*sa.Settings)) sa.Settings { s := ok; f(&s); return s }
	field := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
		for i := range x {
			dst[i] = x[i]
		}
		return nil
	})
	for _, tc := range []struct {
		name string
		h    oracle.Field
		x0   []float64
		s    sa.Settings
		want error
		text string // the message names it
	}{
		{"nil oracle", nil, []float64{1}, ok, sa.ErrNilOracle, "nil"},
		{"nil x0", field, nil, ok, sa.ErrDimension, "dimension 0"},
		{"empty x0", field, []float64{}, ok, sa.ErrDimension, "dimension 0"},
		{"wrong length for the oracle", dimField{field, 3}, []float64{1, 2}, ok, sa.ErrDimension, "dimension 3"},
		{"NaN x0", field, []float64{1, nan}, ok, sa.ErrSettings, "x0"},
		{"-Inf x0", field, []float64{math.Inf(-1)}, ok, sa.ErrSettings, "x0"},
		{"invalid gain", field, []float64{1}, with(func(s *sa.Settings) { s.Gain = schedule.Power{Scale: nan, Exponent: 0.7} }), sa.ErrSettings, "Settings.Gain"},
		{"negative MaxSteps", field, []float64{1}, with(func(s *sa.Settings) { s.MaxSteps = -5 }), sa.ErrSettings, "Settings.MaxSteps"},
		{"MinInt MaxSteps", field, []float64{1}, with(func(s *sa.Settings) { s.MaxSteps = math.MinInt }), sa.ErrSettings, "Settings.MaxSteps"},
		{"negative MaxMeasurements", field, []float64{1}, with(func(s *sa.Settings) { s.MaxMeasurements = -1 }), sa.ErrSettings, "Settings.MaxMeasurements"},
		{"negative MaxEpochs", field, []float64{1}, with(func(s *sa.Settings) { s.MaxEpochs = -1 }), sa.ErrSettings, "Settings.MaxEpochs"},
		{"MaxEpochs without data", field, []float64{1}, with(func(s *sa.Settings) { s.MaxEpochs = 2 }), sa.ErrSettings, "Settings.MaxEpochs"},
		{"negative BurnIn", field, []float64{1}, with(func(s *sa.Settings) { s.BurnIn = -1 }), sa.ErrSettings, "Settings.BurnIn"},
		{"NaN MaxAbs", field, []float64{1}, with(func(s *sa.Settings) { s.MaxAbs = nan }), sa.ErrSettings, "Settings.MaxAbs"},
		{"+Inf MaxAbs", field, []float64{1}, with(func(s *sa.Settings) { s.MaxAbs = inf }), sa.ErrSettings, "Settings.MaxAbs"},
		{"negative MaxAbs", field, []float64{1}, with(func(s *sa.Settings) { s.MaxAbs = -1 }), sa.ErrSettings, "Settings.MaxAbs"},
		{"box of the wrong dimension", field, []float64{1}, with(func(s *sa.Settings) {
			s.Projection = sa.Box{Lower: []float64{0, 0}, Upper: []float64{1, 1}}
		}), sa.ErrDimension, "Box"},
		{"box with NaN bound", field, []float64{1}, with(func(s *sa.Settings) {
			s.Projection = sa.Box{Lower: []float64{nan}, Upper: []float64{2}}
		}), sa.ErrSettings, "Box"},
		{"nonsense covariance mode", field, []float64{1}, with(func(s *sa.Settings) { s.Inference.Covariance = 7 }), sa.ErrSettings, "Inference.Covariance"},
		{"huge trace", field, []float64{1}, with(func(s *sa.Settings) { s.Trace = &sa.Tracing{Every: 1, Max: 1 << 50} }), sa.ErrSettings, "Tracing.Max"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			x0 := slices.Clone(tc.x0)
			text := fmt.Sprint(tc.s)
			r, err := sa.RobbinsMonro(context.Background(), tc.h, x0, tc.s)
			if !errors.Is(err, tc.want) || !strings.Contains(err.Error(), tc.text) {
				t.Errorf("RobbinsMonro: error %v, want %v naming %q", err, tc.want, tc.text)
			}
			if r.Steps != 0 || r.Measurements != 0 {
				t.Errorf("RobbinsMonro ran %d steps", r.Steps)
			}
			if _, err := sa.NewSolver(tc.h, x0, tc.s); !errors.Is(err, tc.want) {
				t.Errorf("NewSolver: error %v, want %v", err, tc.want)
			}
			if tc.h == nil || tc.name == "MaxEpochs without data" {
				return
			}
			// MinimizeSum shares the settings and the starting-point rule.
			d := max(len(tc.x0), 1)
			if dh, ok := tc.h.(dimField); ok {
				d = dh.d
			}
			b, err := oracle.NewFullBatch(quadSum{c: []float64{1, 2, 3}, d: d}, oracle.BatchSettings{Workers: 1})
			if err != nil {
				t.Fatal(err)
			}
			if _, err := sa.MinimizeSum(context.Background(), b, x0, tc.s); !errors.Is(err, tc.want) {
				t.Errorf("MinimizeSum: error %v, want %v", err, tc.want)
			}
			if !slices.EqualFunc(x0, tc.x0, func(a, b float64) bool { return a == b || (a != a && b != b) }) {
				t.Errorf("x0 changed from %v to %v", tc.x0, x0)
			}
			if fmt.Sprint(tc.s) != text {
				t.Errorf("the caller's settings changed")
			}
		})
	}
	// MinimizeSum with a nil batch oracle.
	if _, err := sa.MinimizeSum(context.Background(), nil, []float64{1}, ok); !errors.Is(err, sa.ErrNilOracle) && !errors.Is(err, sa.ErrSettings) {
		t.Errorf("MinimizeSum(nil) = %v, want ErrNilOracle or ErrSettings", err)
	}
}

func TestPullDriversCancelledContext(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	calls := 0
	h := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error { calls++; dst[0] = x[0]; return nil })
	x0 := []float64{1}
	r, err := sa.RobbinsMonro(ctx, h, x0, sa.Settings{Gain: gain})
	if !errors.Is(err, context.Canceled) || r.Reason != sa.Cancelled || r.Steps != 0 || calls != 0 || r.X[0] != 1 {
		t.Errorf("RobbinsMonro on a cancelled context: %v, reason %v, %d steps, %d calls, X %v", err, r.Reason, r.Steps, calls, r.X)
	}
	b, err := oracle.NewFullBatch(quadSum{c: []float64{1, 2}, d: 1}, oracle.BatchSettings{Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	r, err = sa.MinimizeSum(ctx, b, x0, sa.Settings{Gain: gain})
	if !errors.Is(err, context.Canceled) || r.Reason != sa.Cancelled || r.Steps != 0 || x0[0] != 1 {
		t.Errorf("MinimizeSum on a cancelled context: %v, reason %v, %d steps", err, r.Reason, r.Steps)
	}
}

// dimField is a Field that declares dimension d.
type dimField struct {
	oracle.FieldFunc
	d int
}

func (f dimField) Dim() int { return f.d }
