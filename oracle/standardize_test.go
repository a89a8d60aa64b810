package oracle_test

import (
	"errors"
	"math"
	"strings"
	"testing"

	"github.com/stochroot/stochroot/oracle"
)

// relClose reports |got − want| ≤ tol·|want|.
func relClose(got, want, tol float64) bool {
	return math.Abs(got-want) <= tol*math.Abs(want)
}

// Standardize must work on columns whose squares or sums overflow float64.
// The expected centres and scales are the definitions in the
// RegressionSettings.Standardize doc (mean, and standard deviation with
// divisor n; root mean square without an intercept) worked out by hand:
//
//	{−1e200, 1e200}:         m = 0,        s = √((1e400 + 1e400)/2) = 1e200
//	{−3e200, 0, 3e200}:      m = 0,        s = √((9e400 + 9e400)/3) = √6·1e200
//	{1e308, 1.5e308}:        m = 1.25e308, s = 0.25e308
//	{−1e200, 1e200}, no intercept: s = RMS = 1e200
//
// They are read back through ToOriginal, which maps the standardised
// parameters (b₀, β) = (0, 1) to β/s and b₀ − m·β/s.
// The tolerance 1e-15 is a few units in the last place of the scaled
// arithmetic (common practice).
func TestStandardizeHugeColumns(t *testing.T) {
	for _, tc := range []struct {
		name     string
		col      []float64
		noInt    bool
		mean, sd float64
	}{
		{"±1e200", []float64{-1e200, 1e200}, false, 0, 1e200},
		{"−3e200, 0, 3e200", []float64{-3e200, 0, 3e200}, false, 0, math.Sqrt(6) * 1e200},
		{"near 1e308", []float64{1e308, 1.5e308}, false, 1.25e308, 0.25e308},
		{"±1e200 without intercept", []float64{-1e200, 1e200}, true, 0, 1e200},
		{"near MaxFloat64", []float64{-math.MaxFloat64, math.MaxFloat64}, false, 0, math.MaxFloat64},
	} {
		t.Run(tc.name, func(t *testing.T) {
			y := make([]float64, len(tc.col))
			for i := range y {
				y[i] = float64(i)
			}
			x := oracle.Dense{Data: append([]float64(nil), tc.col...), Cols: 1}
			r, err := oracle.NewLeastSquares(x, y, oracle.RegressionSettings{Standardize: true, NoIntercept: tc.noInt})
			if err != nil {
				t.Fatalf("NewLeastSquares: %v", err)
			}
			if tc.noInt {
				got := r.ToOriginal(make([]float64, 1), []float64{1})
				if !relClose(got[0], 1/tc.sd, 1e-15) {
					t.Fatalf("β = %v, want 1/s = %v", got[0], 1/tc.sd)
				}
				return
			}
			got := r.ToOriginal(make([]float64, 2), []float64{0, 1})
			if !relClose(got[1], 1/tc.sd, 1e-15) {
				t.Fatalf("β = %v, want 1/s = %v (s = %v)", got[1], 1/tc.sd, tc.sd)
			}
			if want := -tc.mean / tc.sd; math.Abs(got[0]-want) > 1e-15*math.Max(1, math.Abs(want)) {
				t.Fatalf("b₀ = %v, want −m/s = %v", got[0], want)
			}
			// The standardised column has mean 0 and sd 1, so at the
			// parameters (0, 1) the margins are the standardised values
			// and Value is ½·mean((z − y)²); for the two-point columns z =
			// (−1, 1) and y = (0, 1): ½·(1 + 0)/2 = 0.25.
			if len(tc.col) == 2 {
				if v := r.Value([]float64{0, 1}); !relClose(v, 0.25, 1e-15) {
					t.Fatalf("Value(0, 1) = %v, want 0.25 (standardised column is ±1)", v)
				}
			}
		})
	}
}

// A column is "constant" only when every value is the same. A column that
// varies only far below the resolution of its values, and one whose
// spread cannot be represented as a usable float64 scale, get their own
// messages.
func TestStandardizeConstantAndUnrepresentable(t *testing.T) {
	for _, tc := range []struct {
		name  string
		col   []float64
		noInt bool
		want  string // in the message
		not   string // not in the message
	}{
		{"constant 7", []float64{7, 7, 7}, false, "constant", ""},
		{"constant 1e308", []float64{1e308, 1e308}, false, "constant", ""},
		{"all zero without intercept", []float64{0, 0}, true, "constant", ""},
		{"rounding-level spread", []float64{1, 1 + 0x1p-52}, false, "rounding", "constant"},
		{"spread below the smallest normal", []float64{0, 5e-324}, false, "represent", "constant"},
		{"subnormal spread", []float64{0, 1e-310}, false, "represent", "constant"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			col := append([]float64(nil), tc.col...)
			y := make([]float64, len(col))
			_, err := oracle.NewLeastSquares(oracle.Dense{Data: col, Cols: 1}, y, oracle.RegressionSettings{Standardize: true, NoIntercept: tc.noInt})
			if !errors.Is(err, oracle.ErrData) {
				t.Fatalf("err = %v, want ErrData", err)
			}
			if !strings.Contains(err.Error(), tc.want) || tc.not != "" && strings.Contains(err.Error(), tc.not) {
				t.Fatalf("message %q: want %q, not %q", err, tc.want, tc.not)
			}
			if !strings.Contains(err.Error(), "column 0") {
				t.Fatalf("message does not name the column: %v", err)
			}
			for i := range col {
				if math.Float64bits(col[i]) != math.Float64bits(tc.col[i]) {
					t.Fatalf("caller's data changed: %v", col)
				}
			}
		})
	}
}
