package sa

import (
	"errors"
	"math"
	"regexp"
	"slices"
	"strings"
	"testing"

	"github.com/stochroot/stochroot/schedule"
)

// TestTunerBadInputTable feeds every entry point of the tuner bad input:
// NaN, ±Inf, nil, empty, wrong lengths, negative and huge sizes, nonsense
// enums. Each case asserts the sentinel with errors.Is, that the caller's
// slices are unchanged, and that the tuner's state (its snapshot, less the
// counter that records the rejection) is unchanged.
func TestTunerBadInputTable(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	g := schedule.Constant(0.1)
	box := func() Box { return Box{Lower: []float64{-1, -1}, Upper: []float64{1, 1}} }

	t.Run("NewTuner", func(t *testing.T) {
		for _, tc := range []struct {
			name string
			x0   []float64
			s    TunerSettings
			want error
		}{
			{"x0 NaN", []float64{nan, 0}, TunerSettings{Gain: g}, ErrSettings},
			{"x0 +Inf", []float64{0, inf}, TunerSettings{Gain: g}, ErrSettings},
			{"x0 −Inf", []float64{-inf, 0}, TunerSettings{Gain: g}, ErrSettings},
			{"x0 nil", nil, TunerSettings{Gain: g}, ErrDimension},
			{"x0 empty", []float64{}, TunerSettings{Gain: g}, ErrDimension},
			{"x0 outside box", []float64{2, 0}, TunerSettings{Gain: g, Projection: box()}, ErrOutOfBounds},
			{"x0 outside ball", []float64{1, 1}, TunerSettings{Gain: g, Projection: Ball{Radius: 1}}, ErrOutOfBounds},
			{"x0 beyond MaxAbs", []float64{0, 5}, TunerSettings{Gain: g, MaxAbs: 1}, ErrOutOfBounds},
			{"gain nil", []float64{0, 0}, TunerSettings{}, ErrSettings},
			{"gain NaN", []float64{0, 0}, TunerSettings{Gain: schedule.Constant(nan)}, ErrSettings},
			{"gain +Inf", []float64{0, 0}, TunerSettings{Gain: schedule.Constant(inf)}, ErrSettings},
			{"gain negative", []float64{0, 0}, TunerSettings{Gain: schedule.Constant(-1)}, ErrSettings},
			{"power exponent NaN", []float64{0, 0}, TunerSettings{Gain: schedule.Power{Scale: 1, Exponent: nan}}, ErrSettings},
			{"Kesten without base", []float64{0, 0}, TunerSettings{Gain: schedule.Kesten{}}, ErrSettings},
			{"MaxLag −2", []float64{0, 0}, TunerSettings{Gain: g, MaxLag: -2}, ErrSettings},
			{"MaxLag MinInt", []float64{0, 0}, TunerSettings{Gain: g, MaxLag: math.MinInt}, ErrSettings},
			{"BurnIn −1", []float64{0, 0}, TunerSettings{Gain: g, BurnIn: -1}, ErrSettings},
			{"BurnIn MinInt", []float64{0, 0}, TunerSettings{Gain: g, BurnIn: math.MinInt}, ErrSettings},
			{"MaxAbs NaN", []float64{0, 0}, TunerSettings{Gain: g, MaxAbs: nan}, ErrSettings},
			{"MaxAbs −1", []float64{0, 0}, TunerSettings{Gain: g, MaxAbs: -1}, ErrSettings},
			{"MaxAbs +Inf", []float64{0, 0}, TunerSettings{Gain: g, MaxAbs: inf}, ErrSettings},
			{"MaxChange empty", []float64{0, 0}, TunerSettings{Gain: g, MaxChange: []float64{}}, ErrDimension},
			{"MaxChange too long", []float64{0, 0}, TunerSettings{Gain: g, MaxChange: []float64{1, 1, 1}}, ErrDimension},
			{"MaxChange NaN", []float64{0, 0}, TunerSettings{Gain: g, MaxChange: []float64{1, nan}}, ErrSettings},
			{"MaxChange −Inf", []float64{0, 0}, TunerSettings{Gain: g, MaxChange: []float64{-inf, 1}}, ErrSettings},
			{"MaxChange 0", []float64{0, 0}, TunerSettings{Gain: g, MaxChange: []float64{0, 1}}, ErrSettings},
			{"box short", []float64{0, 0}, TunerSettings{Gain: g, Projection: Box{Lower: []float64{-1}, Upper: []float64{1}}}, ErrDimension},
			{"box nil bounds", []float64{0, 0}, TunerSettings{Gain: g, Projection: Box{}}, ErrDimension},
			{"box NaN", []float64{0, 0}, TunerSettings{Gain: g, Projection: Box{Lower: []float64{nan, -1}, Upper: []float64{1, 1}}}, ErrSettings},
			{"box lower > upper", []float64{0, 0}, TunerSettings{Gain: g, Projection: Box{Lower: []float64{1, -1}, Upper: []float64{-1, 1}}}, ErrSettings},
			{"nil *Box", []float64{0, 0}, TunerSettings{Gain: g, Projection: (*Box)(nil)}, ErrSettings},
			{"ball radius 0", []float64{0, 0}, TunerSettings{Gain: g, Projection: Ball{Radius: 0}}, ErrSettings},
			{"ball radius NaN", []float64{0, 0}, TunerSettings{Gain: g, Projection: Ball{Radius: nan}}, ErrSettings},
			{"ball radius +Inf", []float64{0, 0}, TunerSettings{Gain: g, Projection: Ball{Radius: inf}}, ErrSettings},
			{"ball center short", []float64{0, 0}, TunerSettings{Gain: g, Projection: Ball{Center: []float64{0}, Radius: 1}}, ErrDimension},
			{"ball center NaN", []float64{0, 0}, TunerSettings{Gain: g, Projection: Ball{Center: []float64{0, nan}, Radius: 1}}, ErrSettings},
			{"nil *Ball", []float64{0, 0}, TunerSettings{Gain: g, Projection: (*Ball)(nil)}, ErrSettings},
			{"set without functions", []float64{0, 0}, TunerSettings{Gain: g, Projection: Set{}}, ErrSettings},
		} {
			t.Run(tc.name, func(t *testing.T) {
				x0 := slices.Clone(tc.x0)
				mc := slices.Clone(tc.s.MaxChange)
				var lo, hi, c []float64
				switch p := tc.s.Projection.(type) {
				case Box:
					lo, hi = slices.Clone(p.Lower), slices.Clone(p.Upper)
				case Ball:
					c = slices.Clone(p.Center)
				}
				tu, err := NewTuner(tc.x0, tc.s)
				if tu != nil || !errors.Is(err, tc.want) {
					t.Fatalf("NewTuner = %v, %v; want nil, %v", tu, err, tc.want)
				}
				same := sameBits(x0, tc.x0) && sameBits(mc, tc.s.MaxChange)
				switch p := tc.s.Projection.(type) {
				case Box:
					same = same && sameBits(lo, p.Lower) && sameBits(hi, p.Upper)
				case Ball:
					same = same && sameBits(c, p.Center)
				}
				if !same {
					t.Errorf("NewTuner changed the caller's slices")
				}
			})
		}
	})

	t.Run("targets", func(t *testing.T) {
		for _, tc := range []struct {
			name string
			err  func() error
		}{
			{"quantile P NaN", func() error { _, err := NewQuantileTuner(nan, 0, TunerSettings{Gain: g}); return err }},
			{"quantile P 0", func() error { _, err := NewQuantileTuner(0, 0, TunerSettings{Gain: g}); return err }},
			{"quantile P 1", func() error { _, err := NewQuantileTuner(1, 0, TunerSettings{Gain: g}); return err }},
			{"quantile x0 +Inf", func() error { _, err := NewQuantileTuner(0.5, inf, TunerSettings{Gain: g}); return err }},
			{"setpoint direction 0", func() error { _, err := NewSetpointTuner(1, 0, 0, TunerSettings{Gain: g}); return err }},
			{"setpoint direction 99", func() error { _, err := NewSetpointTuner(1, Direction(99), 0, TunerSettings{Gain: g}); return err }},
			{"setpoint direction −1", func() error { _, err := NewSetpointTuner(1, Direction(-1), 0, TunerSettings{Gain: g}); return err }},
			{"setpoint target NaN", func() error { _, err := NewSetpointTuner(nan, Rising, 0, TunerSettings{Gain: g}); return err }},
			{"setpoint x0 NaN", func() error { _, err := NewSetpointTuner(1, Rising, nan, TunerSettings{Gain: g}); return err }},
		} {
			if err := tc.err(); !errors.Is(err, ErrSettings) {
				t.Errorf("%s: %v, want ErrSettings", tc.name, err)
			}
		}
		if s := Outcome(99).String(); s != "unknown outcome" {
			t.Errorf("Outcome(99) = %q", s)
		}
		if s := Outcome(-1).String(); s != "unknown outcome" {
			t.Errorf("Outcome(-1) = %q", s)
		}
	})

	// A tuner with some history, so that a change of state would show.
	settings := TunerSettings{Gain: schedule.Kesten{Base: schedule.Harmonic(0.5)}, Projection: box(), MaxAbs: 0.9, MaxChange: []float64{0.5, 0.5}}
	fresh := func(t *testing.T) *Tuner {
		tu := newTestTuner(t, []float64{0.1, -0.1}, settings)
		for i := range 5 {
			x := make([]float64, 2)
			v := tu.Param(x)
			tu.Report(v, []float64{x[0] - 0.3 + float64(i%2), x[1]})
		}
		return tu
	}
	counts := regexp.MustCompile(`"counts":\{[^}]*\}`)
	state := func(t *testing.T, tu *Tuner) string { return counts.ReplaceAllString(string(tunerSnap(t, tu)), "") }
	// check runs call on a fresh tuner (closed first if asked) and compares.
	check := func(t *testing.T, closed bool, arg []float64, want error, call func(*Tuner, []float64) error) {
		t.Helper()
		tu := fresh(t)
		if closed {
			tu.Close()
		}
		before := state(t, tu)
		n0 := tu.Stats().Reports()
		xb := make([]float64, 2)
		vb := tu.Param(xb)
		keep := slices.Clone(arg)
		err := call(tu, arg)
		if !errors.Is(err, want) {
			t.Fatalf("error %v, want %v", err, want)
		}
		if !sameBits(keep, arg) {
			t.Errorf("the caller's slice changed: %v → %v", keep, arg)
		}
		if after := state(t, tu); after != before {
			t.Errorf("state changed:\n%s\n%s", before, after)
		}
		x := make([]float64, 2)
		if v := tu.Param(x); v != vb || !sameBits(x, xb) {
			t.Errorf("published value changed")
		}
		if n := tu.Stats().Reports() - n0; n > 1 {
			t.Errorf("%d reports counted for one call", n)
		}
	}
	report := func(tu *Tuner, y []float64) error {
		out, err := tu.Report(tu.Stats().Version, y)
		if out != Rejected {
			return errors.New("not rejected: " + out.String())
		}
		return err
	}
	reportAt := func(version uint64) func(*Tuner, []float64) error {
		return func(tu *Tuner, y []float64) error {
			out, err := tu.Report(version, y)
			if out != Rejected {
				return errors.New("not rejected: " + out.String())
			}
			return err
		}
	}
	override := func(tu *Tuner, x []float64) error { return tu.Override(x) }
	for _, tc := range []struct {
		name   string
		closed bool
		arg    []float64
		want   error
		call   func(*Tuner, []float64) error
	}{
		{"Report nil", false, nil, ErrDimension, report},
		{"Report empty", false, []float64{}, ErrDimension, report},
		{"Report too long", false, []float64{0, 0, 0}, ErrDimension, report},
		{"Report NaN", false, []float64{0, nan}, ErrNotFinite, report},
		{"Report +Inf", false, []float64{inf, 0}, ErrNotFinite, report},
		{"Report −Inf", false, []float64{0, -inf}, ErrNotFinite, report},
		{"Report future version", false, []float64{0, 0}, ErrFutureVersion, reportAt(1 << 40)},
		{"Report version MaxUint64", false, []float64{0, 0}, ErrFutureVersion, reportAt(math.MaxUint64)},
		{"Report after Close", true, []float64{0, 0}, ErrClosed, report},
		{"Report1 on a 2-D tuner", false, nil, ErrDimension, func(tu *Tuner, _ []float64) error { _, err := tu.Report1(0, 1); return err }},
		{"Override nil", false, nil, ErrDimension, override},
		{"Override empty", false, []float64{}, ErrDimension, override},
		{"Override too long", false, []float64{0, 0, 0}, ErrDimension, override},
		{"Override NaN", false, []float64{nan, 0}, ErrNotFinite, override},
		{"Override +Inf", false, []float64{0, inf}, ErrNotFinite, override},
		{"Override −Inf", false, []float64{-inf, 0}, ErrNotFinite, override},
		{"Override outside the box", false, []float64{0, -1.5}, ErrOutOfBounds, override},
		{"Override beyond MaxAbs", false, []float64{0.95, 0}, ErrOutOfBounds, override},
		{"Override huge", false, []float64{math.MaxFloat64, 0}, ErrOutOfBounds, override},
		{"Override after Close", true, []float64{0, 0}, ErrClosed, override},
		{"Restore nil", false, nil, ErrSnapshot, func(tu *Tuner, _ []float64) error { return tu.Restore(nil) }},
		{"Restore empty", false, nil, ErrSnapshot, func(tu *Tuner, _ []float64) error { return tu.Restore([]byte{}) }},
		{"Restore null", false, nil, ErrSnapshot, func(tu *Tuner, _ []float64) error { return tu.Restore([]byte("null")) }},
		{"Restore huge", false, nil, ErrSnapshot, func(tu *Tuner, _ []float64) error {
			return tu.Restore([]byte(strings.Repeat(" ", MaxSnapshotBytes(2)+1)))
		}},
		{"Restore after Close", true, nil, ErrClosed, func(tu *Tuner, _ []float64) error { return tu.Restore(tunerSnap(t, fresh(t))) }},
	} {
		t.Run(tc.name, func(t *testing.T) { check(t, tc.closed, tc.arg, tc.want, tc.call) })
	}

	t.Run("Freeze, Resume, Close on a closed tuner", func(t *testing.T) {
		tu := fresh(t)
		tu.Close()
		before := state(t, tu)
		tu.Freeze()
		tu.Resume()
		if err := tu.Close(); err != nil {
			t.Fatal(err)
		}
		if after := state(t, tu); after != before {
			t.Errorf("state changed:\n%s\n%s", before, after)
		}
	})

	t.Run("panics say what was wrong", func(t *testing.T) {
		tu := fresh(t)
		for _, tc := range []struct {
			name, want string
			f          func()
		}{
			{"Param nil", "len(dst)", func() { tu.Param(nil) }},
			{"Param long", "len(dst)", func() { tu.Param(make([]float64, 3)) }},
			{"Average short", "len(dst)", func() { tu.Average(make([]float64, 1)) }},
			{"Param1 on 2-D", "dimension", func() { tu.Param1() }},
		} {
			p := recovered(tc.f)
			if s, ok := p.(string); !ok || !strings.Contains(s, tc.want) {
				t.Errorf("%s: panic %v, want a message about %s", tc.name, p, tc.want)
			}
		}
	})

	t.Run("Observe", func(t *testing.T) {
		st, err := NewSetpointTuner(-math.MaxFloat64, Falling, 0, TunerSettings{Gain: g})
		if err != nil {
			t.Fatal(err)
		}
		before := state(t, st.Tuner())
		for _, level := range []float64{nan, inf, -inf, math.MaxFloat64} { // the last overflows s·(level − target)
			if out, err := st.Observe(0, level); out != Rejected || !errors.Is(err, ErrNotFinite) {
				t.Errorf("Observe(%v) = %v, %v", level, out, err)
			}
		}
		if after := state(t, st.Tuner()); after != before {
			t.Errorf("state changed")
		}
	})
}

// sameBits reports whether a and b hold the same numbers bit for bit (NaN
// equals NaN) and are both nil or both non-nil.
func sameBits(a, b []float64) bool {
	if (a == nil) != (b == nil) || len(a) != len(b) {
		return false
	}
	for i := range a {
		if math.Float64bits(a[i]) != math.Float64bits(b[i]) {
			return false
		}
	}
	return true
}
