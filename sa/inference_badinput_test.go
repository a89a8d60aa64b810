package sa_test

// Bad-input tests of the error-bar settings (Inference, Precision, Tracing),
// of HalfWidthsAt, and of the sizes bounded by MaxBufferBytes.

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"strings"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// shifted measures h(x) = x − 1 + N(0, 1) noise in every coordinate.
var shifted = oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
	for i := range x {
		dst[i] = x[i] - 1 + rng.NormFloat64()
	}
	return nil
})

func TestInferenceSettingsBadInput(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	for _, tc := range []struct {
		name  string
		d     int
		s     sa.Settings
		field string // the message names it
	}{
		{"level NaN", 2, sa.Settings{Inference: sa.Inference{Level: nan}}, "Inference.Level"},
		{"level 1", 2, sa.Settings{Inference: sa.Inference{Level: 1}}, "Inference.Level"},
		{"level > 1", 2, sa.Settings{Inference: sa.Inference{Level: 1.5}}, "Inference.Level"},
		{"level < 0", 2, sa.Settings{Inference: sa.Inference{Level: -0.1}}, "Inference.Level"},
		{"level +Inf", 2, sa.Settings{Inference: sa.Inference{Level: inf}}, "Inference.Level"},
		{"covariance mode 99", 2, sa.Settings{Inference: sa.Inference{Covariance: 99}}, "Inference.Covariance"},
		{"covariance mode -1", 2, sa.Settings{Inference: sa.Inference{Covariance: -1}}, "Inference.Covariance"},
		{"batch exponent 1", 2, sa.Settings{Inference: sa.Inference{BatchExponent: 1}}, "Inference.BatchExponent"},
		{"batch exponent < 0", 2, sa.Settings{Inference: sa.Inference{BatchExponent: -0.5}}, "Inference.BatchExponent"},
		{"batch exponent NaN", 2, sa.Settings{Inference: sa.Inference{BatchExponent: nan}}, "Inference.BatchExponent"},
		{"batch scale < 0", 2, sa.Settings{Inference: sa.Inference{BatchScale: -1}}, "Inference.BatchScale"},
		{"batch scale +Inf", 2, sa.Settings{Inference: sa.Inference{BatchScale: inf}}, "Inference.BatchScale"},
		{"batch scale NaN", 2, sa.Settings{Inference: sa.Inference{BatchScale: nan}}, "Inference.BatchScale"},
		{"min batches 1", 2, sa.Settings{Inference: sa.Inference{MinBatches: 1}}, "Inference.MinBatches"},
		{"min batches < 0", 2, sa.Settings{Inference: sa.Inference{MinBatches: -3}}, "Inference.MinBatches"},
		{"precision NaN", 2, sa.Settings{Precision: &sa.Precision{Absolute: nan}}, "Precision.Absolute"},
		{"precision -Inf", 2, sa.Settings{Precision: &sa.Precision{Relative: math.Inf(-1)}}, "Precision.Relative"},
		{"precision empty", 2, sa.Settings{Precision: &sa.Precision{}}, "Precision"},
		{"precision with inference off", 2, sa.Settings{Precision: &sa.Precision{Absolute: 1}, Inference: sa.Inference{Covariance: sa.CovarianceOff}}, "Precision"},
		{"trace every 0", 2, sa.Settings{Trace: &sa.Tracing{}}, "Tracing.Every"},
		{"trace every < 0", 2, sa.Settings{Trace: &sa.Tracing{Every: -1}}, "Tracing.Every"},
		{"trace max 1", 2, sa.Settings{Trace: &sa.Tracing{Every: 1, Max: 1}}, "Tracing.Max"},
		{"trace max < 0", 2, sa.Settings{Trace: &sa.Tracing{Every: 1, Max: -8}}, "Tracing.Max"},
		// Huge sizes: refused before anything is allocated, with the bytes.
		{"trace max 1<<40", 2, sa.Settings{Trace: &sa.Tracing{Every: 1, Max: 1 << 40}}, "Tracing.Max"},
		{"trace max MaxInt", 2, sa.Settings{Trace: &sa.Tracing{Every: 1, Max: math.MaxInt}}, "Tracing.Max"},
		{"trace of a large dimension", 50000, sa.Settings{Trace: &sa.Tracing{Every: 1, Max: 1024}}, "Tracing.Max"},
		{"full covariance at d = 100000", 100000, sa.Settings{Inference: sa.Inference{Covariance: sa.CovarianceFull}}, "Inference.Covariance"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			tc.s.Gain = gain
			var before sa.Settings = tc.s
			var prec sa.Precision
			var tr sa.Tracing
			if tc.s.Precision != nil {
				prec = *tc.s.Precision
			}
			if tc.s.Trace != nil {
				tr = *tc.s.Trace
			}
			x0 := make([]float64, tc.d)
			x0[0] = 0.5
			r, err := sa.RobbinsMonro(context.Background(), shifted, x0, tc.s)
			if !errors.Is(err, sa.ErrSettings) || !strings.Contains(err.Error(), tc.field) {
				t.Fatalf("error %v, want ErrSettings naming %s", err, tc.field)
			}
			if strings.Contains(tc.name, "1<<40") || strings.Contains(tc.name, "MaxInt") || strings.Contains(tc.name, "d = ") || strings.Contains(tc.name, "large") {
				if !strings.Contains(err.Error(), "bytes") || !strings.Contains(err.Error(), "MaxBufferBytes") {
					t.Errorf("error %q does not say how many bytes it would need and the bound", err)
				}
			}
			if r.Steps != 0 || x0[0] != 0.5 || slices.ContainsFunc(x0[1:], func(v float64) bool { return v != 0 }) {
				t.Errorf("steps %d, x0[0] = %v: the run started or x0 changed", r.Steps, x0[0])
			}
			// (fmt prints NaN as NaN, so equal texts mean unchanged fields.)
			if fmt.Sprint(tc.s.Inference) != fmt.Sprint(before.Inference) || tc.s.MaxSteps != before.MaxSteps ||
				(tc.s.Precision != nil && fmt.Sprint(*tc.s.Precision) != fmt.Sprint(prec)) || (tc.s.Trace != nil && *tc.s.Trace != tr) {
				t.Errorf("the caller's settings changed")
			}
			// The same settings are refused by MinimizeSum.
			b, err := oracle.NewFullBatch(quadSum{c: []float64{1, 2}, d: tc.d}, oracle.BatchSettings{Workers: 1})
			if err != nil {
				t.Fatal(err)
			}
			if _, err := sa.MinimizeSum(context.Background(), b, x0, tc.s); !errors.Is(err, sa.ErrSettings) {
				t.Errorf("MinimizeSum: error %v, want ErrSettings", err)
			}
		})
	}
}

// TestMaxBufferBytesBoundary checks the arithmetic of the bound at its
// edge: the largest full covariance that fits is accepted (and nothing is
// allocated for it until the run), the next dimension is refused with the
// exact byte count.
func TestMaxBufferBytesBoundary(t *testing.T) {
	// A full covariance at dimension d keeps 4d + 2d² float64s (the
	// estimator's buffers and the matrix of the reported bars).
	need := func(d int) int { return 8 * (4*d + 2*d*d) }
	d := 1
	for need(d+1) <= sa.MaxBufferBytes {
		d++
	}
	if d != 8191 {
		t.Errorf("largest full covariance within MaxBufferBytes has d = %d; the CovarianceFull doc says 8191", d)
	}
	in := sa.Inference{Covariance: sa.CovarianceFull, Method: sa.MethodBatchMeans}
	s := sa.Settings{Gain: gain, Inference: in, MaxSteps: 0}
	// Refused at d+1 with the byte count in the message.
	_, err := sa.NewSolver(shifted, make([]float64, d+1), s)
	if !errors.Is(err, sa.ErrSettings) || !strings.Contains(err.Error(), strconv.Itoa(need(d+1))) {
		t.Errorf("d = %d: error %v, want ErrSettings with %d bytes", d+1, err, need(d+1))
	}
	// Random scaling (the default method) keeps another 5d + d² numbers:
	// its variances on the fine grid (3d) and the coarse full sum of its
	// correlations (2d + d²).
	needRS := func(d int) int { return need(d) + 8*(5*d+d*d) }
	d = 1
	for needRS(d+1) <= sa.MaxBufferBytes {
		d++
	}
	if d != 6687 {
		t.Errorf("largest full covariance with random scaling within MaxBufferBytes has d = %d; the CovarianceFull doc says 6687", d)
	}
	s.Inference.Method = sa.MethodAuto
	if _, err := sa.NewSolver(shifted, make([]float64, d+1), s); !errors.Is(err, sa.ErrSettings) || !strings.Contains(err.Error(), strconv.Itoa(needRS(d+1))) {
		t.Errorf("random scaling, d = %d: error %v, want ErrSettings with %d bytes", d+1, err, needRS(d+1))
	}
	// Diagonal at the same dimension is fine (and small).
	s.Inference.Covariance = sa.CovarianceDiagonal
	s.MaxSteps = 1
	if _, err := sa.NewSolver(shifted, make([]float64, d+1), s); err != nil {
		t.Errorf("d = %d, CovarianceDiagonal: %v", d+1, err)
	}
}

func TestHalfWidthsAtBadInput(t *testing.T) {
	// A gain large enough for the 2000 steps to span the SettledMemories
	// noise memories the bars need (Scale·n^0.4/2 ≈ 50 > 15 for a slope of 1).
	r, err := sa.RobbinsMonro(context.Background(), shifted, []float64{0, 0}, sa.Settings{Gain: schedule.Power{Scale: 5, Offset: 5, Exponent: 0.6}, MaxSteps: 2000, Seed: 3,
		Inference: sa.Inference{BatchScale: 1, MinBatches: 2}})
	if err != nil || !r.ErrorBars.Available {
		t.Fatalf("setup: %v, available %v", err, r.ErrorBars.Available)
	}
	e := r.ErrorBars
	for _, level := range []float64{0, 1, -0.5, 1.5, math.NaN(), math.Inf(1), math.Inf(-1)} {
		dst := []float64{7, 7}
		got, err := e.HalfWidthsAt(dst, level)
		if !errors.Is(err, sa.ErrSettings) || !strings.Contains(err.Error(), "level") {
			t.Errorf("level %v: error %v, want ErrSettings naming the level", level, err)
		}
		if dst[0] != 7 || dst[1] != 7 || &got[0] != &dst[0] {
			t.Errorf("level %v: dst changed to %v", level, dst)
		}
	}
	for _, n := range []int{1, 3} {
		dst := slices.Repeat([]float64{7}, n)
		if _, err := e.HalfWidthsAt(dst, 0.9); !errors.Is(err, sa.ErrDimension) {
			t.Errorf("dst of length %d: error %v, want ErrDimension", n, err)
		}
		if slices.ContainsFunc(dst, func(v float64) bool { return v != 7 }) {
			t.Errorf("dst of length %d changed to %v", n, dst)
		}
	}
	if _, err := (&sa.ErrorBars{Why: "none"}).HalfWidthsAt(nil, 0.9); !errors.Is(err, sa.ErrNotAvailable) {
		t.Errorf("unavailable bars: error %v, want ErrNotAvailable", err)
	}
}

func TestErrorBarsWhyBurnInCoversBudget(t *testing.T) {
	// The user did not switch inference off: the message must give the
	// real reason, that the burn-in leaves nothing to average.
	for _, s := range []sa.Settings{
		{Gain: gain, MaxSteps: 50, BurnIn: 50},
		{Gain: gain, MaxSteps: 50, BurnIn: 80},
	} {
		r, err := sa.RobbinsMonro(context.Background(), shifted, []float64{0}, s)
		if err != nil {
			t.Fatal(err)
		}
		why := r.ErrorBars.Why
		if r.ErrorBars.Available || strings.Contains(why, "CovarianceOff") || !strings.Contains(why, "BurnIn") || !strings.Contains(why, "MaxSteps") {
			t.Errorf("BurnIn %d, MaxSteps %d: Why = %q, want the burn-in named as the reason", s.BurnIn, s.MaxSteps, why)
		}
		if err := r.ErrorBars.Err(); !errors.Is(err, sa.ErrNotAvailable) {
			t.Errorf("Err() = %v, want ErrNotAvailable", err)
		}
	}
	r, _ := sa.RobbinsMonro(context.Background(), shifted, []float64{0},
		sa.Settings{Gain: gain, MaxSteps: 50, Inference: sa.Inference{Covariance: sa.CovarianceOff}})
	if !strings.Contains(r.ErrorBars.Why, "CovarianceOff") {
		t.Errorf("inference switched off: Why = %q, want it to say so", r.ErrorBars.Why)
	}
}

// quadSum is f_i(x) = ½‖x − c_i·1‖², a finite sum with n = len(c).
type quadSum struct {
	c []float64
	d int
}

func (q quadSum) Len() int { return len(q.c) }
func (q quadSum) Dim() int { return q.d }
func (q quadSum) AddGradient(dst, x []float64, i int, w float64) {
	for j := range x {
		dst[j] += w * (x[j] - q.c[i])
	}
}
