package oracle

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/floats"
)

// Dense is a data matrix of n rows and Cols columns stored row-major in
// Data: feature j of sample i is Data[i*Cols+j]. It converts without
// copying from gonum's mat.Dense when the stride equals the column count
// (Dense{Data: m.RawMatrix().Data, Cols: c}).
type Dense struct {
	Data []float64
	Cols int
}

// Rows returns the number of rows, len(Data)/Cols (0 if Cols < 1).
func (m Dense) Rows() int {
	if m.Cols < 1 {
		return 0
	}
	return len(m.Data) / m.Cols
}

// DenseFromRows copies rows (one slice per sample) into a new Dense. It
// returns an error wrapping [ErrData] when there are no rows, a row is
// empty, the rows have unequal lengths, or a value is NaN or ±Inf. The
// rows are only read.
func DenseFromRows(rows [][]float64) (Dense, error) {
	if len(rows) == 0 {
		return Dense{}, fmt.Errorf("%w: no rows", ErrData)
	}
	c := len(rows[0])
	if c == 0 {
		return Dense{}, fmt.Errorf("%w: row 0 is empty", ErrData)
	}
	for i, r := range rows {
		if len(r) != c {
			return Dense{}, fmt.Errorf("%w: row %d has %d values, row 0 has %d", ErrData, i, len(r), c)
		}
		for j, v := range r {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return Dense{}, fmt.Errorf("%w: value %v in row %d, column %d", ErrData, v, i, j)
			}
		}
	}
	data := make([]float64, 0, len(rows)*c)
	for _, r := range rows {
		data = append(data, r...)
	}
	return Dense{Data: data, Cols: c}, nil
}

// Loss names the sample loss of a [Regression].
type Loss int

const (
	// SquaredLoss is f_i = ½(z_i − y_i)²: least squares.
	SquaredLoss Loss = iota
	// LogisticLoss is f_i = log(1 + e^{z_i}) − y_i·z_i with labels
	// y_i ∈ {0, 1}: the negative log-likelihood of logistic regression.
	LogisticLoss
	// PinballLoss is f_i = ρ_τ(y_i − z_i) with ρ_τ(u) = u·(τ − 1{u<0}):
	// quantile regression at level τ (Koenker & Bassett 1978,
	// "Regression quantiles", Econometrica 46(1)).
	PinballLoss
)

// String returns "squared", "logistic" or "pinball".
func (l Loss) String() string {
	switch l {
	case SquaredLoss:
		return "squared"
	case LogisticLoss:
		return "logistic"
	case PinballLoss:
		return "pinball"
	}
	return fmt.Sprintf("Loss(%d)", int(l))
}

// RegressionSettings holds the optional knobs of the regression models.
// The zero value fits an intercept, no penalty, on the raw columns.
type RegressionSettings struct {
	// NoIntercept leaves out the intercept. By default the parameter
	// vector is (b₀, β₁, …, β_p): intercept first, then one coefficient per
	// column.
	NoIntercept bool

	// L2 ≥ 0 adds the ridge penalty (L2/2)·Σ_j β_j² to every sample loss
	// (so also to their mean). The intercept is not penalised. Under
	// Standardize the penalty applies to the standardised coefficients.
	L2 float64

	// Standardize works on standardised columns (a_ij − m_j)/s_j, with m_j
	// the column mean and s_j its standard deviation (divisor n), which
	// makes badly scaled data well conditioned for gradient methods. With
	// NoIntercept the columns are scaled but not centred (m_j = 0, s_j the
	// root mean square), because a centred model without an intercept is a
	// different model. The data are copied. The centres and scales are
	// computed without overflow for any finite data (up to ±MaxFloat64).
	// It is an error, wrapping [ErrData] and naming the column, when a
	// column is constant (every value the same; all zero without an
	// intercept), varies only at the rounding level of its values (spread
	// below 1e-12 times its mean), or has a spread below the smallest
	// normal float64, whose reciprocal overflows.
	// [Regression.ToOriginal] maps the fitted coefficients back to the
	// units of the caller's data.
	Standardize bool
}

// Regression is the finite sum of a linear model with one of the losses
// [SquaredLoss], [LogisticLoss], [PinballLoss]: for sample i with features
// a_i (row i of the data) and target y_i,
//
//	z_i = b₀ + Σ_j a_ij·β_j,   f_i(x) = loss(z_i, y_i) + (L2/2)·Σ_j β_j²,
//
// with x = (b₀, β₁, …, β_p) (no b₀ under NoIntercept). Per-sample gradients
// cost one dot product and one axpy over the row and allocate nothing.
//
// A Regression reads the caller's targets, and without Standardize also
// the caller's Data, in place: they must not change while it is in use. A Regression is
// immutable and safe for concurrent use.
type Regression struct {
	loss      Loss
	tau       float64
	a         []float64 // n×p row-major (standardised copy or caller's)
	y         []float64
	n, p      int
	off       int // 1 with an intercept, 0 without
	l2        float64
	mean, std []float64 // column centres and scales; nil without Standardize
}

// NewLeastSquares returns the least-squares finite sum of data x and
// targets y: f(β) = (1/n) Σ ½(z_i − y_i)² (+ penalty). It returns an error
// wrapping [ErrData] for empty data, a target count that does not match the
// rows, NaN or ±Inf anywhere, or, under Standardize, a column that cannot
// be standardised (see [RegressionSettings]).
func NewLeastSquares(x Dense, y []float64, s RegressionSettings) (*Regression, error) {
	return newRegression(SquaredLoss, 0, x, y, s)
}

// NewLogistic returns the logistic-regression finite sum of data x and
// labels y ∈ {0, 1}: f(β) = (1/n) Σ [log(1 + e^{z_i}) − y_i·z_i]
// (+ penalty). Besides the errors of [NewLeastSquares] it rejects labels
// other than 0 and 1.
func NewLogistic(x Dense, y []float64, s RegressionSettings) (*Regression, error) {
	return newRegression(LogisticLoss, 0, x, y, s)
}

// NewQuantile returns the quantile-regression finite sum at level
// 0 < tau < 1 of data x and targets y: f(β) = (1/n) Σ ρ_τ(y_i − z_i)
// (+ penalty), ρ_τ(u) = u·(τ − 1{u<0}); tau = 0.5 is median (least
// absolute deviation) regression. The loss is not differentiable where
// z_i = y_i; AddGradient uses the subgradient 0 there. Use a decreasing
// gain with averaging for it. Errors are those of [NewLeastSquares], and
// tau outside (0, 1) wraps [ErrSettings].
func NewQuantile(x Dense, y []float64, tau float64, s RegressionSettings) (*Regression, error) {
	if !(tau > 0 && tau < 1) {
		return nil, fmt.Errorf("%w: quantile level tau = %v: must be in (0, 1)", ErrSettings, tau)
	}
	return newRegression(PinballLoss, tau, x, y, s)
}

func newRegression(loss Loss, tau float64, x Dense, y []float64, s RegressionSettings) (*Regression, error) {
	if x.Cols < 1 {
		return nil, fmt.Errorf("%w: Dense.Cols = %d: must be ≥ 1", ErrData, x.Cols)
	}
	if len(x.Data) == 0 {
		return nil, fmt.Errorf("%w: no samples", ErrData)
	}
	if len(x.Data)%x.Cols != 0 {
		return nil, fmt.Errorf("%w: %d values do not make rows of %d columns", ErrData, len(x.Data), x.Cols)
	}
	n, p := len(x.Data)/x.Cols, x.Cols
	if len(y) != n {
		return nil, fmt.Errorf("%w: %d targets for %d rows", ErrData, len(y), n)
	}
	if !(s.L2 >= 0) || math.IsInf(s.L2, 0) {
		return nil, fmt.Errorf("%w: RegressionSettings.L2 = %v: must be finite and ≥ 0", ErrSettings, s.L2)
	}
	for k, v := range x.Data {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("%w: value %v in row %d, column %d", ErrData, v, k/p, k%p)
		}
	}
	for i, v := range y {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("%w: target %v in row %d", ErrData, v, i)
		}
		if loss == LogisticLoss && v != 0 && v != 1 {
			return nil, fmt.Errorf("%w: label %v in row %d: logistic regression needs labels 0 or 1", ErrData, v, i)
		}
	}
	r := &Regression{loss: loss, tau: tau, a: x.Data, y: y, n: n, p: p, l2: s.L2}
	if !s.NoIntercept {
		r.off = 1
	}
	if s.Standardize {
		if err := r.standardize(); err != nil {
			return nil, err
		}
	}
	return r, nil
}

// standardize replaces r.a by a standardised copy.
//
// Each column is first divided by the power of two at or just below its
// largest |value| (exact: only the exponent changes), so its sum and its
// sum of squares
// cannot overflow however large the values are; the mean and the spread
// are then computed in these units and scaled back. With divisor n the
// spread never exceeds the largest |value|, so the scale itself is always
// representable. Only a spread below the smallest normal float64 cannot
// serve as a scale (its reciprocal overflows), and that has its own error.
func (r *Regression) standardize() error {
	n, p := r.n, r.p
	mean := make([]float64, p)
	std := make([]float64, p)
	unit := make([]float64, p) // the power of two each column is divided by
	for j := range p {
		big := 0.0
		for i := range n {
			big = math.Max(big, math.Abs(r.a[i*p+j]))
		}
		// 2^(e−1) ≤ big < 2^e, and 2^(e−1) ≤ 2^1023 is representable
		// where 2^e might not be; scaled values lie in (−2, 2).
		_, e := math.Frexp(big)
		unit[j] = math.Ldexp(1, e-1)
	}
	if r.off == 1 {
		for i := range n {
			for j, v := range r.a[i*p : (i+1)*p] {
				mean[j] += v / unit[j]
			}
		}
		floats.Scale(1/float64(n), mean)
	}
	// Two-pass variance about the mean (accurate for data like NIST's with
	// a large mean and small spread), in scaled units.
	for i := range n {
		row := r.a[i*p : (i+1)*p]
		for j, v := range row {
			dv := v/unit[j] - mean[j]
			std[j] += dv * dv
		}
	}
	for j := range p {
		std[j] = math.Sqrt(std[j] / float64(n))
		if err := r.checkSpread(j, mean[j], std[j], unit[j]); err != nil {
			return err
		}
	}
	a := make([]float64, n*p)
	for i := range n {
		src, dst := r.a[i*p:(i+1)*p], a[i*p:(i+1)*p]
		for j, v := range src {
			dst[j] = (v/unit[j] - mean[j]) / std[j]
		}
	}
	for j := range p {
		mean[j] *= unit[j]
		std[j] *= unit[j]
	}
	r.a, r.mean, r.std = a, mean, std
	return nil
}

// checkSpread rejects column j, whose mean and spread in units of unit are
// m and sd, when it cannot be standardised, with a message that says why.
func (r *Regression) checkSpread(j int, m, sd, unit float64) error {
	n, p := r.n, r.p
	constant := true
	for i := 1; i < n && constant; i++ {
		constant = r.a[i*p+j] == r.a[j]
	}
	switch {
	case constant && (r.off == 1 || r.a[j] == 0):
		what := "it cannot be standardised; drop it (the intercept already models a constant)"
		if r.off == 0 {
			what = "it cannot be scaled to unit root mean square; drop it"
		}
		return fmt.Errorf("%w: column %d is constant (every value is %v): %s", ErrData, j, r.a[j], what)
	case !(sd > 1e-12*math.Abs(m)):
		// Not constant, but its spread is at the rounding level of its
		// values: standardising would blow rounding errors up into the
		// whole signal.
		return fmt.Errorf("%w: column %d varies only at rounding level (spread %.3g around mean %.17g, relative %.2g < 1e-12): standardising would amplify rounding errors; drop it or subtract a reference value first", ErrData, j, sd*unit, m*unit, sd/math.Abs(m))
	case sd*unit < math.SmallestNonzeroFloat64*(1<<52): // below the smallest normal float64
		return fmt.Errorf("%w: column %d has spread %.3g, which cannot be represented as a usable scale (below the smallest normal float64, %.3g, its reciprocal overflows): rescale the column", ErrData, j, sd*unit, math.SmallestNonzeroFloat64*(1<<52))
	}
	return nil
}

// Len returns the number of samples n.
func (r *Regression) Len() int { return r.n }

// Dim returns the number of parameters: columns, plus one for the
// intercept.
func (r *Regression) Dim() int { return r.p + r.off }

// Loss returns the loss of the model.
func (r *Regression) Loss() Loss { return r.loss }

// Standardized reports whether the model works on standardised columns;
// the parameters it sees are then in standardised units (see ToOriginal).
func (r *Regression) Standardized() bool { return r.std != nil }

// margin returns z_i = b₀ + a_i·β.
func (r *Regression) margin(x []float64, i int) float64 {
	p := r.p
	z := floats.Dot(r.a[i*p:(i+1)*p], x[r.off:])
	if r.off == 1 {
		z += x[0]
	}
	return z
}

// dLoss returns ∂loss/∂z at margin z for sample i.
func (r *Regression) dLoss(z float64, i int) float64 {
	switch r.loss {
	case SquaredLoss:
		return z - r.y[i]
	case LogisticLoss:
		return sigmoid(z) - r.y[i]
	default: // PinballLoss
		u := r.y[i] - z
		switch {
		case u > 0:
			return -r.tau
		case u < 0:
			return 1 - r.tau
		}
		return 0
	}
}

// AddGradient adds w·∇f_i(x) into dst:
//
//	dst[0] += w·ℓ'(z_i)   (intercept)
//	dst[j] += w·ℓ'(z_i)·a_ij + w·L2·β_j
//
// It panics if i is out of range or len(x) or len(dst) differs from Dim().
func (r *Regression) AddGradient(dst, x []float64, i int, w float64) {
	if len(x) != r.p+r.off || len(dst) != len(x) {
		panic("oracle: Regression length mismatch")
	}
	p := r.p
	row := r.a[i*p : (i+1)*p]
	z := floats.Dot(row, x[r.off:])
	if r.off == 1 {
		z += x[0]
	}
	g := w * r.dLoss(z, i)
	if r.off == 1 {
		dst[0] += g
	}
	floats.AddScaled(dst[r.off:], g, row)
	if r.l2 != 0 {
		floats.AddScaled(dst[r.off:], w*r.l2, x[r.off:])
	}
}

// fusedDotMin is the row width from which the fused kernel of addRange
// calls gonum's assembly dot and axpy kernels per row; narrower rows use
// fusedSquaredNarrow, a Go loop over pairs of rows without calls. Measured
// side by side on rows in cache (2-core AMD EPYC, Go 1.26): the Go loop is
// 1.5–1.9× faster at 8 columns and 1.08× at 16; the assembly kernels are
// 1.2× faster at 32 and 1.5–2× at 64–128.
const fusedDotMin = 24

// addRange adds w·Σ_{i=lo}^{hi−1} ∇f_i(x) into dst, the same sum as
// calling AddGradient for i = lo, …, hi−1, in one fused pass over each row:
// its margin z_i (a dot product), then dst += w·ℓ'(z_i)·a_i (an axpy)
// while the row is still in the first-level cache, so the data are read
// from memory once, as a stream. The intercept part is summed separately
// and added once; the result may differ from the one-at-a-time sum in the
// last bits (summation order). The full-batch oracle uses it for a
// *Regression. It allocates nothing and is safe for concurrent use with
// different dst.
func (r *Regression) addRange(dst, x []float64, lo, hi int, w float64) {
	if len(x) != r.p+r.off || len(dst) != len(x) {
		panic("oracle: Regression length mismatch")
	}
	if lo < 0 || hi > r.n || lo > hi {
		panic("oracle: Regression range out of bounds")
	}
	p, off := r.p, r.off
	beta, g := x[off:], dst[off:]
	b0 := 0.0
	if off == 1 {
		b0 = x[0]
	}
	a, y := r.a[lo*p:hi*p], r.y[lo:hi]
	var sum float64
	switch {
	case r.loss != SquaredLoss:
		for k := range y {
			row := a[k*p : (k+1)*p]
			v := w * r.dLoss(floats.Dot(row, beta)+b0, lo+k)
			sum += v
			floats.AddScaled(g, v, row)
		}
	case p >= fusedDotMin:
		for k, yk := range y {
			row := a[k*p : (k+1)*p]
			v := w * (floats.Dot(row, beta) + b0 - yk)
			sum += v
			floats.AddScaled(g, v, row)
		}
	case p == 8:
		sum = fusedSquared8(g, beta, a, y, b0, w)
	default:
		sum = fusedSquaredNarrow(g, beta, a, y, b0, w)
	}
	if off == 1 {
		dst[0] += sum
	}
	if r.l2 != 0 {
		floats.AddScaled(g, float64(hi-lo)*w*r.l2, beta)
	}
}

// addIndexed adds w·Σ_{i∈idx} ∇f_i(x) into dst, the same sum as calling
// AddGradient for each i of idx in turn (up to rounding: the intercept part
// and the penalty are added once). Before the sum it reads one value of
// every cache line of the batch's rows and targets in a tight loop, whose
// loads do not depend on each other, so the processor fetches the rows of
// randomly drawn samples from memory in parallel instead of one or two at
// a time behind the arithmetic; it then makes one fused pass per row. The
// mini-batch oracle uses it for a *Regression. It panics, naming the
// index, if an index is out of range. It allocates nothing and is safe for
// concurrent use with different dst.
func (r *Regression) addIndexed(dst, x []float64, idx []int, w float64) {
	if len(x) != r.p+r.off || len(dst) != len(x) {
		panic("oracle: Regression length mismatch")
	}
	p, off := r.p, r.off
	var t float64
	for _, i := range idx {
		if i < 0 || i >= r.n {
			panic(fmt.Sprintf("oracle: Regression sample index %d out of range [0, %d)", i, r.n))
		}
		row := r.a[i*p : (i+1)*p]
		for j := 0; j < len(row); j += 8 {
			t += row[j]
		}
		t += row[len(row)-1] + r.y[i]
	}
	if t != t { // never: the data are finite; keeps the loads live
		panic("oracle: Regression data not finite")
	}
	beta, g := x[off:], dst[off:]
	b0 := 0.0
	if off == 1 {
		b0 = x[0]
	}
	var sum float64
	for _, i := range idx {
		row := r.a[i*p : (i+1)*p]
		v := r.rowSlope(row, beta, b0, i, w)
		sum += v
		if p < fusedDotMin {
			gg := g[:len(row)]
			for j, aj := range row {
				gg[j] += v * aj
			}
		} else {
			floats.AddScaled(g, v, row)
		}
	}
	if off == 1 {
		dst[0] += sum
	}
	if r.l2 != 0 {
		floats.AddScaled(g, float64(len(idx))*w*r.l2, beta)
	}
}

// rowSlope returns w·ℓ'(z_i) for the margin z_i = b0 + row·beta of sample
// i (row is its features, beta the coefficients): the per-sample factor
// of addIndexed, which rankOne shares so that both round alike. Narrow
// rows are summed in two interleaved halves, wider ones by gonum's dot
// kernel.
func (r *Regression) rowSlope(row, beta []float64, b0 float64, i int, w float64) float64 {
	var z float64
	if len(row) < fusedDotMin {
		bt := beta[:len(row)]
		var s0, s1 float64
		j := 0
		for ; j+2 <= len(row); j += 2 {
			s0 += row[j] * bt[j]
			s1 += row[j+1] * bt[j+1]
		}
		if j < len(row) {
			s0 += row[j] * bt[j]
		}
		z = s0 + s1 + b0
	} else {
		z = floats.Dot(row, beta) + b0
	}
	if r.loss == SquaredLoss {
		return w * (z - r.y[i])
	}
	return w * r.dLoss(z, i)
}

// rankOne returns the gradient w·∇f_i(x) of sample i in factored form
// (see RankOne). The caller checks i and the length of x.
func (r *Regression) rankOne(x []float64, i int, w float64) RankOne {
	p, off := r.p, r.off
	row := r.a[i*p : (i+1)*p : (i+1)*p]
	if p > 8 {
		// As in addIndexed: touch every cache line of the row with loads
		// that do not depend on each other, so that a row not in cache
		// arrives in parallel rather than line by line behind the dot
		// product.
		var t float64
		for j := 0; j < len(row); j += 8 {
			t += row[j]
		}
		t += row[len(row)-1] + r.y[i]
		if t != t { // never: the data are finite; keeps the loads live
			panic("oracle: Regression data not finite")
		}
	}
	b0 := 0.0
	if off == 1 {
		b0 = x[0]
	}
	return RankOne{
		Scale:     r.rowSlope(row, x[off:], b0, i, w),
		Row:       row,
		Intercept: off == 1,
		Penalty:   float64(1) * w * r.l2, // as addIndexed rounds it for one index
	}
}

// fusedSquared8 is fusedSquaredNarrow for rows of exactly 8 values, a
// width common enough to deserve its own loop: the gradient accumulates in
// eight local variables (registers) instead of memory, and is added into g
// once at the end.
func fusedSquared8(g, beta, a, y []float64, b0, w float64) float64 {
	g, beta = g[:8], beta[:8]
	c0, c1, c2, c3, c4, c5, c6, c7 := beta[0], beta[1], beta[2], beta[3], beta[4], beta[5], beta[6], beta[7]
	var g0, g1, g2, g3, g4, g5, g6, g7, sum float64
	for k, yk := range y {
		r := a[8*k : 8*k+8 : 8*k+8]
		z := ((r[0]*c0 + r[1]*c1) + (r[2]*c2 + r[3]*c3)) + ((r[4]*c4 + r[5]*c5) + (r[6]*c6 + r[7]*c7))
		v := w * (z + b0 - yk)
		sum += v
		g0 += v * r[0]
		g1 += v * r[1]
		g2 += v * r[2]
		g3 += v * r[3]
		g4 += v * r[4]
		g5 += v * r[5]
		g6 += v * r[6]
		g7 += v * r[7]
	}
	g[0] += g0
	g[1] += g1
	g[2] += g2
	g[3] += g3
	g[4] += g4
	g[5] += g5
	g[6] += g6
	g[7] += g7
	return sum
}

// fusedSquaredNarrow is the least-squares kernel of addRange for narrow
// rows, without calls: for each row a_k of a (len(beta) wide), v_k =
// w·(a_k·β + b0 − y_k) and g += v_k·a_k. It returns Σ v_k. Rows are taken
// two at a time, so that g is loaded and stored once per pair and the two
// dot products overlap.
func fusedSquaredNarrow(g, beta, a, y []float64, b0, w float64) float64 {
	p := len(beta)
	g = g[:p]
	var sum float64
	k := 0
	for ; k+2 <= len(y); k += 2 {
		r0 := a[k*p : (k+1)*p : (k+1)*p]
		r1 := a[(k+1)*p : (k+2)*p : (k+2)*p]
		r1 = r1[:len(r0)]
		bt := beta[:len(r0)]
		var s0, s1, t0, t1 float64
		j := 0
		for ; j+2 <= len(r0); j += 2 {
			s0 += r0[j] * bt[j]
			s1 += r0[j+1] * bt[j+1]
			t0 += r1[j] * bt[j]
			t1 += r1[j+1] * bt[j+1]
		}
		if j < len(r0) {
			s0 += r0[j] * bt[j]
			t0 += r1[j] * bt[j]
		}
		v0 := w * (s0 + s1 + b0 - y[k])
		v1 := w * (t0 + t1 + b0 - y[k+1])
		sum += v0 + v1
		gg := g[:len(r0)]
		for j, aj := range r0 {
			gg[j] += v0*aj + v1*r1[j]
		}
	}
	if k < len(y) {
		row := a[k*p : (k+1)*p : (k+1)*p]
		bt := beta[:len(row)]
		var s0 float64
		for j, aj := range row {
			s0 += aj * bt[j]
		}
		v := w * (s0 + b0 - y[k])
		sum += v
		gg := g[:len(row)]
		for j, aj := range row {
			gg[j] += v * aj
		}
	}
	return sum
}

// Value returns the objective f(x) = (1/n) Σ f_i(x), penalty included,
// summed in sample order. It panics if len(x) differs from Dim().
func (r *Regression) Value(x []float64) float64 {
	if len(x) != r.p+r.off {
		panic("oracle: Regression length mismatch")
	}
	var sum float64
	for i := range r.n {
		z := r.margin(x, i)
		y := r.y[i]
		switch r.loss {
		case SquaredLoss:
			sum += 0.5 * (z - y) * (z - y)
		case LogisticLoss:
			sum += softplus(z) - y*z
		default:
			u := y - z
			if u < 0 {
				sum += u * (r.tau - 1)
			} else {
				sum += u * r.tau
			}
		}
	}
	v := sum / float64(r.n)
	if r.l2 != 0 {
		b := x[r.off:]
		v += 0.5 * r.l2 * floats.Dot(b, b)
	}
	return v
}

// ToOriginal maps parameters x of the model (standardised units under
// Standardize) to coefficients in the units of the caller's data,
//
//	β_j = x_j / s_j,   b₀ = x₀ − Σ_j m_j·x_j / s_j,
//
// writes them into dst and returns dst. Without Standardize it copies x.
// dst may be x. It panics if len(dst) or len(x) differs from Dim().
func (r *Regression) ToOriginal(dst, x []float64) []float64 {
	if len(x) != r.p+r.off || len(dst) != len(x) {
		panic("oracle: Regression length mismatch")
	}
	copy(dst, x)
	if r.std == nil {
		return dst
	}
	b0 := 0.0
	if r.off == 1 {
		b0 = x[0]
	}
	for j := range r.p {
		beta := x[r.off+j] / r.std[j]
		b0 -= r.mean[j] * beta
		dst[r.off+j] = beta
	}
	if r.off == 1 {
		dst[0] = b0
	}
	return dst
}

// FromOriginal is the inverse of ToOriginal: it maps coefficients in the
// units of the caller's data (a starting point, say) to the parameters the
// model works with, writes them into dst and returns dst. dst may be x.
// It panics if len(dst) or len(x) differs from Dim().
func (r *Regression) FromOriginal(dst, x []float64) []float64 {
	if len(x) != r.p+r.off || len(dst) != len(x) {
		panic("oracle: Regression length mismatch")
	}
	copy(dst, x)
	if r.std == nil {
		return dst
	}
	b0 := 0.0
	if r.off == 1 {
		b0 = x[0]
	}
	for j := range r.p {
		b0 += r.mean[j] * x[r.off+j]
		dst[r.off+j] = x[r.off+j] * r.std[j]
	}
	if r.off == 1 {
		dst[0] = b0
	}
	return dst
}

// sigmoid returns 1/(1+e^{−z}) without overflow.
func sigmoid(z float64) float64 {
	if z >= 0 {
		return 1 / (1 + math.Exp(-z))
	}
	e := math.Exp(z)
	return e / (1 + e)
}

// softplus returns log(1+e^z) without overflow.
func softplus(z float64) float64 {
	return max(z, 0) + math.Log1p(math.Exp(-math.Abs(z)))
}

var _ FiniteSum = (*Regression)(nil)
