package sa

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stochroot/stochroot/schedule"
)

// TestStepShortMatchesGeneral checks the short path of core.step
// (stepShort: small dimension, no adaptive gain, no projection or a Box)
// against the general path (stepGeneral) bit for bit: two cores with the
// same settings, one of them barred from the short path, receive the same
// random measurements (with clamped moves, projection hits, zero
// measurements that leave the iterate on the boundary, steps that break
// MaxAbs, overflowing updates and non-finite entries), and after every
// step their errors, iterates, averages, counters and flags, and at the
// end their Results (error bars included), must agree to the last bit.
// The data are invented; the check compares two code paths.
func TestStepShortMatchesGeneral(t *testing.T) {
	rng := rand.New(rand.NewPCG(20261202, 1))
	configs := 300
	steps := 400
	if testing.Short() {
		configs = 60
	}
	for cfg := range configs {
		dims := []int{1, 2, 3, 8, 13, vectorKernelMin - 1}
		d := dims[rng.IntN(len(dims))]
		fast, ref, desc := shortPair(t, rng, d)
		if !fast.short {
			t.Fatalf("config %d (%s): not on the short path", cfg, desc)
		}
		ref.short = false
		for k := range steps {
			y := shortMeasurement(rng, d)
			ef := fast.step(y)
			er := ref.step(y)
			what := fmt.Sprintf("config %d (%s), step %d", cfg, desc, k)
			switch {
			case (ef == nil) != (er == nil):
				t.Fatalf("%s: errors %v and %v", what, ef, er)
			case ef != nil && ef.Error() != er.Error():
				t.Fatalf("%s: errors %q and %q", what, ef, er)
			}
			coresSame(t, what, fast, ref)
			if t.Failed() {
				return
			}
		}
		var rf, rr Result
		fast.fill(&rf)
		ref.fill(&rr)
		resultsSame(t, fmt.Sprintf("config %d (%s)", cfg, desc), rf, rr)
	}
}

// shortPair returns two cores with the same random settings at dimension d
// (a gain, a burn-in, no projection or a Box, MaxChange, MaxAbs,
// inference on or off) and their description.
func shortPair(t *testing.T, rng *rand.Rand, d int) (a, b *core, desc string) {
	t.Helper()
	var gain schedule.Schedule
	switch rng.IntN(4) {
	case 0, 1:
		gain = schedule.Constant([]float64{1e-3, 0.05, 0.5, 3}[rng.IntN(4)])
	case 2:
		gain = schedule.Constant(0) // valid, never moves
	default:
		gain = schedule.Power{Scale: 0.5, Exponent: 0.7} // the short path with a gain evaluated per step
	}
	x0 := make([]float64, d)
	var proj Projection
	if rng.IntN(4) != 0 {
		lo, hi := make([]float64, d), make([]float64, d)
		for i := range d {
			lo[i], hi[i] = -1-rng.Float64(), 1+rng.Float64()
			switch rng.IntN(6) {
			case 0:
				lo[i] = math.Inf(-1)
			case 1:
				hi[i] = math.Inf(1)
			case 2:
				lo[i], hi[i] = 0.25, 0.25 // a single point
			}
			x0[i] = math.Max(lo[i], math.Min(hi[i], rng.NormFloat64()))
		}
		proj = Box{Lower: lo, Upper: hi}
	} else {
		for i := range d {
			x0[i] = rng.NormFloat64()
		}
	}
	var mc []float64
	if rng.IntN(3) != 0 {
		mc = make([]float64, d)
		for i := range mc {
			mc[i] = []float64{0.01, 0.3, math.Inf(1), 1e308}[rng.IntN(4)]
		}
	}
	maxAbs := 0.0
	if rng.IntN(3) == 0 {
		maxAbs = 2.5
	}
	burnIn := rng.IntN(4) * 50
	infOn := rng.IntN(3) == 0
	if rng.IntN(10) == 0 {
		// Start far out, without a box: a clamp of 1e308 then overflows.
		proj = nil
		for i := range d {
			x0[i] = 1e308
		}
		maxAbs = 0
	}
	mk := func() *core {
		c := newCore(x0, gain, burnIn, proj, maxAbs)
		c.maxChange = mc
		if infOn {
			in, err := Inference{Method: MethodRandomScaling}.resolve(d, gain)
			if err != nil {
				t.Fatal(err)
			}
			c.inf = newBatchMeans(d, in)
			c.configured = true
		}
		return c
	}
	desc = fmt.Sprintf("d=%d gain=%v box=%v maxChange=%v maxAbs=%v burnIn=%d inference=%v", d, gain, proj != nil, mc, maxAbs, burnIn, infOn)
	return mk(), mk(), desc
}

// shortMeasurement returns a random measurement: mostly normal with a
// random scale, sometimes zero (the iterate stays put), huge (the update
// overflows) or with a NaN or ±Inf entry.
func shortMeasurement(rng *rand.Rand, d int) []float64 {
	y := make([]float64, d)
	scale := math.Pow(10, float64(rng.IntN(7)-3))
	kind := rng.IntN(40)
	for i := range y {
		y[i] = scale * rng.NormFloat64()
		switch kind {
		case 0:
			y[i] = 0
		case 1:
			y[i] = 1e308 * float64(1-2*rng.IntN(2)) // overflows unless a < 1
		}
	}
	switch kind {
	case 2:
		y[rng.IntN(d)] = math.NaN()
	case 3:
		y[rng.IntN(d)] = math.Inf(1 - 2*rng.IntN(2))
	}
	return y
}

// coresSame compares the state of two cores bit for bit.
func coresSame(t *testing.T, what string, a, b *core) {
	t.Helper()
	if !sameBits(a.x, b.x) {
		t.Errorf("%s: x = %v, want %v", what, a.x, b.x)
	}
	if !sameBits(a.avg[:len(a.x)], b.avg[:len(b.x)]) {
		t.Errorf("%s: avg = %v, want %v", what, a.avg, b.avg)
	}
	type counters struct {
		nAvg, steps, gainIdx, projected int
		active, limited                 bool
		lastGain                        uint64
	}
	ca := counters{a.nAvg, a.steps, a.gainIdx, a.projected, a.active, a.limited, math.Float64bits(a.lastGain)}
	cb := counters{b.nAvg, b.steps, b.gainIdx, b.projected, b.active, b.limited, math.Float64bits(b.lastGain)}
	if ca != cb {
		t.Errorf("%s: counters %+v, want %+v", what, ca, cb)
	}
	if (a.inf == nil) != (b.inf == nil) {
		t.Fatalf("%s: inference differs", what)
	}
}

// TestStepShortCovers makes sure that the random cases of
// TestStepShortMatchesGeneral reach what they are meant to: clamped moves,
// projection hits, steps kept on the boundary, and each kind of error.
func TestStepShortCovers(t *testing.T) {
	rng := rand.New(rand.NewPCG(20261202, 1))
	var limited, active, kept int
	seen := map[error]int{}
	for range 60 {
		dims := []int{1, 2, 3, 8, 13, vectorKernelMin - 1}
		d := dims[rng.IntN(len(dims))]
		c, _, _ := shortPair(t, rng, d)
		for range 400 {
			wasActive := c.active
			p := c.projected
			err := c.step(shortMeasurement(rng, d))
			for _, e := range []error{ErrNotFinite, ErrDiverged, ErrProjection} {
				if errors.Is(err, e) {
					seen[e]++
				}
			}
			if err == nil {
				if c.limited {
					limited++
				}
				if c.projected > p {
					active++
				} else if wasActive && c.active {
					kept++
				}
			}
		}
	}
	t.Logf("limited %d, projected %d, kept on the boundary %d, errors %v", limited, active, kept, seen)
	if limited == 0 || active == 0 || kept == 0 || seen[ErrNotFinite] == 0 || seen[ErrDiverged] == 0 {
		t.Errorf("cases not reached: limited %d, projected %d, kept %d, errors %v", limited, active, kept, seen)
	}
}

// TestStepShortChosen checks which cores take the short path: not with a
// Box the general path would refuse (wrong length, Lower > Upper), a Ball,
// an adaptive gain or from vectorKernelMin coordinates.
func TestStepShortChosen(t *testing.T) {
	g := schedule.Constant(0.1)
	x0 := []float64{0.5, 0.5}
	cases := []struct {
		name  string
		c     *core
		short bool
	}{
		{"no projection", newCore(x0, g, 0, nil, 0), true},
		{"Box", newCore(x0, g, 0, Box{Lower: []float64{0, 0}, Upper: []float64{1, 1}}, 0), true},
		{"Box of length 1", newCore(x0, g, 0, Box{Lower: []float64{0}, Upper: []float64{1}}, 0), false},
		{"Box with Lower > Upper", newCore(x0, g, 0, Box{Lower: []float64{0, 2}, Upper: []float64{1, 1}}, 0), false},
		{"Ball", newCore(x0, g, 0, Ball{Radius: 1}, 0), false},
		{"adaptive gain", newCore(x0, schedule.Kesten{Base: schedule.Power{Scale: 1, Exponent: 0.7}}, 0, nil, 0), false},
		{"d = vectorKernelMin", newCore(make([]float64, vectorKernelMin), g, 0, nil, 0), false},
	}
	for _, tc := range cases {
		if tc.c.short != tc.short {
			t.Errorf("%s: short = %v, want %v", tc.name, tc.c.short, tc.short)
		}
	}
}
