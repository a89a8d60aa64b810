package sa_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// towards is the gradient field of ½‖x − t‖² plus N(0, noise²) noise.
func towards(t []float64, noise float64) oracle.FieldFunc {
	return func(dst, x []float64, rng *rand.Rand) error {
		for i := range x {
			dst[i] = x[i] - t[i] + noise*rng.NormFloat64()
		}
		return nil
	}
}

func norm(x []float64) float64 {
	s := 0.0
	for _, v := range x {
		s += v * v
	}
	return math.Sqrt(s)
}

func TestBallProject(t *testing.T) {
	// The Euclidean projection onto {‖x − c‖ ≤ r} is c + r(x − c)/‖x − c‖
	// outside and the identity inside (common practice; e.g. Boyd &
	// Vandenberghe 2004, Convex Optimization, from memory).
	b := sa.Ball{Center: []float64{1, 1}, Radius: 2}
	x := []float64{1 + 3, 1 + 4} // distance 5 from the center
	if !b.Project(x) || math.Abs(x[0]-(1+1.2)) > 1e-15 || math.Abs(x[1]-(1+1.6)) > 1e-15 {
		t.Errorf("Project((4, 5)) = %v, want (2.2, 2.6) and true", x)
	}
	if !b.Contains(x) {
		t.Errorf("Contains(%v) = false right after Project", x)
	}
	y := []float64{1.5, 0}
	if b.Project(y) || y[0] != 1.5 || y[1] != 0 {
		t.Errorf("Project of an inside point moved it to %v", y)
	}
	if b.Contains([]float64{1, 3.001}) {
		t.Error("Contains accepts a point 0.001 outside")
	}
	// Nil center is the origin; huge coordinates do not overflow the norm.
	z := []float64{1e300, -1e300}
	if !(sa.Ball{Radius: 1}).Project(z) || math.Abs(norm(z)-1) > 1e-15 {
		t.Errorf("projection of (1e300, −1e300) onto the unit ball = %v", z)
	}
}

func TestBallAndSetDriven(t *testing.T) {
	ctx := context.Background()
	s := sa.Settings{Gain: schedule.Power{Scale: 1, Exponent: 0.7}, MaxSteps: 3000, Seed: 1}
	target := []float64{3, 4}
	// Minimising ½‖x − t‖² over the unit ball gives t/‖t‖ = (0.6, 0.8).
	// Tolerance: on the sphere at angle θ from t the tangential gradient is
	// ‖t‖·sin θ ≈ 5θ, a restoring slope H = 5; the stationary variance of an
	// iterate with gain a_k and tangential noise sd σ = 0.1 is
	// a_k·σ²/(2H) (the classical constant-gain approximation, common
	// practice), ≈ 0.0037·0.01/10 at k = 3000: sd ≈ 0.002, so 0.01 is 5 sd.
	s.Projection = sa.Ball{Radius: 1}
	r, err := sa.RobbinsMonro(ctx, towards(target, 0.1), []float64{0, 0}, s)
	if err != nil {
		t.Fatal(err)
	}
	if !r.Active || math.Abs(r.X[0]-0.6) > 0.01 || math.Abs(r.X[1]-0.8) > 0.01 || norm(r.X) > 1+1e-12 {
		t.Errorf("ball: X = %v, Active %v; want ≈ (0.6, 0.8) on the sphere, active", r.X, r.Active)
	}
	// Target inside: the constraint is not active at the end.
	r, err = sa.RobbinsMonro(ctx, towards([]float64{0.1, 0.2}, 0.01), []float64{0.5, 0.5}, s)
	if err != nil || r.Active {
		t.Errorf("ball, interior optimum: Active = %v, err %v; want false", r.Active, err)
	}
	// A caller's half-plane x_0 + x_1 ≤ 1: the projection of (3, 4) is
	// (0, 1). Along the line the slope is 1 and the tangential noise sd 0.1,
	// so the Polyak–Ruppert average of 3000 iterates has sd ≈ 0.1/√3000 ≈
	// 0.002 (Polyak & Juditsky 1992); the transient from the start adds
	// about 1/3000. 0.01 is about 4 sd.
	half := sa.Set{
		In: func(x []float64) bool { return x[0]+x[1] <= 1+1e-12 },
		Onto: func(x []float64) {
			d := (x[0] + x[1] - 1) / 2
			x[0] -= d
			x[1] -= d
		},
	}
	s.Projection = half
	r, err = sa.RobbinsMonro(ctx, towards(target, 0.1), []float64{0, 0}, s)
	if err != nil || !r.Active || math.Abs(r.Estimate()[0]) > 0.01 || math.Abs(r.Estimate()[1]-1) > 0.01 {
		t.Errorf("half-plane: estimate %v, Active %v, err %v; want ≈ (0, 1), active", r.Estimate(), r.Active, err)
	}
}

func TestActiveWithBox(t *testing.T) {
	ctx := context.Background()
	box := sa.Box{Lower: []float64{-1, -1}, Upper: []float64{1, 1}}
	s := sa.Settings{Gain: schedule.Harmonic(0.5), MaxSteps: 200, Projection: box}
	// Target (5, 0): x_0 is pushed against its upper bound every step.
	r, err := sa.RobbinsMonro(ctx, towards([]float64{5, 0}, 0), []float64{0, 0.5}, s)
	if err != nil || !r.Active || r.X[0] != 1 {
		t.Errorf("box with outside target: X %v, Active %v, err %v", r.X, r.Active, err)
	}
	r, err = sa.RobbinsMonro(ctx, towards([]float64{0.5, 0}, 0), []float64{0, 0.5}, s)
	if err != nil || r.Active {
		t.Errorf("box with inside target: Active %v, err %v", r.Active, err)
	}
	// A failing step leaves Active as it was for the last accepted iterate.
	calls := 0
	f := oracle.FieldFunc(func(dst, x []float64, _ *rand.Rand) error {
		calls++
		if calls == 50 {
			return errors.New("sensor offline")
		}
		dst[0], dst[1] = x[0]-5, x[1]
		return nil
	})
	r, err = sa.RobbinsMonro(ctx, f, []float64{0, 0.5}, s)
	if err == nil || r.Steps != 49 || !r.Active {
		t.Errorf("failed step: Steps %d, Active %v, err %v; want 49 steps, active", r.Steps, r.Active, err)
	}
}

// badProjection returns what the caller's Project does.
type badProjection func(x []float64) bool

func (p badProjection) Project(x []float64) bool { return p(x) }

func TestBadProjectionDetected(t *testing.T) {
	ctx := context.Background()
	s := sa.Settings{Gain: schedule.Harmonic(0.5), MaxSteps: 100}
	// The half-plane x_0 ≤ 0.5 with an Onto that forgets to move x: the
	// first step that leaves the set (x_0 passes 0.5 on the way to 2) is
	// rejected.
	lazy := sa.Set{In: func(x []float64) bool { return x[0] <= 0.5 }, Onto: func([]float64) {}}
	s.Projection = lazy
	r, err := sa.RobbinsMonro(ctx, towards([]float64{2}, 0), []float64{0}, s)
	var se *sa.StepError
	if !errors.Is(err, sa.ErrProjection) || !errors.As(err, &se) || r.X[0] > 0.5 || r.Steps != se.Step {
		t.Errorf("lazy Onto: err %v, X %v, Steps %d; want ErrProjection, last good iterate inside", err, r.X, r.Steps)
	}
	// An Onto that writes NaN.
	s.Projection = sa.Set{In: lazy.In, Onto: func(x []float64) { x[0] = math.NaN() }}
	r, err = sa.RobbinsMonro(ctx, towards([]float64{2}, 0), []float64{0}, s)
	if !errors.Is(err, sa.ErrProjection) || math.IsNaN(r.X[0]) {
		t.Errorf("NaN Onto: err %v, X %v; want ErrProjection and a finite X", err, r.X)
	}
	// A plain Projection without a membership test is still checked for
	// non-finite output.
	s.Projection = badProjection(func(x []float64) bool {
		if x[0] > 1 {
			x[0] = math.Inf(1)
			return true
		}
		return false
	})
	r, err = sa.RobbinsMonro(ctx, towards([]float64{2}, 0), []float64{0}, s)
	if !errors.Is(err, sa.ErrProjection) || math.IsInf(r.X[0], 0) {
		t.Errorf("Inf projection: err %v, X %v; want ErrProjection and a finite X", err, r.X)
	}
	// Invalid Ball and Set settings are rejected before the first step.
	for name, p := range map[string]sa.Projection{
		"ball radius 0":     sa.Ball{Radius: 0},
		"ball radius NaN":   sa.Ball{Radius: math.NaN()},
		"ball center NaN":   sa.Ball{Center: []float64{math.NaN()}, Radius: 1},
		"set without In":    sa.Set{Onto: func([]float64) {}},
		"set without Onto":  sa.Set{In: func([]float64) bool { return true }},
		"ball center dim 2": sa.Ball{Center: []float64{0, 0}, Radius: 1},
	} {
		s.Projection = p
		r, err := sa.RobbinsMonro(ctx, towards([]float64{2}, 0), []float64{0}, s)
		want := sa.ErrSettings
		if name == "ball center dim 2" {
			want = sa.ErrDimension
		}
		if !errors.Is(err, want) || r.Reason != sa.NotStarted {
			t.Errorf("%s: err %v, Reason %v; want %v before the first step", name, err, r.Reason, want)
		}
	}
}

func TestActiveStaysWhileIterateRests(t *testing.T) {
	// Steps 0–9 push x against the bound 1 (projected), steps 10–14 measure
	// 0 (the iterate rests on the bound: still active), and from step 15
	// the measurement pulls inward (no longer active).
	box := sa.Box{Lower: []float64{-1}, Upper: []float64{1}}
	field := func() oracle.FieldFunc {
		calls := 0
		return func(dst, x []float64, _ *rand.Rand) error {
			switch {
			case calls < 10:
				dst[0] = -5
			case calls < 15:
				dst[0] = 0
			default:
				dst[0] = 1
			}
			calls++
			return nil
		}
	}
	for _, tc := range []struct {
		steps     int
		active    bool
		projected int
	}{{10, true, 9}, {15, true, 9}, {16, false, 9}} {
		r, err := sa.RobbinsMonro(context.Background(), field(), []float64{0}, sa.Settings{Gain: schedule.Constant(0.2), MaxSteps: tc.steps, Projection: box})
		if err != nil || r.Active != tc.active || r.Projected != tc.projected {
			t.Errorf("after %d steps: Active %v, Projected %d, err %v; want %v, %d", tc.steps, r.Active, r.Projected, err, tc.active, tc.projected)
		}
	}
}
