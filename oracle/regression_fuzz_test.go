package oracle

import (
	"encoding/binary"
	"errors"
	"math"
	"testing"
)

// fuzzFloats reads little-endian float64 values from raw, 8 bytes each.
func fuzzFloats(raw []byte) []float64 {
	v := make([]float64, len(raw)/8)
	for i := range v {
		v[i] = math.Float64frombits(binary.LittleEndian.Uint64(raw[8*i:]))
	}
	return v
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func sameBits(a, b []float64) bool {
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

// FuzzDenseFromRows builds rows of fuzzed lengths (shape, one byte per row,
// length byte % 5) from fuzzed values (raw, 8 bytes per value; missing
// values are nil rows' worth of nothing). DenseFromRows must never panic;
// it either returns an error wrapping ErrData or a Dense whose Data is the
// rows in order, all finite, with Cols ≥ 1; the rows are never changed.
func FuzzDenseFromRows(f *testing.F) {
	one := binary.LittleEndian.AppendUint64(nil, math.Float64bits(1))
	nan := binary.LittleEndian.AppendUint64(nil, math.Float64bits(math.NaN()))
	f.Add([]byte{2, 2, 2}, append(append(one, one...), one...))
	f.Add([]byte{2, 1}, append(one, nan...))
	f.Add([]byte{0}, []byte{})
	f.Add([]byte{}, one)
	f.Fuzz(func(t *testing.T, shape, raw []byte) {
		vals := fuzzFloats(raw)
		var rows, orig [][]float64
		for _, b := range shape {
			n := min(int(b%5), len(vals))
			var r []float64
			if b != 255 { // 255: a nil row
				r = vals[:n:n]
				vals = vals[n:]
			}
			rows = append(rows, r)
			orig = append(orig, append([]float64(nil), r...))
		}
		d, err := DenseFromRows(rows)
		for i := range rows {
			if !sameBits(rows[i], orig[i]) && len(rows[i]) > 0 {
				t.Fatalf("row %d changed: %v, was %v", i, rows[i], orig[i])
			}
		}
		if err != nil {
			if !errors.Is(err, ErrData) {
				t.Fatalf("error %v does not wrap ErrData", err)
			}
			return
		}
		if d.Cols < 1 || len(d.Data) != len(rows)*d.Cols || d.Rows() != len(rows) {
			t.Fatalf("Dense of %d values, %d columns from %d rows", len(d.Data), d.Cols, len(rows))
		}
		k := 0
		for i, r := range rows {
			for j, v := range r {
				if math.Float64bits(d.Data[k]) != math.Float64bits(v) {
					t.Fatalf("Data[%d] = %v, row %d value %d is %v", k, d.Data[k], i, j, v)
				}
				if !finite(v) {
					t.Fatalf("non-finite value %v accepted (row %d, column %d)", v, i, j)
				}
				k++
			}
		}
		if len(rows) > 0 && len(rows[0]) > 0 && &d.Data[0] == &rows[0][0] {
			t.Fatal("Data aliases the caller's row 0")
		}
	})
}

// FuzzRegression builds the regression models from fuzzed data (raw: 8
// bytes per value, the first rows·cols the data, the rest the targets),
// fuzzed settings and loss. A constructor must never panic; it returns an
// error wrapping ErrData or ErrSettings, or a model whose dimensions match
// the data and whose stored data, centres and scales are finite (scales
// > 0), and whose ToOriginal maps unit parameters to finite coefficients.
// The caller's slices are never changed.
func FuzzRegression(f *testing.F) {
	enc := func(v ...float64) []byte {
		var b []byte
		for _, x := range v {
			b = binary.LittleEndian.AppendUint64(b, math.Float64bits(x))
		}
		return b
	}
	f.Add(enc(1, 2, 3, 4, 5, 7, 1, 0, 1), uint8(2), uint8(0), 0.5, 0.0, false, true, true)
	f.Add(enc(-1e200, 1e200, 0, 1), uint8(1), uint8(1), 0.5, 0.0, false, true, true)
	f.Add(enc(1e308, 1.5e308, 0, 1), uint8(1), uint8(2), 0.3, 1.0, true, true, false)
	f.Add(enc(7, 7, 7, 1, 2, 3), uint8(1), uint8(0), 0.5, 0.0, false, true, false)
	f.Add(enc(math.NaN(), 1), uint8(1), uint8(2), math.NaN(), math.Inf(1), false, false, false)
	f.Fuzz(func(t *testing.T, raw []byte, cols, loss uint8, tau, l2 float64, noInt, standardize, binaryLabels bool) {
		vals := fuzzFloats(raw)
		c := int(cols % 6) // 0 is a bad column count
		rows := 0
		if c > 0 {
			rows = len(vals) / (c + 1) // data and targets share the values
		}
		data := vals[: rows*c : rows*c]
		y := vals[rows*c:]
		if c > 0 && int(cols)%7 != 0 {
			y = y[:rows:rows] // otherwise: a wrong target count
		}
		if binaryLabels {
			for i := range y {
				if y[i] > 0 {
					y[i] = 1
				} else if finite(y[i]) {
					y[i] = 0
				}
			}
		}
		data0, y0 := append([]float64(nil), data...), append([]float64(nil), y...)
		s := RegressionSettings{NoIntercept: noInt, L2: l2, Standardize: standardize}
		x := Dense{Data: data, Cols: c}
		var r *Regression
		var err error
		switch loss % 3 {
		case 0:
			r, err = NewLeastSquares(x, y, s)
		case 1:
			r, err = NewLogistic(x, y, s)
		default:
			r, err = NewQuantile(x, y, tau, s)
		}
		if !sameBits(data, data0) || !sameBits(y, y0) {
			t.Fatal("the constructor changed the caller's data or targets")
		}
		if err != nil {
			if !errors.Is(err, ErrData) && !errors.Is(err, ErrSettings) {
				t.Fatalf("error %v wraps neither ErrData nor ErrSettings", err)
			}
			return
		}
		off := 1
		if noInt {
			off = 0
		}
		if r.Len() != rows || r.Dim() != c+off || len(r.a) != rows*c {
			t.Fatalf("model of %d samples, dimension %d, %d values, from %d rows of %d columns", r.Len(), r.Dim(), len(r.a), rows, c)
		}
		for k, v := range r.a {
			if !finite(v) {
				t.Fatalf("stored value %d is %v", k, v)
			}
		}
		for j := range r.std {
			if !finite(r.mean[j]) || !finite(r.std[j]) || !(r.std[j] > 0) {
				t.Fatalf("column %d: centre %v, scale %v", j, r.mean[j], r.std[j])
			}
		}
		if !finite(r.l2) || !(r.l2 >= 0) || r.loss == PinballLoss && !(r.tau > 0 && r.tau < 1) {
			t.Fatalf("L2 = %v, tau = %v accepted", r.l2, r.tau)
		}
		for i := range r.Dim() {
			p := make([]float64, r.Dim())
			p[i] = 1
			for k, v := range r.ToOriginal(p, p) {
				if !finite(v) {
					t.Fatalf("ToOriginal(e_%d)[%d] = %v", i, k, v)
				}
			}
		}
	})
}
