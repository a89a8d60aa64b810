package sa

import (
	"bytes"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/schedule"
)

// Regression tests of issue 9 for the tuner: defect 1 (lock held after a
// recovered panic), defect 6 (Ball.Center not copied), defect 13 (one
// starting-point rule) and an adaptive gain that panics inside the core.

// returnsWithin runs f and fails the test if it has not returned after d:
// a regression that leaves the tuner locked fails instead of hanging.
func returnsWithin(t *testing.T, d time.Duration, what string, f func()) {
	t.Helper()
	done := make(chan struct{})
	go func() {
		defer close(done)
		f()
	}()
	select {
	case <-done:
	case <-time.After(d):
		t.Fatalf("%s did not return within %v: the tuner stays locked", what, d)
	}
}

// recovered calls f and returns what it panicked with (nil if it did not).
func recovered(f func()) (p any) {
	defer func() { p = recover() }()
	f()
	return nil
}

// usable checks that every locking method of tu returns, and returns the
// stats read on the way.
func usable(t *testing.T, tu *Tuner) TunerStats {
	t.Helper()
	var st TunerStats
	returnsWithin(t, 2*time.Second, "Stats", func() { st = tu.Stats() })
	returnsWithin(t, 2*time.Second, "Snapshot", func() { tu.Snapshot() })
	returnsWithin(t, 2*time.Second, "Average", func() { tu.Average(make([]float64, tu.Dim())) })
	returnsWithin(t, 2*time.Second, "Freeze/Resume/IsFrozen", func() { tu.Freeze(); tu.Resume(); tu.IsFrozen() })
	return st
}

// withoutCounter removes the "failed" counter from a snapshot, to compare
// the rest of two states.
func withoutCounter(b []byte, name string) string {
	s := string(b)
	i := strings.Index(s, `"`+name+`":`)
	if i < 0 {
		return s
	}
	j := i + strings.IndexAny(s[i:], ",}")
	return s[:i] + s[j:]
}

func TestTunerPanicReleasesLock(t *testing.T) {
	t.Run("OnUpdate hook in Report: the update stands", func(t *testing.T) {
		tu := newTestTuner(t, []float64{1}, TunerSettings{Gain: schedule.Constant(0.5), OnUpdate: func(Update) { panic("x") }})
		var p any
		returnsWithin(t, 2*time.Second, "Report1", func() { p = recovered(func() { tu.Report1(0, 1) }) })
		if p != "x" {
			t.Fatalf("the hook's panic did not reach the caller: %v", p)
		}
		st := usable(t, tu)
		if x, v := tu.Param1(); x != 0.5 || v != 1 || st.Applied != 1 || st.Steps != 1 || st.Failed != 0 {
			t.Fatalf("after the hook panicked: x = %v, version %d, stats %+v; want the update applied", x, v, st)
		}
		// The next report runs (and panics again in the hook), Override and
		// Close return.
		returnsWithin(t, 2*time.Second, "second Report1", func() { recovered(func() { tu.Report1(1, 1) }) })
		returnsWithin(t, 2*time.Second, "Override", func() { recovered(func() { tu.Override([]float64{3}) }) })
		if x, v := tu.Param1(); x != 3 || v != 3 || tu.Stats().Overrides != 1 {
			t.Fatalf("override under a panicking hook: x = %v, version %d", x, v)
		}
		data := tunerSnap(t, tu)
		returnsWithin(t, 2*time.Second, "Restore", func() { recovered(func() { tu.Restore(data) }) })
		if st := tu.Stats(); st.Restores != 1 || st.Version != 4 {
			t.Fatalf("restore under a panicking hook: %+v", st)
		}
		returnsWithin(t, 2*time.Second, "Close", func() { tu.Close() })
	})

	t.Run("gain schedule: the report is not applied", func(t *testing.T) {
		tu := newTestTuner(t, []float64{1}, TunerSettings{Gain: schedule.Func(func(k int) float64 {
			if k == 1 {
				panic("gain")
			}
			return 0.5
		})})
		tu.Report1(0, 1)
		before := tunerSnap(t, tu)
		var p any
		returnsWithin(t, 2*time.Second, "Report1", func() { p = recovered(func() { tu.Report1(1, 1) }) })
		if p != "gain" {
			t.Fatalf("panic = %v", p)
		}
		st := usable(t, tu)
		if st.Failed != 1 || st.Applied != 1 || st.Reports() != 2 {
			t.Fatalf("stats %+v: want the panicking report counted as Failed", st)
		}
		if a, b := withoutCounter(before, "failed"), withoutCounter(tunerSnap(t, tu), "failed"); a != b {
			t.Fatalf("state changed:\n%s\n%s", a, b)
		}
		returnsWithin(t, 2*time.Second, "Close", func() { tu.Close() })
	})

	t.Run("projection: the report is not applied", func(t *testing.T) {
		armed := false
		in := func(x []float64) bool {
			if armed {
				panic("projection")
			}
			return x[0] <= 10
		}
		tu := newTestTuner(t, []float64{1}, TunerSettings{Gain: schedule.Constant(1), Projection: Set{In: in, Onto: func(x []float64) { x[0] = 10 }}})
		before := tunerSnap(t, tu)
		armed = true
		var p any
		returnsWithin(t, 2*time.Second, "Report1", func() { p = recovered(func() { tu.Report1(0, 1) }) })
		if p != "projection" {
			t.Fatalf("panic = %v", p)
		}
		returnsWithin(t, 2*time.Second, "Override", func() { p = recovered(func() { tu.Override([]float64{2}) }) })
		if p != "projection" {
			t.Fatalf("Override: panic = %v", p)
		}
		armed = false
		st := usable(t, tu)
		if st.Failed != 1 || st.Applied != 0 || st.Overrides != 0 {
			t.Fatalf("stats %+v", st)
		}
		if a, b := withoutCounter(before, "failed"), withoutCounter(tunerSnap(t, tu), "failed"); a != b {
			t.Fatalf("state changed:\n%s\n%s", a, b)
		}
		if out, err := tu.Report1(0, 1); out != Applied || err != nil {
			t.Fatalf("Report after the panics: %v, %v", out, err)
		}
	})
}

// panickyAdaptive is an adaptive gain whose Advance panics when armed.
type panickyAdaptive struct{ armed *bool }

func (panickyAdaptive) Gain(n int) float64 { return 1 / float64(n+1) }
func (p panickyAdaptive) Advance(y, prev []float64) bool {
	if *p.armed {
		panic("advance")
	}
	return prev == nil || y[0]*prev[0] < 0
}

// TestTunerAdaptivePanicIsAllOrNothing: an Advance that panics inside the
// core must leave the iterate, the average, the counters and the gain index
// as they were (the step is all-or-nothing).
func TestTunerAdaptivePanicIsAllOrNothing(t *testing.T) {
	armed := false
	tu := newTestTuner(t, []float64{1, 2}, TunerSettings{Gain: panickyAdaptive{&armed}})
	tu.Report(0, []float64{1, 1})
	tu.Report(1, []float64{-1, 1})
	before := tunerSnap(t, tu)
	xb := make([]float64, 2)
	vb := tu.Param(xb)
	armed = true
	var p any
	returnsWithin(t, 2*time.Second, "Report", func() { p = recovered(func() { tu.Report(vb, []float64{0.5, 0.5}) }) })
	if p != "advance" {
		t.Fatalf("panic = %v", p)
	}
	armed = false
	usable(t, tu)
	if a, b := withoutCounter(before, "failed"), withoutCounter(tunerSnap(t, tu), "failed"); a != b {
		t.Fatalf("the core was left half-updated:\n%s\n%s", a, b)
	}
	x := make([]float64, 2)
	if v := tu.Param(x); v != vb || x[0] != xb[0] || x[1] != xb[1] {
		t.Fatalf("published %v (version %d), was %v (version %d)", x, v, xb, vb)
	}
	if st := tu.Stats(); st.Failed != 1 || st.Applied != 2 {
		t.Fatalf("stats %+v", st)
	}
	// The same report now goes through as on a tuner that never panicked.
	ref := newTestTuner(t, []float64{1, 2}, TunerSettings{Gain: panickyAdaptive{&armed}})
	ref.Report(0, []float64{1, 1})
	ref.Report(1, []float64{-1, 1})
	ref.Report(2, []float64{0.5, 0.5})
	tu.Report(vb, []float64{0.5, 0.5})
	if a, b := withoutCounter(tunerSnap(t, ref), "failed"), withoutCounter(tunerSnap(t, tu), "failed"); a != b {
		t.Fatalf("after the panic the tuner continues differently:\n%s\n%s", a, b)
	}
}

// TestTunerCopiesBallCenter: TunerSettings promises copies, so changing the
// caller's Ball.Center after NewTuner must not move the constraint.
func TestTunerCopiesBallCenter(t *testing.T) {
	for _, tc := range []struct {
		name string
		proj func(c []float64) Projection
	}{
		{"Ball", func(c []float64) Projection { return Ball{Center: c, Radius: 1} }},
		{"*Ball", func(c []float64) Projection { return &Ball{Center: c, Radius: 1} }},
		{"*Box", func(c []float64) Projection { return &Box{Lower: c, Upper: []float64{1, 1}} }},
	} {
		t.Run(tc.name, func(t *testing.T) {
			c := []float64{0, 0}
			tu := newTestTuner(t, []float64{0, 0}, TunerSettings{Gain: schedule.Constant(1), Projection: tc.proj(c)})
			c[0], c[1] = -100, -100 // would move the set far away
			tu.Report(0, []float64{50, 50})
			x := make([]float64, 2)
			tu.Param(x)
			// Both sets (ball of radius 1 about 0; box [0,1]²) keep x = −50·1
			// within distance 1 of the origin.
			if math.Hypot(x[0], x[1]) > 1+1e-12 {
				t.Fatalf("x = %v: the caller's slice moved the constraint", x)
			}
		})
	}
	if _, err := NewTuner([]float64{0}, TunerSettings{Gain: schedule.Constant(1), Projection: (*Ball)(nil)}); !errors.Is(err, ErrSettings) {
		t.Errorf("nil *Ball: %v", err)
	}
	if _, err := NewTuner([]float64{0}, TunerSettings{Gain: schedule.Constant(1), Projection: (*Box)(nil)}); !errors.Is(err, ErrSettings) {
		t.Errorf("nil *Box: %v", err)
	}
}

// TestTunerStartingPointRule: NewTuner applies checkInside, the starting
// point rule of the pull drivers: a non-finite x0 is ErrSettings naming x0;
// outside the set or beyond MaxAbs is ErrOutOfBounds. Override applies the
// same rule with ErrNotFinite for a non-finite point (its documented error).
func TestTunerStartingPointRule(t *testing.T) {
	g := schedule.Constant(1)
	ball := Ball{Radius: 1}
	for _, tc := range []struct {
		name string
		x0   []float64
		s    TunerSettings
		want error
	}{
		{"NaN", []float64{math.NaN()}, TunerSettings{Gain: g}, ErrSettings},
		{"+Inf", []float64{0, math.Inf(1)}, TunerSettings{Gain: g}, ErrSettings},
		{"outside ball", []float64{1, 1}, TunerSettings{Gain: g, Projection: ball}, ErrOutOfBounds},
		{"beyond MaxAbs", []float64{3}, TunerSettings{Gain: g, MaxAbs: 2}, ErrOutOfBounds},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, errT := NewTuner(tc.x0, tc.s)
			_, errP := RobbinsMonro(t.Context(), oracle.FieldFunc(func(dst, x []float64, _ *rand.Rand) error { copy(dst, x); return nil }), tc.x0, Settings{Gain: g, Projection: tc.s.Projection, MaxAbs: tc.s.MaxAbs, MaxSteps: 1})
			if !errors.Is(errT, tc.want) || !errors.Is(errP, tc.want) {
				t.Fatalf("NewTuner: %v; RobbinsMonro: %v; want both %v", errT, errP, tc.want)
			}
			if errors.Is(errT, ErrNotFinite) || !strings.Contains(errT.Error(), "x0") {
				t.Errorf("NewTuner error %q: want it to name x0 and not to be a measurement error", errT)
			}
		})
	}
	tu := newTestTuner(t, []float64{0, 0}, TunerSettings{Gain: g, Projection: ball, MaxAbs: 0.9})
	before := tunerSnap(t, tu)
	for _, tc := range []struct {
		x    []float64
		want error
	}{
		{[]float64{math.NaN(), 0}, ErrNotFinite},
		{[]float64{0.8, 0.8}, ErrOutOfBounds},
		{[]float64{0.95, 0}, ErrOutOfBounds},
	} {
		if err := tu.Override(tc.x); !errors.Is(err, tc.want) {
			t.Errorf("Override(%v) = %v, want %v", tc.x, err, tc.want)
		}
	}
	if !bytes.Equal(before, tunerSnap(t, tu)) {
		t.Errorf("a refused Override changed the state")
	}
}
