package sa_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"sync/atomic"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// diagQuadratic is f(x) = ½·Σ λ_i (x_i − 1)² plus N(0, sd²) noise.
func diagQuadratic(lam []float64, sd float64) oracle.ValueFunc {
	return func(x []float64, rng *rand.Rand) (float64, error) {
		l := 0.0
		for i, v := range x {
			l += 0.5 * lam[i] * (v - 1) * (v - 1)
		}
		return l + sd*rng.NormFloat64(), nil
	}
}

// TestCalibrationGradientFree: a nil gain with the SPSA and
// Kiefer–Wolfowitz adapters gives the robust constant step of
// calibrateGradientFree (Nemirovski, Juditsky, Lan & Shapiro 2009), with
// the pilot (M̂ at x0 and again at the Cauchy point) counted in the
// budget and within its share, the curvature along the gradient
// between the smallest and the largest eigenvalue, the stability cap
// respected, and a mean loss within the robust bound.
//
// The loss is ½Σλ_i(x_i − 1)², λ = (0.5, 1, 2, 4), x0 = 0, noise sd 0.1.
// The second differences of the pilot share one stream, so additive noise
// cancels and λ̂ is the Rayleigh quotient uᵀHu of a unit vector, in
// [λ_min, λ_max] up to rounding. The bound (Nemirovski et al. 2009,
// SIAM J. Optim. 19(4), §2.2): averaged iterates of the constant step γ
// over N steps from a start at distance D = ‖x0 − x*‖ = 2 have
// E[f(x̄)] − f* ≤ (D² + γ²M²N)/(2γN), M² ≥ E‖ĝ‖² along the path; M² is
// taken as 2× the exact E‖ĝ‖² at x0 (‖∇f‖ is largest at x0 on the way to
// x* = 1; the factor is a margin for iterates that stray past it). The
// mean over 10 seeds is checked against the bound; the bound is loose
// here (measured: the mean loss is about 1/30 of it), so the check has a
// wide margin, but it is a bound from the paper, not a tuned number.
func TestCalibrationGradientFree(t *testing.T) {
	lam := []float64{0.5, 1, 2, 4}
	const p, budget, reps = 4, 20000, 10
	f := diagQuadratic(lam, 0.1)
	x0 := make([]float64, p)
	for _, method := range []string{"SPSA", "KW"} {
		per, m := 2, 1.0+float64(p-1)
		if method == "KW" {
			per, m = 2*p, 1
		}
		mean, bound := 0.0, 0.0
		for i := range reps {
			g, err := newGradientFree(method, f, p, schedule.PowerSizes{Scale: 0.1, Exponent: schedule.SpallGamma})
			if err != nil {
				t.Fatal(err)
			}
			r, err := sa.RobbinsMonro(context.Background(), g, x0, sa.Settings{MaxMeasurements: budget, Seed: uint64(i)})
			if err != nil {
				t.Fatalf("%s: %v", method, err)
			}
			c := r.Calibration
			if c == nil {
				t.Fatalf("%s: nil gain, no Calibration", method)
			}
			if !strings.Contains(c.Source, "Nemirovski") || c.How == "" || len(c.Pilot) == 0 {
				t.Errorf("%s: Calibration lacks source, sentence or pilot: %+v", method, c)
			}
			// The pilot, its second M̂ at the Cauchy point included, stays
			// within its share of the budget (pilotShare, 10%).
			if !strings.Contains(c.How, "Cauchy point") || c.PilotMeasurements > budget/10 {
				t.Errorf("%s: pilot of %d measurements (at most %d) without M̂ at the Cauchy point: %s", method, c.PilotMeasurements, budget/10, c.How)
			}
			gamma, ok := c.Gain.(schedule.Constant)
			if !ok || r.Settings.Gain != c.Gain {
				t.Fatalf("%s: gain %v (Result.Settings.Gain %v): want the same schedule.Constant", method, c.Gain, r.Settings.Gain)
			}
			if !(c.Slope >= lam[0]*(1-1e-6) && c.Slope <= lam[3]*(1+1e-6)) {
				t.Errorf("%s: curvature along the gradient λ̂ = %v, want within [%v, %v]", method, c.Slope, lam[0], lam[3])
			}
			if !(float64(gamma) > 0 && float64(gamma) <= 1/(m*c.Slope)*(1+1e-12)) {
				t.Errorf("%s: γ = %v, want in (0, 1/(m·λ̂) = %v]", method, gamma, 1/(m*c.Slope))
			}
			if r.Measurements > budget || r.Measurements != c.PilotMeasurements+per*r.Steps || budget-r.Measurements >= per {
				t.Errorf("%s: %d measurements = pilot %d + %d steps × %d: want the budget %d used and not exceeded", method, r.Measurements, c.PilotMeasurements, r.Steps, per, budget)
			}
			// M̂ from the How sentence is not exposed; recompute M² as
			// E‖ĝ‖² at x0: Kiefer–Wolfowitz ‖g‖² + p·2sd²/(2c)², SPSA
			// p·‖g‖² + the same noise term, c = 0.1, ‖g(x0)‖² = Σλ².
			g2, noise := 0.0, float64(p)*2*0.01/0.04
			for _, l := range lam {
				g2 += l * l
			}
			m2 := g2 + noise
			if method == "SPSA" {
				m2 = float64(p)*g2 + noise
			}
			n := float64(r.Steps)
			bound += (4 + float64(gamma)*float64(gamma)*2*m2*n) / (2 * float64(gamma) * n) / reps
			mean += quadLoss(lam, r.Estimate()) / reps
		}
		t.Logf("%s: mean loss %.3g over %d seeds, robust bound %.3g", method, mean, reps, bound)
		if !(mean <= bound) {
			t.Errorf("%s: mean loss %.3g exceeds the robust bound %.3g", method, mean, bound)
		}
	}
}

func quadLoss(lam, x []float64) float64 {
	l := 0.0
	for i, v := range x {
		l += 0.5 * lam[i] * (v - 1) * (v - 1)
	}
	return l
}

// TestCalibrationGradientFreeNoBudget: without a step or measurement
// budget (the run ends when its context is cancelled) the horizon is
// unknown and the gain is the anytime form (D̂/M̂)/√(k+1+A).
func TestCalibrationGradientFreeNoBudget(t *testing.T) {
	lam := []float64{0.5, 1, 2, 4}
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	var count atomic.Int64
	inner := diagQuadratic(lam, 0.1)
	f := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		if count.Add(1) == 4000 {
			cancel()
		}
		return inner(x, rng)
	})
	g, err := oracle.NewSPSA(f, 4, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.1, Exponent: schedule.SpallGamma}})
	if err != nil {
		t.Fatal(err)
	}
	r, err := sa.RobbinsMonro(ctx, g, make([]float64, 4), sa.Settings{MaxSteps: sa.NoLimit, Seed: 3})
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("err %v, want context.Canceled", err)
	}
	pw, ok := r.Calibration.Gain.(schedule.Power)
	if !ok || pw.Exponent != 0.5 || !(pw.Scale > 0) {
		t.Errorf("no budget: gain %v, want Power with exponent 0.5", r.Calibration.Gain)
	}
	// The first step stays under the stability cap 1/(m·λ̂), m = p = 4.
	if a0 := pw.Gain(0); a0 > 1/(4*r.Calibration.Slope)*(1+1e-9) {
		t.Errorf("a_0 = %v above the cap %v", a0, 1/(4*r.Calibration.Slope))
	}
	if quadLoss(lam, r.Estimate()) > quadLoss(lam, make([]float64, 4)) {
		t.Errorf("the run ended above its starting loss: %v", r.Estimate())
	}
}

// TestCalibrationGradientFreeFailures: a Value that fails during the pilot
// (at x0 or at the Cauchy point) fails the run with its error, marked as
// the pilot's, and the Result carries the Calibration so far; a cancelled context stops the pilot; the
// second differences never probe beyond MaxAbs, nor where the projection
// would move the point.
func TestCalibrationGradientFreeFailures(t *testing.T) {
	lam := []float64{0.5, 1, 2, 4}
	inner := diagQuadratic(lam, 0.1)
	bad := errors.New("simulator offline")
	var n atomic.Int64
	f := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		if n.Add(1) > 50 {
			return 0, bad
		}
		return inner(x, rng)
	})
	c := schedule.PowerSizes{Scale: 0.1, Exponent: schedule.SpallGamma}
	g, err := oracle.NewSPSA(f, 4, oracle.SPSASettings{Sizes: c})
	if err != nil {
		t.Fatal(err)
	}
	r, err := sa.RobbinsMonro(context.Background(), g, make([]float64, 4), sa.Settings{MaxMeasurements: 10000})
	if !errors.Is(err, bad) || !strings.Contains(err.Error(), "calibration pilot") || r.Calibration == nil || r.Steps != 0 {
		t.Errorf("failing Value: err %v, Calibration %v, %d steps; want the Value's error from the pilot, a Calibration and no step", err, r.Calibration, r.Steps)
	}
	// A failure during the second part of the pilot (M̂ at the Cauchy
	// point: with 10 000 measurements the pilot takes 100 gradient
	// estimates, 200 values, at x0 and 24 values of second differences
	// first) is reported as such, with the pilot's completed calls counted.
	var n2 atomic.Int64
	f2 := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		if n2.Add(1) > 300 {
			return 0, bad
		}
		return inner(x, rng)
	})
	g1, err := oracle.NewSPSA(f2, 4, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.1, Exponent: schedule.SpallGamma}})
	if err != nil {
		t.Fatal(err)
	}
	r, err = sa.RobbinsMonro(context.Background(), g1, make([]float64, 4), sa.Settings{MaxMeasurements: 10000})
	// The 301st value is the first of a call (200 + 24 values before, 2
	// a call), so the 300 values taken are all counted.
	if !errors.Is(err, bad) || !strings.Contains(err.Error(), "Cauchy point") || r.Calibration == nil || r.Steps != 0 ||
		r.Calibration.PilotMeasurements != 300 || r.Measurements != 300 {
		t.Errorf("failing Value at the Cauchy point: err %v, Calibration %+v, %d steps, %d measurements", err, r.Calibration, r.Steps, r.Measurements)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	g2, _ := oracle.NewKieferWolfowitz(inner, 4, oracle.KieferWolfowitzSettings{Sizes: c})
	if _, err := sa.RobbinsMonro(ctx, g2, make([]float64, 4), sa.Settings{MaxMeasurements: 10000}); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled context: err %v, want context.Canceled", err)
	}
	// With noise that common random numbers do not cancel (drawn from a
	// source of the test's own), the pilot's ladder climbs towards t ≈ 1;
	// it must stop where x0 ± t·u would leave the box [−0.5, 0.5]⁴ (so
	// t < 1: ‖u‖ = 1 in 4 dimensions has an entry ≥ 1/2), and with MaxAbs
	// = 1.5 alone (x* = 1) it must take no value beyond 1.5 (the run's
	// SPSA points x ± c_k·Δ may pass MaxAbs by c_0 = 0.1, never more).
	own := rand.New(rand.NewPCG(7, 7))
	var outside atomic.Int64
	watch := oracle.ValueFunc(func(x []float64, _ *rand.Rand) (float64, error) {
		for _, v := range x {
			if math.Abs(v) > 1.6 {
				outside.Add(1)
			}
		}
		return quadLoss(lam, x) + 0.1*own.NormFloat64(), nil
	})
	g3, _ := oracle.NewSPSA(watch, 4, oracle.SPSASettings{Sizes: c})
	box := sa.Box{Lower: []float64{-0.5, -0.5, -0.5, -0.5}, Upper: []float64{0.5, 0.5, 0.5, 0.5}}
	r, err = sa.RobbinsMonro(context.Background(), g3, make([]float64, 4), sa.Settings{MaxMeasurements: 4000, Projection: box, Seed: 4})
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Calibration.Pilot) == 0 {
		t.Fatal("no pilot level inside the box")
	}
	for _, l := range r.Calibration.Pilot {
		if l.Delta >= 1 {
			t.Errorf("box: pilot level at t = %v leaves the box", l.Delta)
		}
	}
	r, err = sa.RobbinsMonro(context.Background(), g3, make([]float64, 4), sa.Settings{MaxMeasurements: 4000, MaxAbs: 1.5, Seed: 4})
	if err != nil {
		t.Fatal(err)
	}
	if k := outside.Load(); k > 0 {
		t.Errorf("%d loss values taken beyond MaxAbs + c_0", k)
	}
	t.Logf("MaxAbs: %s", r.Calibration.How)
}
