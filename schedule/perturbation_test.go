package schedule_test

import (
	"errors"
	"math"
	"strings"
	"testing"

	"github.com/stochroot/stochroot/schedule"
)

func TestPowerSizes(t *testing.T) {
	p := schedule.PowerSizes{Scale: 2, Exponent: 0.5}
	for k, want := range map[int]float64{0: 2, 3: 1, 15: 0.5} {
		if got := p.Size(k); math.Abs(got-want) > 1e-15 {
			t.Errorf("PowerSizes{2, 0.5}.Size(%d) = %v, want %v", k, got, want)
		}
	}
	if got := (schedule.PowerSizes{Scale: 3}).Size(1000); got != 3 {
		t.Errorf("Exponent 0: Size(1000) = %v, want 3", got)
	}
	for _, bad := range []schedule.PowerSizes{{Scale: 0}, {Scale: -1}, {Scale: math.NaN()}, {Scale: math.Inf(1)}, {Scale: 1, Exponent: -0.1}, {Scale: 1, Exponent: math.NaN()}} {
		if err := bad.Validate(); !errors.Is(err, schedule.ErrInvalid) {
			t.Errorf("%+v.Validate() = %v, want ErrInvalid", bad, err)
		}
	}
}

func TestReferenceSpallExponentsPassSPSAFailKW(t *testing.T) {
	// Spall (1998), "Implementation of the simultaneous perturbation
	// algorithm for stochastic optimization", IEEE Trans. Aerospace and
	// Electronic Systems 34(3): practical exponents α = 0.602, γ = 0.101.
	// They satisfy Spall's (1992) SPSA condition α − γ = 0.501 > 1/2 but not
	// Kiefer & Wolfowitz's (1952) Σa_k·c_k < ∞, which needs α + γ > 1.
	a := schedule.Power{Scale: 0.1, Offset: 10, Exponent: schedule.SpallAlpha}
	c := schedule.PowerSizes{Scale: 0.2, Exponent: schedule.SpallGamma}
	sp := schedule.CheckSPSA(a, c)
	kw := schedule.CheckKieferWolfowitz(a, c)
	if !sp.Convergent() || !sp.Proven {
		t.Errorf("CheckSPSA(0.602, 0.101) = %v, want proven convergent", sp)
	}
	if kw.Convergent() || kw.GainSizeSum != schedule.Fails || kw.RatioSquares != schedule.Holds || !kw.Proven {
		t.Errorf("CheckKieferWolfowitz(0.602, 0.101) = %v, want proven failure of Σa_k·c_k < ∞ only", kw)
	}
	if !strings.Contains(kw.Reason, "α + γ = 0.703") {
		t.Errorf("KW reason %q does not show α + γ", kw.Reason)
	}
	// The same sequences given as plain functions are checked numerically
	// and must reach the same verdicts, labelled as evidence.
	af := schedule.Func(a.Gain)
	cf := schedule.SizesFunc(c.Size)
	spn, kwn := schedule.CheckSPSA(af, cf), schedule.CheckKieferWolfowitz(af, cf)
	if !spn.Convergent() || spn.Proven || kwn.Convergent() || kwn.GainSizeSum != schedule.Fails || kwn.Proven {
		t.Errorf("numerical: SPSA %v; KW %v", spn, kwn)
	}
	if math.Abs(spn.GainExponent-0.602) > 1e-3 || math.Abs(spn.SizeExponent-0.101) > 1e-3 {
		t.Errorf("estimated exponents α = %v, γ = %v, want 0.602 and 0.101", spn.GainExponent, spn.SizeExponent)
	}
}

func TestJointConditionsTable(t *testing.T) {
	// Power families a_k ~ k^(−α), c_k ~ k^(−γ): KW needs α ≤ 1, γ > 0,
	// α + γ > 1, α − γ > 1/2 (Kiefer & Wolfowitz 1952 used α = 1, γ = 1/3,
	// from memory); SPSA needs 0 < α ≤ 1, γ > 0, α − γ > 1/2 (Spall 1992).
	cases := []struct {
		alpha, gamma float64
		kw, spsa     bool
	}{
		{1, 1.0 / 3, true, true},
		{1, 1.0 / 6, true, true}, // Spall's asymptotically optimal pair
		{0.602, 0.101, false, true},
		{0.55, 0.1, false, false}, // α − γ < 1/2
		{1.2, 0.1, false, false},  // Σa_k < ∞
		{0.8, 0, false, false},    // constant c
		{0.9, 0.1, false, true},   // α + γ = 1 exactly: Σ1/k diverges
		{0.95, 0.2, true, true},
	}
	for _, tc := range cases {
		a := schedule.Power{Scale: 1, Exponent: tc.alpha}
		c := schedule.PowerSizes{Scale: 1, Exponent: tc.gamma}
		for _, proven := range []bool{true, false} {
			var kw, sp schedule.Joint
			if proven {
				kw, sp = schedule.CheckKieferWolfowitz(a, c), schedule.CheckSPSA(a, c)
			} else {
				kw, sp = schedule.CheckKieferWolfowitz(schedule.Func(a.Gain), schedule.SizesFunc(c.Size)), schedule.CheckSPSA(schedule.Func(a.Gain), schedule.SizesFunc(c.Size))
			}
			if kw.Convergent() != tc.kw || sp.Convergent() != tc.spsa || kw.Proven != proven {
				t.Errorf("α = %v, γ = %v (proven %v): KW %v, SPSA %v; want %v, %v", tc.alpha, tc.gamma, proven, kw.Convergent(), sp.Convergent(), tc.kw, tc.spsa)
			}
		}
	}
	// A constant gain is not convergent for SPSA (a_k does not vanish).
	if j := schedule.CheckSPSA(schedule.Constant(0.1), schedule.PowerSizes{Scale: 1, Exponent: 0.1}); j.Convergent() || j.GainsVanish != schedule.Fails {
		t.Errorf("constant gain: %v", j)
	}
	// Sizes that reach 0, nil inputs and invalid parameters are undecided.
	for name, j := range map[string]schedule.Joint{
		"zero sizes": schedule.CheckSPSA(schedule.Harmonic(1), schedule.SizesFunc(func(int) float64 { return 0 })),
		"nil gain":   schedule.CheckKieferWolfowitz(nil, schedule.PowerSizes{Scale: 1}),
		"bad sizes":  schedule.CheckKieferWolfowitz(schedule.Harmonic(1), schedule.PowerSizes{Scale: -1}),
		"bad gain":   schedule.CheckSPSA(schedule.Power{Scale: 1, Exponent: -1}, schedule.PowerSizes{Scale: 1}),
	} {
		if j.Convergent() || j.SumDiverges != schedule.Undecided || j.Reason == "" {
			t.Errorf("%s: %v, want undecided with a reason", name, j)
		}
	}
}

func TestSpallGains(t *testing.T) {
	// Spall (1998), section III: A = 0.1·N, α = 0.602, γ = 0.101, c ≈ noise
	// sd at x₀, a such that a/(A+1)^α·|ĝ₀| is the desired first move.
	pilot := []float64{10, 12, 9, 11, 13, 9}
	mean := 64.0 / 6
	ss := 0.0
	for _, v := range pilot {
		ss += (v - mean) * (v - mean)
	}
	sd := math.Sqrt(ss / 5) // sample standard deviation (divisor n − 1)
	var gotC float64
	plan, err := schedule.SpallGains(schedule.SpallInput{
		Steps: 1000, Pilot: pilot, FirstMove: 0.5,
		GradientSize: func(c float64) (float64, error) { gotC = c; return 4, nil },
	})
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(plan.Sizes.Scale-sd) > 1e-12 || gotC != plan.Sizes.Scale || plan.Sizes.Exponent != 0.101 {
		t.Errorf("Sizes = %+v (GradientSize asked at c = %v), want c = %v, γ = 0.101", plan.Sizes, gotC, sd)
	}
	if plan.Gain.Offset != 100 || plan.Gain.Exponent != 0.602 {
		t.Errorf("Gain = %+v, want A = 100, α = 0.602", plan.Gain)
	}
	if first := plan.Gain.Gain(0) * 4; math.Abs(first-0.5) > 1e-12 {
		t.Errorf("first move a_0·|ĝ₀| = %v, want 0.5", first)
	}
	if !strings.Contains(plan.Reason, "10% of the 1000 planned steps") || !schedule.CheckSPSA(plan.Gain, plan.Sizes).Convergent() {
		t.Errorf("plan %+v: reason or SPSA conditions wrong", plan)
	}
	// A noise-free pilot needs MinSize.
	flat := []float64{3, 3, 3}
	if _, err := schedule.SpallGains(schedule.SpallInput{Steps: 10, Pilot: flat, FirstMove: 1, GradientSize: func(float64) (float64, error) { return 1, nil }}); !errors.Is(err, schedule.ErrInvalid) {
		t.Errorf("noise-free pilot without MinSize: error = %v, want ErrInvalid", err)
	}
	p2, err := schedule.SpallGains(schedule.SpallInput{Steps: 10, Pilot: flat, FirstMove: 1, MinSize: 0.01, GradientSize: func(float64) (float64, error) { return 1, nil }})
	if err != nil || p2.Sizes.Scale != 0.01 || !strings.Contains(p2.Reason, "MinSize") {
		t.Errorf("noise-free pilot with MinSize: %+v, %v", p2, err)
	}
	ok := func(float64) (float64, error) { return 1, nil }
	for name, in := range map[string]schedule.SpallInput{
		"steps 0":       {Steps: 0, Pilot: pilot, FirstMove: 1, GradientSize: ok},
		"one pilot":     {Steps: 10, Pilot: pilot[:1], FirstMove: 1, GradientSize: ok},
		"NaN pilot":     {Steps: 10, Pilot: []float64{1, math.NaN()}, FirstMove: 1, GradientSize: ok},
		"move 0":        {Steps: 10, Pilot: pilot, FirstMove: 0, GradientSize: ok},
		"nil gradient":  {Steps: 10, Pilot: pilot, FirstMove: 1},
		"zero gradient": {Steps: 10, Pilot: pilot, FirstMove: 1, GradientSize: func(float64) (float64, error) { return 0, nil }},
		"bad MinSize":   {Steps: 10, Pilot: pilot, FirstMove: 1, GradientSize: ok, MinSize: -1},
	} {
		if _, err := schedule.SpallGains(in); !errors.Is(err, schedule.ErrInvalid) {
			t.Errorf("%s: error = %v, want ErrInvalid", name, err)
		}
	}
	boom := errors.New("pilot failed")
	if _, err := schedule.SpallGains(schedule.SpallInput{Steps: 10, Pilot: pilot, FirstMove: 1, GradientSize: func(float64) (float64, error) { return 0, boom }}); !errors.Is(err, boom) {
		t.Errorf("GradientSize error: %v, want it wrapped", err)
	}
}
