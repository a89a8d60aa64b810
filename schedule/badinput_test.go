package schedule_test

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// nilSchedule is a user schedule type held as a typed nil pointer.
type nilSchedule struct{ a float64 }

func (s *nilSchedule) Gain(int) float64 { return s.a }

// panicText runs f and returns the text of its panic ("" if none).
func panicText(f func()) (msg string) {
	defer func() {
		if p := recover(); p != nil {
			msg = fmt.Sprint(p)
		}
	}()
	f()
	return ""
}

// Validate of every schedule, size sequence and function adapter refuses
// bad parameters with ErrInvalid and a message naming the field.
func TestValidateBadInputTable(t *testing.T) {
	nan, inf, huge := math.NaN(), math.Inf(1), math.MaxFloat64
	for _, tc := range []struct {
		v     schedule.Validator
		field string // in the message; "" for a valid value
	}{
		{schedule.Constant(nan), "Constant"},
		{schedule.Constant(inf), "Constant"},
		{schedule.Constant(-inf), "Constant"},
		{schedule.Constant(-1), "Constant"},
		{schedule.Constant(0), "Constant"},
		{schedule.Constant(huge), ""},
		{schedule.Power{Scale: nan, Exponent: 1}, "Power.Scale"},
		{schedule.Power{Scale: inf, Exponent: 1}, "Power.Scale"},
		{schedule.Power{Scale: -1, Exponent: 1}, "Power.Scale"},
		{schedule.Power{Scale: 0, Exponent: 1}, "Power.Scale"},
		{schedule.Power{Scale: huge, Exponent: 1}, ""},
		{schedule.Power{Scale: 1, Offset: nan, Exponent: 1}, "Power.Offset"},
		{schedule.Power{Scale: 1, Offset: inf, Exponent: 1}, "Power.Offset"},
		{schedule.Power{Scale: 1, Offset: -1, Exponent: 1}, "Power.Offset"},
		{schedule.Power{Scale: 1, Offset: huge, Exponent: 1}, ""},
		{schedule.Power{Scale: 1, Exponent: nan}, "Power.Exponent"},
		{schedule.Power{Scale: 1, Exponent: -inf}, "Power.Exponent"},
		{schedule.Power{Scale: 1, Exponent: -0.5}, "Power.Exponent"},
		{schedule.Power{Scale: 1, Exponent: 0}, "Power.Exponent"},
		{schedule.Harmonic(nan), "Power.Scale"},
		{schedule.PowerSizes{Scale: nan, Exponent: 0.1}, "PowerSizes.Scale"},
		{schedule.PowerSizes{Scale: -inf, Exponent: 0.1}, "PowerSizes.Scale"},
		{schedule.PowerSizes{Scale: 0, Exponent: 0.1}, "PowerSizes.Scale"},
		{schedule.PowerSizes{Scale: 1, Exponent: nan}, "PowerSizes.Exponent"},
		{schedule.PowerSizes{Scale: 1, Exponent: inf}, "PowerSizes.Exponent"},
		{schedule.PowerSizes{Scale: 1, Exponent: -1}, "PowerSizes.Exponent"},
		{schedule.PowerSizes{Scale: 1, Exponent: 0}, ""},
		{schedule.Kesten{}, "Kesten.Base"},
		{schedule.Kesten{Base: schedule.Func(nil)}, "Kesten.Base is nil"},
		{schedule.Kesten{Base: (*nilSchedule)(nil)}, "Kesten.Base"},
		{schedule.Kesten{Base: schedule.Constant(nan)}, "Constant"},
		{schedule.Func(nil), "Func is nil"},
		{schedule.Func(func(k int) float64 { return 1 }), ""},
		{schedule.SizesFunc(nil), "SizesFunc is nil"},
		{schedule.SizesFunc(func(k int) float64 { return 1 }), ""},
	} {
		err := tc.v.Validate()
		if tc.field == "" {
			if err != nil {
				t.Errorf("%#v: %v, want valid", tc.v, err)
			}
			continue
		}
		if !errors.Is(err, schedule.ErrInvalid) || !strings.Contains(err.Error(), tc.field) {
			t.Errorf("%#v: err = %v, want ErrInvalid naming %q", tc.v, err, tc.field)
		}
	}
}

// The checks answer "undecided, because the schedule is nil" instead of
// panicking, for untyped and typed nils alike.
func TestChecksOfNil(t *testing.T) {
	for _, tc := range []struct {
		name string
		s    schedule.Schedule
	}{
		{"nil", nil},
		{"Func(nil)", schedule.Func(nil)},
		{"typed nil pointer", (*nilSchedule)(nil)},
		{"Kesten of Func(nil)", schedule.Kesten{Base: schedule.Func(nil)}},
	} {
		var c schedule.Conditions
		if msg := panicText(func() { c = schedule.Check(tc.s) }); msg != "" {
			t.Errorf("Check(%s) panicked: %s", tc.name, msg)
			continue
		}
		if c.SumDiverges != schedule.Undecided || c.SquaresConverge != schedule.Undecided || !strings.Contains(c.Reason, "nil") {
			t.Errorf("Check(%s) = %v, want undecided with a reason naming the nil", tc.name, c)
		}
		if msg := panicText(func() { c = schedule.CheckNumeric(tc.s) }); msg != "" {
			t.Errorf("CheckNumeric(%s) panicked: %s", tc.name, msg)
		} else if !strings.Contains(c.Reason, "nil") {
			t.Errorf("CheckNumeric(%s) = %v, want a reason naming the nil", tc.name, c)
		}
		var j schedule.Joint
		if msg := panicText(func() { j = schedule.CheckSPSA(tc.s, schedule.PowerSizes{Scale: 1, Exponent: 0.1}) }); msg != "" {
			t.Errorf("CheckSPSA(%s, …) panicked: %s", tc.name, msg)
		} else if j.Convergent() || !strings.Contains(j.Reason, "nil") {
			t.Errorf("CheckSPSA(%s, …) = %v, want not convergent with a reason naming the nil", tc.name, j)
		}
	}
	var j schedule.Joint
	if msg := panicText(func() { j = schedule.CheckKieferWolfowitz(schedule.Harmonic(1), schedule.SizesFunc(nil)) }); msg != "" {
		t.Errorf("CheckKieferWolfowitz(…, SizesFunc(nil)) panicked: %s", msg)
	} else if j.Convergent() || !strings.Contains(j.Reason, "nil") {
		t.Errorf("CheckKieferWolfowitz(…, SizesFunc(nil)) = %v, want a reason naming the nil", j)
	}
}

// Calling a nil function adapter is a programmer error; the panic says
// which adapter was nil.
func TestNilFuncPanicsSayWhat(t *testing.T) {
	for name, f := range map[string]func(){
		"Func":      func() { schedule.Func(nil).Gain(3) },
		"SizesFunc": func() { schedule.SizesFunc(nil).Size(3) },
		"Kesten":    func() { schedule.Kesten{}.Gain(3) },
	} {
		if msg := panicText(f); !strings.Contains(msg, name) || !strings.Contains(msg, "nil") {
			t.Errorf("%s: panic %q does not say that the %s is nil", name, msg, name)
		}
	}
}

// SpallGains refuses bad input with ErrInvalid naming the field, and
// leaves the caller's pilot values unchanged.
func TestSpallGainsBadInputTable(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	grad := func(c float64) (float64, error) { return 2, nil }
	good := func() schedule.SpallInput {
		return schedule.SpallInput{Steps: 100, Pilot: []float64{1, 1.5, 0.5}, FirstMove: 0.1, GradientSize: grad}
	}
	for _, tc := range []struct {
		name  string
		edit  func(*schedule.SpallInput)
		field string
	}{
		{"Steps 0", func(in *schedule.SpallInput) { in.Steps = 0 }, "Steps"},
		{"Steps negative", func(in *schedule.SpallInput) { in.Steps = math.MinInt }, "Steps"},
		{"Pilot nil", func(in *schedule.SpallInput) { in.Pilot = nil }, "Pilot"},
		{"Pilot of one", func(in *schedule.SpallInput) { in.Pilot = in.Pilot[:1] }, "Pilot"},
		{"Pilot NaN", func(in *schedule.SpallInput) { in.Pilot[1] = nan }, "Pilot[1]"},
		{"Pilot +Inf", func(in *schedule.SpallInput) { in.Pilot[2] = inf }, "Pilot[2]"},
		{"Pilot −Inf", func(in *schedule.SpallInput) { in.Pilot[0] = -inf }, "Pilot[0]"},
		{"FirstMove NaN", func(in *schedule.SpallInput) { in.FirstMove = nan }, "FirstMove"},
		{"FirstMove Inf", func(in *schedule.SpallInput) { in.FirstMove = inf }, "FirstMove"},
		{"FirstMove 0", func(in *schedule.SpallInput) { in.FirstMove = 0 }, "FirstMove"},
		{"FirstMove negative", func(in *schedule.SpallInput) { in.FirstMove = -1 }, "FirstMove"},
		{"GradientSize nil", func(in *schedule.SpallInput) { in.GradientSize = nil }, "GradientSize"},
		{"MinSize NaN", func(in *schedule.SpallInput) { in.MinSize = nan }, "MinSize"},
		{"MinSize Inf", func(in *schedule.SpallInput) { in.MinSize = inf }, "MinSize"},
		{"MinSize negative", func(in *schedule.SpallInput) { in.MinSize = -1 }, "MinSize"},
		{"gradient size NaN", func(in *schedule.SpallInput) {
			in.GradientSize = func(float64) (float64, error) { return nan, nil }
		}, "gradient size"},
		{"gradient size 0", func(in *schedule.SpallInput) {
			in.GradientSize = func(float64) (float64, error) { return 0, nil }
		}, "gradient size"},
	} {
		in := good()
		tc.edit(&in)
		pilot := append([]float64(nil), in.Pilot...)
		_, err := schedule.SpallGains(in)
		if !errors.Is(err, schedule.ErrInvalid) || !strings.Contains(err.Error(), tc.field) {
			t.Errorf("%s: err = %v, want ErrInvalid naming %q", tc.name, err, tc.field)
		}
		for i := range pilot {
			if math.Float64bits(pilot[i]) != math.Float64bits(in.Pilot[i]) {
				t.Errorf("%s: Pilot changed", tc.name)
			}
		}
	}
	// Huge but valid: the plan is finite.
	in := good()
	in.Steps = math.MaxInt
	p, err := schedule.SpallGains(in)
	if err != nil || math.IsInf(p.Gain.Offset, 0) || math.IsNaN(p.Gain.Scale) || math.IsInf(p.Gain.Scale, 0) {
		t.Errorf("Steps = MaxInt: plan %+v, err = %v, want a finite plan", p.Gain, err)
	}
}

// A run given Func(nil) as its gain stops before the first step with a
// settings error from the Validate the update core calls, not a nil
// dereference inside the loop.
func TestRunWithNilFuncGain(t *testing.T) {
	h := oracle.FieldFunc(func(dst, x []float64, _ *rand.Rand) error { copy(dst, x); return nil })
	var err error
	if msg := panicText(func() {
		_, err = sa.RobbinsMonro(context.Background(), h, []float64{1}, sa.Settings{Gain: schedule.Func(nil), MaxSteps: 10})
	}); msg != "" {
		t.Fatalf("RobbinsMonro panicked: %s", msg)
	}
	if !errors.Is(err, sa.ErrSettings) || !strings.Contains(err.Error(), "Func is nil") {
		t.Fatalf("err = %v, want sa.ErrSettings saying the Func is nil", err)
	}
}
