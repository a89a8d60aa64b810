package oracle_test

import (
	"errors"
	"math"
	"testing"

	"github.com/stochroot/stochroot/oracle"
)

// Every exported constructor of regression.go refuses bad input with an
// error wrapping the documented sentinel (ErrData for data, ErrSettings
// for settings) and leaves the caller's slices as they were.
func TestRegressionConstructorsBadInput(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	type input struct {
		data []float64
		cols int
		y    []float64
		tau  float64
		s    oracle.RegressionSettings
	}
	good := func() input {
		return input{data: []float64{1, 2, 3, 4, 5, 7}, cols: 2, y: []float64{1, 0, 1}, tau: 0.5}
	}
	with := func(f func(*input)) input { in := good(); f(&in); return in }
	ctors := map[string]func(in input) (*oracle.Regression, error){
		"NewLeastSquares": func(in input) (*oracle.Regression, error) {
			return oracle.NewLeastSquares(oracle.Dense{Data: in.data, Cols: in.cols}, in.y, in.s)
		},
		"NewLogistic": func(in input) (*oracle.Regression, error) {
			return oracle.NewLogistic(oracle.Dense{Data: in.data, Cols: in.cols}, in.y, in.s)
		},
		"NewQuantile": func(in input) (*oracle.Regression, error) {
			return oracle.NewQuantile(oracle.Dense{Data: in.data, Cols: in.cols}, in.y, in.tau, in.s)
		},
	}
	cases := []struct {
		name string
		in   input
		want error
		only string // "" for every constructor
	}{
		{"nil data", with(func(in *input) { in.data = nil }), oracle.ErrData, ""},
		{"empty data", with(func(in *input) { in.data = []float64{} }), oracle.ErrData, ""},
		{"zero columns", with(func(in *input) { in.cols = 0 }), oracle.ErrData, ""},
		{"negative columns", with(func(in *input) { in.cols = -2 }), oracle.ErrData, ""},
		{"huge columns", with(func(in *input) { in.cols = math.MaxInt }), oracle.ErrData, ""},
		{"ragged flat data", with(func(in *input) { in.data = in.data[:5] }), oracle.ErrData, ""},
		{"nil targets", with(func(in *input) { in.y = nil }), oracle.ErrData, ""},
		{"too few targets", with(func(in *input) { in.y = in.y[:2] }), oracle.ErrData, ""},
		{"too many targets", with(func(in *input) { in.y = append(in.y, 1) }), oracle.ErrData, ""},
		{"NaN in data", with(func(in *input) { in.data[3] = nan }), oracle.ErrData, ""},
		{"+Inf in data", with(func(in *input) { in.data[0] = inf }), oracle.ErrData, ""},
		{"−Inf in data", with(func(in *input) { in.data[5] = -inf }), oracle.ErrData, ""},
		{"NaN target", with(func(in *input) { in.y[1] = nan }), oracle.ErrData, ""},
		{"+Inf target", with(func(in *input) { in.y[2] = inf }), oracle.ErrData, ""},
		{"−Inf target", with(func(in *input) { in.y[0] = -inf }), oracle.ErrData, ""},
		{"NaN L2", with(func(in *input) { in.s.L2 = nan }), oracle.ErrSettings, ""},
		{"+Inf L2", with(func(in *input) { in.s.L2 = inf }), oracle.ErrSettings, ""},
		{"negative L2", with(func(in *input) { in.s.L2 = -1e-300 }), oracle.ErrSettings, ""},
		{"constant column standardised", with(func(in *input) { in.data = []float64{1, 5, 2, 5, 3, 5}; in.s.Standardize = true }), oracle.ErrData, ""},
		{"label 2", with(func(in *input) { in.y[0] = 2 }), oracle.ErrData, "NewLogistic"},
		{"label −1", with(func(in *input) { in.y[0] = -1 }), oracle.ErrData, "NewLogistic"},
		{"tau NaN", with(func(in *input) { in.tau = nan }), oracle.ErrSettings, "NewQuantile"},
		{"tau 0", with(func(in *input) { in.tau = 0 }), oracle.ErrSettings, "NewQuantile"},
		{"tau 1", with(func(in *input) { in.tau = 1 }), oracle.ErrSettings, "NewQuantile"},
		{"tau −Inf", with(func(in *input) { in.tau = -inf }), oracle.ErrSettings, "NewQuantile"},
		{"tau +Inf", with(func(in *input) { in.tau = inf }), oracle.ErrSettings, "NewQuantile"},
	}
	for _, tc := range cases {
		for name, ctor := range ctors {
			if tc.only != "" && tc.only != name {
				continue
			}
			data0 := append([]float64(nil), tc.in.data...)
			y0 := append([]float64(nil), tc.in.y...)
			r, err := ctor(tc.in)
			if !errors.Is(err, tc.want) || r != nil {
				t.Errorf("%s, %s: model %v, err = %v, want an error wrapping %v", name, tc.name, r != nil, err, tc.want)
			}
			if !sameFloats(tc.in.data, data0) || !sameFloats(tc.in.y, y0) {
				t.Errorf("%s, %s: the caller's slices changed", name, tc.name)
			}
		}
	}
}

func TestDenseFromRowsBadInput(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	for _, tc := range []struct {
		name string
		rows [][]float64
	}{
		{"nil", nil},
		{"no rows", [][]float64{}},
		{"nil row 0", [][]float64{nil, {1}}},
		{"empty row 0", [][]float64{{}}},
		{"ragged: short row", [][]float64{{1, 2}, {3}}},
		{"ragged: long row", [][]float64{{1, 2}, {3, 4, 5}}},
		{"ragged: nil row later", [][]float64{{1}, nil}},
		{"NaN", [][]float64{{1, 2}, {nan, 4}}},
		{"+Inf", [][]float64{{inf}}},
		{"−Inf", [][]float64{{1, 2}, {3, -inf}}},
	} {
		orig := make([][]float64, len(tc.rows))
		for i, r := range tc.rows {
			orig[i] = append([]float64(nil), r...)
		}
		d, err := oracle.DenseFromRows(tc.rows)
		if !errors.Is(err, oracle.ErrData) || d.Data != nil || d.Cols != 0 {
			t.Errorf("%s: Dense %+v, err = %v, want the zero Dense and ErrData", tc.name, d, err)
		}
		for i := range tc.rows {
			if !sameFloats(tc.rows[i], orig[i]) {
				t.Errorf("%s: row %d changed", tc.name, i)
			}
		}
	}
}

// sameFloats compares bit patterns (so NaN equals NaN).
func sameFloats(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if math.Float64bits(a[i]) != math.Float64bits(b[i]) {
			return false
		}
	}
	return true
}
