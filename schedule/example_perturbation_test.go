package schedule_test

import (
	"fmt"

	"github.com/stochroot/stochroot/schedule"
)

// Spall's practical exponents satisfy the SPSA conditions but not the
// Kiefer–Wolfowitz ones.
func ExampleCheckSPSA() {
	a := schedule.Power{Scale: 0.5, Offset: 100, Exponent: schedule.SpallAlpha}
	c := schedule.PowerSizes{Scale: 0.1, Exponent: schedule.SpallGamma}
	fmt.Println("SPSA:", schedule.CheckSPSA(a, c).Convergent())
	kw := schedule.CheckKieferWolfowitz(a, c)
	fmt.Println("Kiefer–Wolfowitz:", kw.Convergent(), "; Σa_k·c_k < ∞", kw.GainSizeSum)
	// Output:
	// SPSA: true
	// Kiefer–Wolfowitz: false ; Σa_k·c_k < ∞ fails
}

func ExampleSpallGains() {
	plan, err := schedule.SpallGains(schedule.SpallInput{
		Steps:     2000,
		Pilot:     []float64{10.2, 9.7, 10.4, 9.9, 10.1, 9.6}, // f̃(x₀) measured six times
		FirstMove: 0.5,
		// Typically oracle.PilotGradientSize; here a fixed value.
		GradientSize: func(c float64) (float64, error) { return 2.5, nil },
	})
	if err != nil {
		panic(err)
	}
	fmt.Printf("a = %.4g, A = %.4g, α = %.4g, c = %.4g, γ = %.4g\n",
		plan.Gain.Scale, plan.Gain.Offset, plan.Gain.Exponent, plan.Sizes.Scale, plan.Sizes.Exponent)
	// Output: a = 4.87, A = 200, α = 0.602, c = 0.3061, γ = 0.101
}
