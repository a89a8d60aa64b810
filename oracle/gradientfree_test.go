package oracle_test

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"sync/atomic"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/schedule"
)

// linear is f(x) = b·x + noise·N(0,1) with the noise drawn from the stream
// the measurement receives; it counts its calls.
type linear struct {
	b     []float64
	noise float64
	calls atomic.Int64
}

func (l *linear) Value(x []float64, rng *rand.Rand) (float64, error) {
	l.calls.Add(1)
	s := 0.0
	for i, v := range x {
		s += l.b[i] * v
	}
	return s + l.noise*rng.NormFloat64(), nil
}

func TestKieferWolfowitzExactOnQuadratic(t *testing.T) {
	// Central differences are exact for quadratics: [f(x+c)−f(x−c)]/(2c)
	// = f'(x) when f''' = 0 (Taylor's theorem; common practice).
	w := []float64{1, 2, 3, 0.5}
	f := oracle.ValueFunc(func(x []float64, _ *rand.Rand) (float64, error) {
		s := 0.0
		for i, v := range x {
			s += w[i]*v*v + float64(i)*v
		}
		return s, nil
	})
	g, err := oracle.NewKieferWolfowitz(f, 4, oracle.KieferWolfowitzSettings{Sizes: schedule.PowerSizes{Scale: 0.5, Exponent: 0.2}})
	if err != nil {
		t.Fatal(err)
	}
	x := []float64{1, -2, 0.25, 3}
	dst := make([]float64, 4)
	g.SetStep(7)
	if err := g.Measure(dst, x, rand.New(rand.NewPCG(1, 2))); err != nil {
		t.Fatal(err)
	}
	for i := range x {
		want := 2*w[i]*x[i] + float64(i)
		if math.Abs(dst[i]-want) > 1e-12*(1+math.Abs(want)) {
			t.Errorf("ĝ[%d] = %v, want %v", i, dst[i], want)
		}
	}
	if got := g.MeasurementsPerCall(); got != 8 {
		t.Errorf("MeasurementsPerCall() = %d, want 8", got)
	}
}

func TestCommonRandomNumbersCancelNoise(t *testing.T) {
	// With common random numbers both measurements of a pair see the same
	// noise, so on a linear function the noise cancels exactly:
	// KW gives b, SPSA gives (b·Δ)Δ_i whose entries are b_i ± sums of the
	// other b_j, so for b = e_0 every entry is ±1 and ĝ_0 = 1.
	b := []float64{1, 0, 0}
	f := &linear{b: b, noise: 10}
	c := schedule.PowerSizes{Scale: 0.1, Exponent: 0}
	kw, _ := oracle.NewKieferWolfowitz(f, 3, oracle.KieferWolfowitzSettings{Sizes: c, CommonRandomNumbers: true})
	sp, _ := oracle.NewSPSA(f, 3, oracle.SPSASettings{Sizes: c, CommonRandomNumbers: true})
	rng := rand.New(rand.NewPCG(3, 4))
	x := []float64{0.3, -1, 2}
	dst := make([]float64, 3)
	for range 20 {
		if err := kw.Measure(dst, x, rng); err != nil {
			t.Fatal(err)
		}
		for i := range b {
			if math.Abs(dst[i]-b[i]) > 1e-9 {
				t.Fatalf("KW with CRN: ĝ = %v, want %v", dst, b)
			}
		}
		if err := sp.Measure(dst, x, rng); err != nil {
			t.Fatal(err)
		}
		if math.Abs(dst[0]-1) > 1e-9 || math.Abs(math.Abs(dst[1])-1) > 1e-9 || math.Abs(math.Abs(dst[2])-1) > 1e-9 {
			t.Fatalf("SPSA with CRN: ĝ = %v, want (1, ±1, ±1)", dst)
		}
	}
	// Without CRN the noise (sd 10) does not cancel: KW's ĝ_0 has sd
	// 10·√2/(2·0.1) ≈ 71, so it cannot stay within 1e-9 of 1.
	kw2, _ := oracle.NewKieferWolfowitz(f, 3, oracle.KieferWolfowitzSettings{Sizes: c})
	if err := kw2.Measure(dst, x, rng); err != nil {
		t.Fatal(err)
	}
	if math.Abs(dst[0]-1) < 1e-9 {
		t.Errorf("KW without CRN: ĝ_0 = %v: the noise cancelled, so the streams were shared", dst[0])
	}
}

func TestSPSAUnbiasedOnLinear(t *testing.T) {
	// For f = b·x without noise, ĝ_i = (b·Δ)Δ_i = b_i + Σ_{j≠i} b_j Δ_jΔ_i
	// (two-measurement form) has mean b_i and variance Σ_{j≠i} b_j²
	// because the Δ_jΔ_i are independent ±1 (Spall 1992, Lemma 1 is the
	// general statement). The one-measurement form adds f(x)Δ_i/c, mean 0
	// and variance (b·x)²/c². Over n estimates the mean is within 5 standard
	// errors with probability 1 − 6e-7 per coordinate.
	b := []float64{2, -1, 0.5, 3}
	x := []float64{0.1, 0.2, -0.3, 0.05}
	bx := 0.0
	sumSq := 0.0
	for i := range b {
		bx += b[i] * x[i]
		sumSq += b[i] * b[i]
	}
	const n = 4000
	const c = 0.5
	for _, one := range []bool{false, true} {
		for _, q := range []int{1, 3} {
			t.Run(fmt.Sprintf("one=%v/q=%d", one, q), func(t *testing.T) {
				f := &linear{b: b}
				g, err := oracle.NewSPSA(f, 4, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: c}, OneMeasurement: one, Perturbations: q})
				if err != nil {
					t.Fatal(err)
				}
				rng := rand.New(rand.NewPCG(5, 6))
				mean := make([]float64, 4)
				dst := make([]float64, 4)
				for range n {
					if err := g.Measure(dst, x, rng); err != nil {
						t.Fatal(err)
					}
					for i, v := range dst {
						mean[i] += v / n
					}
				}
				perCall := 2 * q
				if one {
					perCall = q
				}
				if got := int(f.calls.Load()); got != n*perCall || g.MeasurementsPerCall() != perCall {
					t.Errorf("Value called %d times, MeasurementsPerCall %d; want %d and %d", got, g.MeasurementsPerCall(), n*perCall, perCall)
				}
				for i := range b {
					v := sumSq - b[i]*b[i]
					if one {
						v += bx * bx / (c * c)
					}
					tol := 5 * math.Sqrt(v/float64(q)/n)
					if math.Abs(mean[i]-b[i]) > tol {
						t.Errorf("mean ĝ[%d] = %v, want %v ± %.3g", i, mean[i], b[i], tol)
					}
				}
			})
		}
	}
}

// busyValue is a noisy function of moderate cost whose measurements draw
// several numbers from their stream.
func busyValue(x []float64, rng *rand.Rand) (float64, error) {
	s := 0.0
	for _, v := range x {
		s += (v - 1) * (v - 1)
	}
	for range 3 {
		s += 0.1 * rng.NormFloat64()
	}
	return s, nil
}

func TestWorkersBitIdentical(t *testing.T) {
	// Results must not depend on the worker count, bit for bit.
	type mk func(workers int) oracle.Gradient
	c := schedule.PowerSizes{Scale: 0.2, Exponent: 0.101}
	f := oracle.ValueFunc(busyValue)
	makers := map[string]mk{
		"KW": func(w int) oracle.Gradient {
			g, _ := oracle.NewKieferWolfowitz(f, 5, oracle.KieferWolfowitzSettings{Sizes: c, Workers: w})
			return g
		},
		"KW-CRN": func(w int) oracle.Gradient {
			g, _ := oracle.NewKieferWolfowitz(f, 5, oracle.KieferWolfowitzSettings{Sizes: c, Workers: w, CommonRandomNumbers: true})
			return g
		},
		"SPSA-q4-CRN": func(w int) oracle.Gradient {
			g, _ := oracle.NewSPSA(f, 5, oracle.SPSASettings{Sizes: c, Workers: w, Perturbations: 4, CommonRandomNumbers: true})
			return g
		},
		"SPSA-one-q3": func(w int) oracle.Gradient {
			g, _ := oracle.NewSPSA(f, 5, oracle.SPSASettings{Sizes: c, Workers: w, Perturbations: 3, OneMeasurement: true})
			return g
		},
	}
	for name, m := range makers {
		t.Run(name, func(t *testing.T) {
			var ref []float64
			for _, w := range []int{0, 1, 2, 3, 7} {
				g := m(w)
				rng := rand.New(rand.NewPCG(11, 12))
				x := []float64{0.5, 0, -1, 2, 0.25}
				dst := make([]float64, 5)
				var got []float64
				for k := range 5 {
					g.(oracle.StepAware).SetStep(k)
					if err := g.Measure(dst, x, rng); err != nil {
						t.Fatal(err)
					}
					got = append(got, dst...)
				}
				if ref == nil {
					ref = got
					continue
				}
				for i := range got {
					if math.Float64bits(got[i]) != math.Float64bits(ref[i]) {
						t.Fatalf("Workers=%d: entry %d = %v, Workers=0 gave %v", w, i, got[i], ref[i])
					}
				}
			}
		})
	}
}

func TestMeasureAllocatesNothing(t *testing.T) {
	c := schedule.PowerSizes{Scale: 0.2, Exponent: 0.101}
	f := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) { return x[0] + rng.Float64(), nil })
	kw, _ := oracle.NewKieferWolfowitz(f, 10, oracle.KieferWolfowitzSettings{Sizes: c, CommonRandomNumbers: true})
	sp, _ := oracle.NewSPSA(f, 100, oracle.SPSASettings{Sizes: c, Perturbations: 2})
	// With workers the step starts goroutines through a method value made
	// once, which allocates nothing either.
	spw, _ := oracle.NewSPSA(f, 100, oracle.SPSASettings{Sizes: c, Perturbations: 2, Workers: 2})
	rng := rand.New(rand.NewPCG(1, 2))
	for name, g := range map[string]oracle.Gradient{"KW": kw, "SPSA": sp, "SPSA-2-workers": spw} {
		d := g.(oracle.Dimensioned).Dim()
		x, dst := make([]float64, d), make([]float64, d)
		k := 0
		allocs := testing.AllocsPerRun(100, func() {
			g.(oracle.StepAware).SetStep(k)
			k++
			if err := g.Measure(dst, x, rng); err != nil {
				t.Fatal(err)
			}
		})
		if allocs != 0 {
			t.Errorf("%s: Measure allocates %v times per call, want 0", name, allocs)
		}
	}
}

func TestGradientFreeBadSettings(t *testing.T) {
	f := oracle.ValueFunc(busyValue)
	c := schedule.PowerSizes{Scale: 1, Exponent: 0.101}
	cases := []struct {
		name string
		err  func() error
	}{
		{"KW nil value", func() error {
			_, err := oracle.NewKieferWolfowitz(nil, 2, oracle.KieferWolfowitzSettings{Sizes: c})
			return err
		}},
		{"KW dim 0", func() error {
			_, err := oracle.NewKieferWolfowitz(f, 0, oracle.KieferWolfowitzSettings{Sizes: c})
			return err
		}},
		{"KW nil sizes", func() error {
			_, err := oracle.NewKieferWolfowitz(f, 2, oracle.KieferWolfowitzSettings{})
			return err
		}},
		{"KW negative workers", func() error {
			_, err := oracle.NewKieferWolfowitz(f, 2, oracle.KieferWolfowitzSettings{Sizes: c, Workers: -1})
			return err
		}},
		{"KW c ≤ 0 in PowerSizes", func() error {
			_, err := oracle.NewKieferWolfowitz(f, 2, oracle.KieferWolfowitzSettings{Sizes: schedule.PowerSizes{Scale: 0}})
			return err
		}},
		{"SPSA negative perturbations", func() error {
			_, err := oracle.NewSPSA(f, 2, oracle.SPSASettings{Sizes: c, Perturbations: -2})
			return err
		}},
		{"SPSA CRN with one measurement", func() error {
			_, err := oracle.NewSPSA(f, 2, oracle.SPSASettings{Sizes: c, OneMeasurement: true, CommonRandomNumbers: true})
			return err
		}},
		{"SPSA c < 0 in PowerSizes", func() error {
			_, err := oracle.NewSPSA(f, 2, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: -1}})
			return err
		}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			if err := tc.err(); !errors.Is(err, oracle.ErrSettings) {
				t.Errorf("error = %v, want ErrSettings", err)
			}
		})
	}
}

func TestGradientFreeBadMeasurements(t *testing.T) {
	c := schedule.PowerSizes{Scale: 1, Exponent: 0.101}
	// fails returns a Value that misbehaves (in the given way) at every
	// point whose coordinate 1 is below −0.5: with x = 0 and c = 1 those are
	// KW's measurement at x − c·e_1 (number 4 of 6, index 3) and, for SPSA,
	// the side where Δ_1 is negative.
	fails := func(how string) oracle.Value {
		return oracle.ValueFunc(func(x []float64, _ *rand.Rand) (float64, error) {
			if x[1] < -0.5 {
				switch how {
				case "nan":
					return math.NaN(), nil
				case "inf":
					return math.Inf(-1), nil
				case "error":
					return 0, errBoom
				case "panic":
					panic("simulation crashed")
				}
			}
			return x[0], nil
		})
	}
	wantErr := map[string]error{"nan": oracle.ErrNotFinite, "inf": oracle.ErrNotFinite, "error": errBoom, "panic": oracle.ErrPanic}
	for _, how := range []string{"nan", "inf", "error", "panic"} {
		for _, workers := range []int{1, 2} {
			t.Run(fmt.Sprintf("%s/workers=%d", how, workers), func(t *testing.T) {
				kw, _ := oracle.NewKieferWolfowitz(fails(how), 3, oracle.KieferWolfowitzSettings{Sizes: c, Workers: workers})
				sp, _ := oracle.NewSPSA(fails(how), 3, oracle.SPSASettings{Sizes: c, Workers: workers, Perturbations: 2})
				for name, g := range map[string]oracle.Gradient{"KW": kw, "SPSA": sp} {
					dst := []float64{7, 7, 7}
					err := g.Measure(dst, []float64{0, 0, 0}, rand.New(rand.NewPCG(1, 1)))
					if !errors.Is(err, wantErr[how]) {
						t.Fatalf("%s: error = %v, want %v", name, err, wantErr[how])
					}
					if dst[0] != 7 || dst[1] != 7 || dst[2] != 7 {
						t.Errorf("%s: dst = %v after a failed measurement, want it untouched", name, dst)
					}
					if name == "KW" {
						// The lowest-numbered failure is reported whatever the
						// worker count.
						if want := "measurement 4 of 6, at x − c_0·e_1"; !strings.Contains(err.Error(), want) {
							t.Errorf("KW: error %q does not name %q", err, want)
						}
					}
					if how == "panic" {
						var pe *oracle.PanicError
						if !errors.As(err, &pe) || pe.Value != "simulation crashed" || len(pe.Stack) == 0 {
							t.Errorf("%s: error %v is not a *PanicError carrying the value and stack", name, err)
						}
					}
				}
			})
		}
	}
}

func TestGradientFreeBadSizeAndDimension(t *testing.T) {
	f := oracle.ValueFunc(busyValue)
	for _, v := range []float64{0, -1, math.NaN(), math.Inf(1)} {
		sizes := schedule.SizesFunc(func(k int) float64 {
			if k >= 3 {
				return v
			}
			return 1
		})
		kw, _ := oracle.NewKieferWolfowitz(f, 2, oracle.KieferWolfowitzSettings{Sizes: sizes})
		sp, _ := oracle.NewSPSA(f, 2, oracle.SPSASettings{Sizes: sizes})
		for name, g := range map[string]oracle.Gradient{"KW": kw, "SPSA": sp} {
			dst := []float64{5, 5}
			g.(oracle.StepAware).SetStep(2)
			if err := g.Measure(dst, []float64{0, 0}, rand.New(rand.NewPCG(1, 1))); err != nil {
				t.Fatalf("%s: step 2: %v", name, err)
			}
			dst = []float64{5, 5}
			g.(oracle.StepAware).SetStep(3)
			err := g.Measure(dst, []float64{0, 0}, rand.New(rand.NewPCG(1, 1)))
			if !errors.Is(err, oracle.ErrSize) || !strings.Contains(err.Error(), "c_3") {
				t.Errorf("%s: c_3 = %v: error = %v, want ErrSize naming c_3", name, v, err)
			}
			if dst[0] != 5 || dst[1] != 5 {
				t.Errorf("%s: dst changed on error", name)
			}
		}
	}
	kw, _ := oracle.NewKieferWolfowitz(f, 2, oracle.KieferWolfowitzSettings{Sizes: schedule.PowerSizes{Scale: 1}})
	sp, _ := oracle.NewSPSA(f, 2, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 1}})
	for name, g := range map[string]oracle.Gradient{"KW": kw, "SPSA": sp} {
		if err := g.Measure(make([]float64, 2), make([]float64, 3), rand.New(rand.NewPCG(1, 1))); !errors.Is(err, oracle.ErrDimension) {
			t.Errorf("%s: x of length 3: error = %v, want ErrDimension", name, err)
		}
		if err := g.Measure(make([]float64, 1), make([]float64, 2), rand.New(rand.NewPCG(1, 1))); !errors.Is(err, oracle.ErrDimension) {
			t.Errorf("%s: dst of length 1: error = %v, want ErrDimension", name, err)
		}
	}
}

func TestPilotGradientSize(t *testing.T) {
	// For f = b·x without noise, |ĝ_i| = |b·Δ| exactly (Δ_i = ±1); with
	// b = (3, 0) that is 3 for every coordinate and repetition.
	f := &linear{b: []float64{3, 0}}
	got, err := oracle.PilotGradientSize(f, []float64{1, 1}, 0.1, 5, rand.New(rand.NewPCG(1, 2)))
	if err != nil || math.Abs(got-3) > 1e-12 {
		t.Errorf("PilotGradientSize = %v, %v; want 3", got, err)
	}
	if _, err := oracle.PilotGradientSize(f, []float64{1, 1}, 0, 5, rand.New(rand.NewPCG(1, 2))); !errors.Is(err, oracle.ErrSize) {
		t.Errorf("c = 0: error = %v, want ErrSize", err)
	}
	if _, err := oracle.PilotGradientSize(f, []float64{1, 1}, 1, 0, rand.New(rand.NewPCG(1, 2))); !errors.Is(err, oracle.ErrSettings) {
		t.Errorf("reps = 0: error = %v, want ErrSettings", err)
	}
}

var errBoom = errors.New("simulation failed")

func TestSPSAPerturbationIsSymmetricBernoulli(t *testing.T) {
	// With f = x_0 and no noise, ĝ_i = Δ_0·Δ_i: ĝ_0 = 1 always and, for
	// i ≠ 0, ĝ_i = ±1 with probability 1/2 each if Δ is symmetric
	// Bernoulli (Spall 1992). Over n = 4000 draws the share of +1 is within
	// 5·0.5/√n ≈ 0.04 of 1/2 (probability of a miss 6e-7 per coordinate).
	// p = 70 spans two 64-bit words of signs.
	const p, n = 70, 4000
	f := &linear{b: append([]float64{1}, make([]float64, p-1)...)}
	g, _ := oracle.NewSPSA(f, p, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.25}})
	rng := rand.New(rand.NewPCG(8, 9))
	x, dst := make([]float64, p), make([]float64, p)
	plus := make([]int, p)
	for range n {
		if err := g.Measure(dst, x, rng); err != nil {
			t.Fatal(err)
		}
		if math.Abs(dst[0]-1) > 1e-12 {
			t.Fatalf("ĝ_0 = %v, want 1", dst[0])
		}
		for i, v := range dst {
			if math.Abs(math.Abs(v)-1) > 1e-12 {
				t.Fatalf("ĝ_%d = %v, want ±1", i, v)
			}
			if v > 0 {
				plus[i]++
			}
		}
	}
	tol := 5 * 0.5 / math.Sqrt(n)
	for i := 1; i < p; i++ {
		if share := float64(plus[i]) / n; math.Abs(share-0.5) > tol {
			t.Errorf("coordinate %d: share of +1 = %v, want 0.5 ± %.3g", i, share, tol)
		}
	}
}
