package noisycheck_test

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa/noisycheck"
)

// TestFalseAlarms checks the stated false-alarm probability on correct
// claims: the expectation π of piHit (closed form) over 100 seeds. At
// Level 0.999 the number of mismatches is about Poisson(0.1); we accept at
// most 1 (P(Poisson(0.1) ≥ 2) ≈ 0.005). Inconclusive runs would be a
// failure of the helper at this tolerance and budget, so none are accepted.
func TestFalseAlarms(t *testing.T) {
	mismatch := 0
	for seed := range uint64(100) {
		err := noisycheck.CheckMean(piHit, math.Pi, 0.05, noisycheck.Options{Seed: seed})
		switch {
		case err == nil:
		case errors.Is(err, noisycheck.ErrMismatch):
			mismatch++
			t.Logf("seed %d: %v", seed, err)
		default:
			t.Errorf("seed %d: %v", seed, err)
		}
	}
	if mismatch > 1 {
		t.Errorf("%d of 100 correct claims rejected, want at most 1", mismatch)
	}
}

// TestWrongClaims: a claim off by 5 tolerances is rejected with a message
// that names the estimate, the interval and the steps, and a root check of
// a two-dimensional noisy linear field finds its known root.
func TestWrongClaims(t *testing.T) {
	err := noisycheck.CheckMean(piHit, math.Pi+0.25, 0.05, noisycheck.Options{Seed: 3})
	if !errors.Is(err, noisycheck.ErrMismatch) {
		t.Fatalf("wrong claim: %v, want ErrMismatch", err)
	}
	for _, s := range []string{"estimate", "interval", "steps"} {
		if !strings.Contains(err.Error(), s) {
			t.Errorf("message %q lacks %q", err, s)
		}
	}
	h := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
		dst[0] = x[0] - 1 + rng.NormFloat64()
		dst[1] = 2*(x[1]+3) + rng.NormFloat64()
		return nil
	})
	if err := noisycheck.CheckRoot(h, []float64{1, -3}, 0.05, noisycheck.Options{Seed: 4}); err != nil {
		t.Errorf("correct root: %v", err)
	}
	if err := noisycheck.CheckRoot(h, []float64{1, -2.5}, 0.05, noisycheck.Options{Seed: 4}); !errors.Is(err, noisycheck.ErrMismatch) {
		t.Errorf("wrong root: %v, want ErrMismatch", err)
	}
	if err := noisycheck.CheckMean(piHit, math.Pi, 0, noisycheck.Options{}); err == nil {
		t.Errorf("tolerance 0 accepted")
	}
}
