package oracle_test

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sampling"
)

// expandRankOne writes Y from its factored form by the formula that
// oracle.RankOne documents, operation by operation.
func expandRankOne(y, x []float64, g oracle.RankOne) {
	o := 0
	if g.Intercept {
		y[0] = 0 + g.Scale
		o = 1
	}
	for j, r := range g.Row {
		v := 0 + g.Scale*r
		if g.Penalty != 0 {
			v += g.Penalty * x[o+j]
		}
		y[o+j] = v
	}
}

func bitsEqual(a, b []float64) bool {
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

// wrapped hides a *Regression behind the FiniteSum interface.
type wrapped struct{ oracle.FiniteSum }

// TestMeasureRankOneMatchesMeasure checks MeasureRankOne against Measure
// on twin MiniBatches fed the same random stream: for one sample of a
// *Regression the factored form, expanded by RankOne's formula, is
// Measure's Y bit for bit (−0 entries of x and zero features included),
// with the same draws and counts; for larger batches and other finite
// sums it writes Measure's Y into dst and reports ok false.
func TestMeasureRankOneMatchesMeasure(t *testing.T) {
	const n = 50
	for _, d := range []int{1, 5, 23, 24, 40} {
		rng := rand.New(rand.NewPCG(uint64(d), 1))
		a := make([]float64, n*d)
		y := make([]float64, n)
		lab := make([]float64, n)
		for i := range a {
			a[i] = rng.NormFloat64()
		}
		for i := range n {
			a[i*d] = 0 // a zero feature: gradient entries of ±0
			y[i] = rng.NormFloat64()
			if y[i] > 0 {
				lab[i] = 1
			}
		}
		x := oracle.Dense{Data: a, Cols: d}
		var models []oracle.FiniteSum
		for _, s := range []oracle.RegressionSettings{{}, {NoIntercept: true}, {L2: 0.25}} {
			ls, err := oracle.NewLeastSquares(x, y, s)
			if err != nil {
				t.Fatal(err)
			}
			lg, err := oracle.NewLogistic(x, lab, s)
			if err != nil {
				t.Fatal(err)
			}
			q, err := oracle.NewQuantile(x, y, 0.7, s)
			if err != nil {
				t.Fatal(err)
			}
			models = append(models, ls, lg, q)
		}
		for mi, f := range models {
			for _, c := range []struct {
				f     oracle.FiniteSum
				size  int
				fused bool
			}{{f, 1, true}, {f, 2, false}, {wrapped{f}, 1, false}} {
				mk := func() *oracle.MiniBatch {
					g, err := oracle.NewMiniBatch(c.f, sampling.NewShuffled(n), c.size, oracle.BatchSettings{Workers: 1})
					if err != nil {
						t.Fatal(err)
					}
					return g
				}
				gm, gr := mk(), mk()
				if err := gr.Hold(); err != nil {
					t.Fatal(err)
				}
				rm, rr := rand.New(rand.NewPCG(9, 9)), rand.New(rand.NewPCG(9, 9))
				dim := f.Dim()
				xs := make([]float64, dim)
				want, got := make([]float64, dim), make([]float64, dim)
				for k := range 3 * n {
					for j := range xs {
						xs[j] = 0.3 * rm.NormFloat64()
					}
					xs[dim-1] = math.Copysign(0, -1)
					if err := gm.Measure(want, xs, rm); err != nil {
						t.Fatal(err)
					}
					for j := range xs { // the same draws on the twin's stream
						xs[j] = 0.3 * rr.NormFloat64()
					}
					xs[dim-1] = math.Copysign(0, -1)
					clear(got)
					g, ok, err := gr.MeasureRankOne(got, xs, rr)
					if err != nil {
						t.Fatal(err)
					}
					if ok != c.fused {
						t.Fatalf("d=%d model %d size %d %T: ok = %v, want %v", d, mi, c.size, c.f, ok, c.fused)
					}
					if ok {
						expandRankOne(got, xs, g)
					}
					if !bitsEqual(got, want) {
						t.Fatalf("d=%d model %d size %d %T, call %d: Y = %v, Measure gives %v", d, mi, c.size, c.f, k, got, want)
					}
				}
				gr.Unhold()
				if gm.Evaluations() != gr.Evaluations() {
					t.Errorf("d=%d: %d evaluations, Measure counted %d", d, gr.Evaluations(), gm.Evaluations())
				}
			}
		}
	}
}

// badSampler hands out index n, out of range.
type badSampler struct{ n int }

func (s badSampler) Fill(dst []int, _ *rand.Rand) {
	for i := range dst {
		dst[i] = s.n
	}
}
func (s badSampler) Len() int   { return s.n }
func (s badSampler) Epoch() int { return 0 }
func (s badSampler) Reset()     {}

// TestMeasureRankOneBadInput: MeasureRankOne needs Hold, which excludes
// Measure and a second Hold; an index out of range from a faulty sampler
// is returned as the *PanicError that Measure returns, and a length
// mismatch panics as in Measure.
func TestMeasureRankOneBadInput(t *testing.T) {
	f, err := oracle.NewLeastSquares(oracle.Dense{Data: []float64{1, 2, 3, 4}, Cols: 2}, []float64{1, 2}, oracle.RegressionSettings{})
	if err != nil {
		t.Fatal(err)
	}
	g, err := oracle.NewMiniBatch(f, badSampler{2}, 1, oracle.BatchSettings{})
	if err != nil {
		t.Fatal(err)
	}
	dst, x := make([]float64, 3), make([]float64, 3)
	if _, _, err := g.MeasureRankOne(dst, x, rand.New(rand.NewPCG(1, 1))); !errors.Is(err, oracle.ErrBusy) {
		t.Errorf("MeasureRankOne without Hold: %v, want ErrBusy", err)
	}
	if err := g.Hold(); err != nil {
		t.Fatal(err)
	}
	if err := g.Hold(); !errors.Is(err, oracle.ErrBusy) {
		t.Errorf("second Hold: %v, want ErrBusy", err)
	}
	if err := g.Measure(dst, x, rand.New(rand.NewPCG(1, 1))); !errors.Is(err, oracle.ErrBusy) {
		t.Errorf("Measure while held: %v, want ErrBusy", err)
	}
	_, ok, err := g.MeasureRankOne(dst, x, rand.New(rand.NewPCG(1, 1)))
	g.Unhold()
	var pe *oracle.PanicError
	if ok || !errors.As(err, &pe) {
		t.Fatalf("out-of-range index: ok %v, err %v; want a *PanicError", ok, err)
	}
	merr := g.Measure(dst, x, rand.New(rand.NewPCG(1, 1)))
	if merr == nil || merr.Error() != err.Error() {
		t.Errorf("MeasureRankOne: %v; Measure: %v", err, merr)
	}
	if err := g.Hold(); err != nil {
		t.Fatal(err)
	}
	defer func() {
		if recover() == nil {
			t.Error("length mismatch did not panic")
		}
	}()
	_, _, _ = g.MeasureRankOne(dst[:2], x, rand.New(rand.NewPCG(1, 1)))
}
