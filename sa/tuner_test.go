package sa

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/schedule"
)

func tunerBox1(lo, hi float64) Box { return Box{Lower: []float64{lo}, Upper: []float64{hi}} }

func newTestTuner(t testing.TB, x0 []float64, s TunerSettings) *Tuner {
	t.Helper()
	tu, err := NewTuner(x0, s)
	if err != nil {
		t.Fatalf("NewTuner: %v", err)
	}
	return tu
}

// snap returns the tuner's snapshot; used to compare whole states.
func tunerSnap(t testing.TB, tu *Tuner) []byte {
	t.Helper()
	b, err := tu.Snapshot()
	if err != nil {
		t.Fatalf("Snapshot: %v", err)
	}
	return b
}

func TestTunerUpdate(t *testing.T) {
	var hooked []Update
	tu := newTestTuner(t, []float64{1, 2}, TunerSettings{
		Gain: schedule.Constant(0.5),
		OnUpdate: func(u Update) {
			u.X = append([]float64(nil), u.X...)
			u.Y = append([]float64(nil), u.Y...)
			hooked = append(hooked, u)
		},
	})
	x := make([]float64, 2)
	if v := tu.Param(x); v != 0 || x[0] != 1 || x[1] != 2 {
		t.Fatalf("Param = %v, version %d; want [1 2], version 0", x, v)
	}
	out, err := tu.Report(0, []float64{2, -2})
	if out != Applied || err != nil {
		t.Fatalf("Report = %v, %v; want applied, nil", out, err)
	}
	// x_1 = x_0 − 0.5·Y = [0, 3].
	if v := tu.Param(x); v != 1 || x[0] != 0 || x[1] != 3 {
		t.Fatalf("after one update Param = %v, version %d; want [0 3], version 1", x, v)
	}
	if len(hooked) != 1 || hooked[0].Kind != StepUpdate || hooked[0].Version != 1 || hooked[0].Step != 0 ||
		hooked[0].Gain != 0.5 || hooked[0].X[1] != 3 || hooked[0].Y[0] != 2 {
		t.Fatalf("hook saw %+v", hooked)
	}
	avg := make([]float64, 2)
	if n := tu.Average(avg); n != 1 || avg[0] != 0 || avg[1] != 3 {
		t.Fatalf("Average = %v (%d); want [0 3] (1)", avg, n)
	}
	st := tu.Stats()
	if st.Applied != 1 || st.Version != 1 || st.Steps != 1 || st.Reports() != 1 {
		t.Fatalf("Stats = %+v", st)
	}
}

func TestTunerStaleness(t *testing.T) {
	for _, tc := range []struct {
		name   string
		maxLag int
		lag    uint64
		want   Outcome
	}{
		{"current only, lag 0", CurrentOnly, 0, Applied},
		{"current only, lag 1", CurrentOnly, 1, Stale},
		{"max lag 3, lag 3", 3, 3, Applied},
		{"max lag 3, lag 4", 3, 4, Stale},
		{"default, lag 16", 0, DefaultMaxLag, Applied},
		{"default, lag 17", 0, DefaultMaxLag + 1, Stale},
	} {
		t.Run(tc.name, func(t *testing.T) {
			tu := newTestTuner(t, []float64{0}, TunerSettings{Gain: schedule.Constant(1), MaxLag: tc.maxLag})
			for range 20 {
				_, v := tu.Param1()
				tu.Report1(v, 0.1)
			}
			x0, cur := tu.Param1()
			out, err := tu.Report1(cur-tc.lag, 1)
			if out != tc.want || err != nil {
				t.Fatalf("Report at lag %d = %v, %v; want %v, nil", tc.lag, out, err, tc.want)
			}
			x1, v1 := tu.Param1()
			st := tu.Stats()
			if tc.want == Stale {
				if st.Stale != 1 || x1 != x0 || v1 != cur {
					t.Errorf("stale report: x %v → %v, version %d → %d, stale count %d", x0, x1, cur, v1, st.Stale)
				}
			} else if x1 != x0-1 || v1 != cur+1 {
				t.Errorf("delayed report: x %v → %v (want −1), version %d → %d", x0, x1, cur, v1)
			}
		})
	}
}

func TestTunerOverrideIsBarrier(t *testing.T) {
	tu := newTestTuner(t, []float64{5}, TunerSettings{Gain: schedule.Constant(1), Projection: tunerBox1(0, 10)})
	_, v0 := tu.Param1()
	if err := tu.Override([]float64{7}); err != nil {
		t.Fatal(err)
	}
	x, v1 := tu.Param1()
	if x != 7 || v1 != v0+1 {
		t.Fatalf("after Override Param1 = %v (version %d), want 7 (version %d)", x, v1, v0+1)
	}
	// A report taken before the override is stale although its lag is 1.
	if out, err := tu.Report1(v0, 1); out != Stale || err != nil {
		t.Fatalf("report from before the override = %v, %v; want stale", out, err)
	}
	if out, _ := tu.Report1(v1, 1); out != Applied {
		t.Fatalf("report after override = %v, want applied", out)
	}
	if x, _ := tu.Param1(); x != 6 {
		t.Fatalf("x = %v, want 6", x)
	}
	avg := make([]float64, 1)
	if n := tu.Average(avg); n != 1 || avg[0] != 6 {
		t.Fatalf("average after override restarts: got %v over %d, want 6 over 1", avg[0], n)
	}
	for _, bad := range [][]float64{{11}, {-1}, {math.NaN()}, {1, 2}} {
		before := tunerSnap(t, tu)
		if err := tu.Override(bad); err == nil {
			t.Errorf("Override(%v) = nil, want an error", bad)
		}
		if !bytes.Equal(before, tunerSnap(t, tu)) {
			t.Errorf("failed Override(%v) changed the state", bad)
		}
	}
}

func TestTunerFreezeResume(t *testing.T) {
	tu := newTestTuner(t, []float64{0}, TunerSettings{Gain: schedule.Constant(1)})
	tu.Freeze()
	if !tu.IsFrozen() {
		t.Fatal("IsFrozen = false after Freeze")
	}
	_, v := tu.Param1()
	if out, err := tu.Report1(v, 3); out != Frozen || err != nil {
		t.Fatalf("Report while frozen = %v, %v", out, err)
	}
	if x, v2 := tu.Param1(); x != 0 || v2 != v {
		t.Fatalf("frozen tuner moved to %v (version %d)", x, v2)
	}
	// Override works while frozen and keeps it frozen.
	if err := tu.Override([]float64{4}); err != nil {
		t.Fatal(err)
	}
	x, v := tu.Param1()
	if out, _ := tu.Report1(v, 3); out != Frozen || x != 4 {
		t.Fatalf("after override while frozen: x = %v, outcome %v", x, out)
	}
	tu.Resume()
	if out, _ := tu.Report1(v, 3); out != Applied {
		t.Fatalf("after Resume outcome %v, want applied", out)
	}
	if x, _ := tu.Param1(); x != 1 {
		t.Fatalf("x = %v, want 1", x)
	}
	if st := tu.Stats(); st.Frozen != 2 || st.Applied != 1 || st.Overrides != 1 {
		t.Fatalf("Stats = %+v", st)
	}
}

func TestTunerBoundsAndMaxChange(t *testing.T) {
	var limited, active int
	tu := newTestTuner(t, []float64{0, 0}, TunerSettings{
		Gain:       schedule.Constant(1),
		Projection: Box{Lower: []float64{-1, -10}, Upper: []float64{1, 10}},
		MaxChange:  []float64{math.Inf(1), 0.25},
		OnUpdate: func(u Update) {
			if u.Limited {
				limited++
			}
			if u.Active {
				active++
			}
		},
	})
	x := make([]float64, 2)
	v := tu.Param(x)
	tu.Report(v, []float64{-5, -5}) // wants +5, +5
	tu.Param(x)
	if x[0] != 1 || x[1] != 0.25 {
		t.Fatalf("x = %v, want [1 0.25] (bound, then max change)", x)
	}
	if limited != 1 || active != 1 {
		t.Fatalf("hook saw limited %d, active %d; want 1, 1", limited, active)
	}
	// An infinite measurement must still be rejected although MaxChange
	// would cut the step it asks for; the core checks this itself too
	// (TestCoreMaxChangeKeepsNonFiniteCheck).
	v = tu.Param(x)
	if out, err := tu.Report(v, []float64{0, math.Inf(-1)}); out != Rejected || !errors.Is(err, ErrNotFinite) {
		t.Fatalf("infinite measurement: %v, %v; want rejected, ErrNotFinite", out, err)
	}
}

func TestCoreMaxChangeKeepsNonFiniteCheck(t *testing.T) {
	c := newCore([]float64{1}, schedule.Constant(1), 0, nil, 0)
	c.maxChange = []float64{0.5}
	for _, y := range []float64{math.Inf(1), math.Inf(-1), math.NaN()} {
		if err := c.step([]float64{y}); !errors.Is(err, ErrNotFinite) {
			t.Errorf("core step with Y = %v and MaxChange: error %v, want ErrNotFinite", y, err)
		}
	}
	// x − a·Y overflows: ErrDiverged, not a clamped step.
	c.x[0] = -math.MaxFloat64
	if err := c.step([]float64{math.MaxFloat64}); !errors.Is(err, ErrDiverged) {
		t.Errorf("overflowing step with MaxChange: error %v, want ErrDiverged", err)
	}
	if c.x[0] != -math.MaxFloat64 || c.steps != 0 {
		t.Errorf("failed steps changed the core: x = %v, steps %d", c.x[0], c.steps)
	}
	c.x[0] = 1
	if err := c.step([]float64{10}); err != nil || c.x[0] != 0.5 || !c.limited {
		t.Errorf("limited step: err %v, x = %v, limited %v; want nil, 0.5, true", err, c.x[0], c.limited)
	}
}

func TestTunerBadInput(t *testing.T) {
	t.Run("settings", func(t *testing.T) {
		for _, tc := range []struct {
			name string
			x0   []float64
			s    TunerSettings
			want error
		}{
			{"nil gain", []float64{1}, TunerSettings{}, ErrSettings},
			{"gain 0", []float64{1}, TunerSettings{Gain: schedule.Constant(0)}, ErrSettings},
			{"gain < 0", []float64{1}, TunerSettings{Gain: schedule.Constant(-0.1)}, ErrSettings},
			{"power scale 0", []float64{1}, TunerSettings{Gain: schedule.Power{Scale: 0, Exponent: 1}}, ErrSettings},
			{"power scale < 0", []float64{1}, TunerSettings{Gain: schedule.Power{Scale: -1, Exponent: 0.7}}, ErrSettings},
			{"lower > upper", []float64{1}, TunerSettings{Gain: schedule.Constant(1), Projection: tunerBox1(2, 0)}, ErrSettings},
			{"NaN bound", []float64{1}, TunerSettings{Gain: schedule.Constant(1), Projection: tunerBox1(math.NaN(), 2)}, ErrSettings},
			{"box dimension", []float64{1, 1}, TunerSettings{Gain: schedule.Constant(1), Projection: tunerBox1(0, 2)}, ErrDimension},
			{"x0 outside box", []float64{3}, TunerSettings{Gain: schedule.Constant(1), Projection: tunerBox1(0, 2)}, ErrOutOfBounds},
			{"x0 beyond MaxAbs", []float64{3}, TunerSettings{Gain: schedule.Constant(1), MaxAbs: 2}, ErrOutOfBounds},
			{"x0 NaN", []float64{math.NaN()}, TunerSettings{Gain: schedule.Constant(1)}, ErrSettings}, // the starting-point rule of the pull drivers (checkInside)
			{"empty x0", nil, TunerSettings{Gain: schedule.Constant(1)}, ErrDimension},
			{"max change 0", []float64{1}, TunerSettings{Gain: schedule.Constant(1), MaxChange: []float64{0}}, ErrSettings},
			{"max change NaN", []float64{1}, TunerSettings{Gain: schedule.Constant(1), MaxChange: []float64{math.NaN()}}, ErrSettings},
			{"max change length", []float64{1}, TunerSettings{Gain: schedule.Constant(1), MaxChange: []float64{1, 1}}, ErrDimension},
			{"max lag", []float64{1}, TunerSettings{Gain: schedule.Constant(1), MaxLag: -2}, ErrSettings},
			{"burn-in", []float64{1}, TunerSettings{Gain: schedule.Constant(1), BurnIn: -1}, ErrSettings},
			{"MaxAbs", []float64{1}, TunerSettings{Gain: schedule.Constant(1), MaxAbs: math.Inf(1)}, ErrSettings},
		} {
			t.Run(tc.name, func(t *testing.T) {
				tu, err := NewTuner(tc.x0, tc.s)
				if !errors.Is(err, tc.want) || tu != nil {
					t.Fatalf("NewTuner = %v, %v; want nil, %v", tu, err, tc.want)
				}
				if strings.Contains(tc.name, "gain") && !strings.Contains(err.Error(), "Gain") {
					t.Errorf("error %q does not name the field Gain", err)
				}
			})
		}
	})

	t.Run("non-finite measurements", func(t *testing.T) {
		tu := newTestTuner(t, []float64{1, 1}, TunerSettings{Gain: schedule.Constant(1)})
		before := tunerSnap(t, tu)
		for i, y := range [][]float64{{math.NaN(), 0}, {0, math.Inf(1)}, {math.Inf(-1), 1}} {
			out, err := tu.Report(0, y)
			if out != Rejected || !errors.Is(err, ErrNotFinite) {
				t.Fatalf("Report(%v) = %v, %v; want rejected, ErrNotFinite", y, out, err)
			}
			if st := tu.Stats(); st.NotFinite != uint64(i+1) || st.Applied != 0 {
				t.Fatalf("Stats = %+v", st)
			}
		}
		after := tunerSnap(t, tu)
		// Only the counter differs.
		if !bytes.Equal(bytes.Replace(after, []byte(`"not_finite":3`), []byte(`"not_finite":0`), 1), before) {
			t.Fatalf("state changed:\n%s\n%s", before, after)
		}
	})

	t.Run("version from the future", func(t *testing.T) {
		tu := newTestTuner(t, []float64{1}, TunerSettings{Gain: schedule.Constant(1)})
		out, err := tu.Report1(1, 0.5)
		if out != Rejected || !errors.Is(err, ErrFutureVersion) {
			t.Fatalf("Report1(future) = %v, %v; want rejected, ErrFutureVersion", out, err)
		}
		if x, v := tu.Param1(); x != 1 || v != 0 || tu.Stats().Future != 1 {
			t.Fatalf("x = %v, version %d, stats %+v", x, v, tu.Stats())
		}
	})

	t.Run("after close", func(t *testing.T) {
		tu := newTestTuner(t, []float64{1}, TunerSettings{Gain: schedule.Constant(1)})
		s := tunerSnap(t, tu)
		if err := tu.Close(); err != nil {
			t.Fatal(err)
		}
		if out, err := tu.Report1(0, 0.5); out != Rejected || !errors.Is(err, ErrClosed) {
			t.Fatalf("Report after Close = %v, %v", out, err)
		}
		if err := tu.Override([]float64{2}); !errors.Is(err, ErrClosed) {
			t.Fatalf("Override after Close = %v", err)
		}
		if err := tu.Restore(s); !errors.Is(err, ErrClosed) {
			t.Fatalf("Restore after Close = %v", err)
		}
		if x, v := tu.Param1(); x != 1 || v != 0 {
			t.Fatalf("closed tuner reads %v (version %d)", x, v)
		}
		if st := tu.Stats(); st.AfterClose != 1 || st.Reports() != 1 {
			t.Fatalf("Stats = %+v", st)
		}
		if err := tu.Close(); err != nil {
			t.Fatal("second Close:", err)
		}
	})

	t.Run("wrong length", func(t *testing.T) {
		tu := newTestTuner(t, []float64{1}, TunerSettings{Gain: schedule.Constant(1)})
		if out, err := tu.Report(0, []float64{1, 2}); out != Rejected || !errors.Is(err, ErrDimension) {
			t.Fatalf("Report(len 2) = %v, %v", out, err)
		}
		func() {
			defer func() {
				if recover() == nil {
					t.Error("Param with a short dst did not panic")
				}
			}()
			tu.Param(nil)
		}()
	})

	t.Run("gain turns negative at run time", func(t *testing.T) {
		tu := newTestTuner(t, []float64{1}, TunerSettings{Gain: schedule.Func(func(k int) float64 { return 1 - float64(k) })})
		tu.Report1(0, 0.5) // a_0 = 1
		before := tunerSnap(t, tu)
		_, v := tu.Param1()
		tu.Report1(v, 0.5) // a_1 = 0: allowed, x stays but the step counts
		_, v = tu.Param1()
		before = tunerSnap(t, tu)
		out, err := tu.Report1(v, 0.5) // a_2 = −1
		if out != Rejected || !errors.Is(err, ErrGain) {
			t.Fatalf("Report with a_2 = −1: %v, %v; want rejected, ErrGain", out, err)
		}
		after := tunerSnap(t, tu)
		if !bytes.Equal(bytes.Replace(after, []byte(`"failed":1`), []byte(`"failed":0`), 1), before) {
			t.Fatalf("state changed:\n%s\n%s", before, after)
		}
	})

	t.Run("targets", func(t *testing.T) {
		for _, p := range []float64{0, 1, -0.5, math.NaN()} {
			if _, err := NewQuantileTuner(p, 1, TunerSettings{Gain: schedule.Constant(1)}); !errors.Is(err, ErrSettings) {
				t.Errorf("NewQuantileTuner(p = %v) error = %v, want ErrSettings", p, err)
			}
		}
		if _, err := NewSetpointTuner(1, 0, 1, TunerSettings{Gain: schedule.Constant(1)}); !errors.Is(err, ErrSettings) {
			t.Errorf("NewSetpointTuner(direction 0) error = %v", err)
		}
		if _, err := NewSetpointTuner(math.Inf(1), Rising, 1, TunerSettings{Gain: schedule.Constant(1)}); !errors.Is(err, ErrSettings) {
			t.Errorf("NewSetpointTuner(target +Inf) error = %v", err)
		}
		st, err := NewSetpointTuner(1, Rising, 1, TunerSettings{Gain: schedule.Constant(1)})
		if err != nil {
			t.Fatal(err)
		}
		if out, err := st.Observe(0, math.NaN()); out != Rejected || !errors.Is(err, ErrNotFinite) {
			t.Errorf("Observe(NaN) = %v, %v", out, err)
		}
		if st.Tuner().Stats().NotFinite != 1 {
			t.Errorf("NaN level not counted")
		}
	})
}

func TestTunerSnapshotRoundTrip(t *testing.T) {
	for _, tc := range []struct {
		name string
		gain schedule.Schedule
	}{
		{"power", schedule.Power{Scale: 0.5, Exponent: 0.7}},
		{"kesten", schedule.Kesten{Base: schedule.Harmonic(0.5)}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			s := TunerSettings{Gain: tc.gain, BurnIn: 5, Projection: Box{Lower: []float64{-3, -3}, Upper: []float64{3, 3}}}
			a := newTestTuner(t, []float64{2, -2}, s)
			rng := rand.New(rand.NewPCG(1, 2))
			x := make([]float64, 2)
			y := make([]float64, 2)
			feed := func(tu *Tuner, r *rand.Rand, n int) {
				for range n {
					v := tu.Param(x)
					y[0], y[1] = x[0]-1+r.NormFloat64(), x[1]+0.5+r.NormFloat64()
					tu.Report(v, y)
				}
			}
			feed(a, rng, 50)
			data := tunerSnap(t, a)
			b := newTestTuner(t, []float64{0, 0}, s)
			if err := b.Restore(data); err != nil {
				t.Fatalf("Restore: %v\n%s", err, data)
			}
			// Continue both with the same measurements: identical bits.
			ra, rb := rand.New(rand.NewPCG(3, 4)), rand.New(rand.NewPCG(3, 4))
			feed(a, ra, 50)
			feed(b, rb, 50)
			xa, xb := make([]float64, 2), make([]float64, 2)
			a.Param(xa)
			b.Param(xb)
			if xa[0] != xb[0] || xa[1] != xb[1] {
				t.Fatalf("restored tuner diverged: %v vs %v", xa, xb)
			}
			na, nb := a.Average(xa), b.Average(xb)
			if na != nb || xa[0] != xb[0] || xa[1] != xb[1] {
				t.Fatalf("averages differ: %v (%d) vs %v (%d)", xa, na, xb, nb)
			}
			sa, sb := a.Stats(), b.Stats()
			if sa.Applied != sb.Applied || sa.Steps != sb.Steps || sb.Restores != 1 {
				t.Fatalf("stats %+v vs %+v", sa, sb)
			}
		})
	}
}

func TestTunerRestoreRejects(t *testing.T) {
	s := TunerSettings{Gain: schedule.Constant(0.1), Projection: tunerBox1(0, 10)}
	src := newTestTuner(t, []float64{5}, s)
	for range 10 {
		_, v := src.Param1()
		src.Report1(v, 1)
	}
	good := string(tunerSnap(t, src))
	two := newTestTuner(t, []float64{1, 1}, TunerSettings{Gain: schedule.Constant(0.1)})
	otherDim := string(tunerSnap(t, two))
	for _, tc := range []struct {
		name string
		data string
		want []error
	}{
		{"empty", "", []error{ErrSnapshot}},
		{"truncated", good[:len(good)/2], []error{ErrSnapshot}},
		{"not JSON", "snapshot", []error{ErrSnapshot}},
		{"array", "[1,2]", []error{ErrSnapshot}},
		{"trailing data", good + "{}", []error{ErrSnapshot}},
		{"future format", strings.Replace(good, `"format":1`, `"format":2`, 1), []error{ErrSnapshot, ErrSnapshotVersion}},
		{"old format", strings.Replace(good, `"format":1`, `"format":0`, 1), []error{ErrSnapshot}},
		{"no format", strings.Replace(good, `"format":1,`, ``, 1), []error{ErrSnapshot}},
		{"other dimension", otherDim, []error{ErrSnapshot, ErrDimension}},
		{"dim lies", strings.Replace(good, `"dim":1`, `"dim":2`, 1), []error{ErrSnapshot, ErrDimension}},
		{"unknown field", strings.Replace(good, `{`, `{"extra":1,`, 1), []error{ErrSnapshot}},
		{"missing steps", strings.Replace(good, `"steps":10,`, ``, 1), []error{ErrSnapshot}},
		{"out of bounds", strings.Replace(good, `"x":[`, `"x":[1`, 1), []error{ErrSnapshot, ErrOutOfBounds}},
		{"averaged > steps", strings.Replace(good, `"averaged":10`, `"averaged":11`, 1), []error{ErrSnapshot}},
		{"negative steps", strings.Replace(good, `"steps":10`, `"steps":-1`, 1), []error{ErrSnapshot}},
		{"huge number", strings.Replace(good, `"x":[`, `"x":[1e999`, 1), []error{ErrSnapshot}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			dst := newTestTuner(t, []float64{1}, s)
			_, v := dst.Param1()
			dst.Report1(v, -1)
			before := tunerSnap(t, dst)
			xb, vb := dst.Param1()
			err := dst.Restore([]byte(tc.data))
			if err == nil {
				t.Fatalf("Restore(%q) = nil, want an error", tc.data)
			}
			for _, w := range tc.want {
				if !errors.Is(err, w) {
					t.Errorf("Restore error %q does not wrap %v", err, w)
				}
			}
			if !bytes.Equal(before, tunerSnap(t, dst)) {
				t.Errorf("failed Restore changed the state")
			}
			if x, v := dst.Param1(); x != xb || v != vb {
				t.Errorf("failed Restore changed the published value")
			}
		})
	}
	if !strings.Contains(good, `"steps":10,`) || !strings.Contains(good, `"averaged":10`) || !strings.Contains(good, `"dim":1`) {
		t.Fatalf("snapshot layout changed, fix the test cases: %s", good)
	}
}

// TestTunerRace has 8 goroutines send 10⁶ reports in total while 4 others
// read the parameter and an operator freezes, resumes and overrides. Every
// report must be accounted for, every read must be a published value (in
// the box; versions never go back on one reader).
func TestTunerRace(t *testing.T) {
	const (
		writers = 8
		total   = 1_000_000
		readers = 4
		p       = 0.9
	)
	var (
		hooked, lastHooked uint64
		hookErr            error
	)
	tu := newTestTuner(t, []float64{0.5}, TunerSettings{
		Gain:       schedule.Constant(0.01),
		Projection: tunerBox1(0, 1),
		MaxChange:  []float64{0.05},
		MaxLag:     2,
		OnUpdate: func(u Update) { // runs under the update lock: plain variables are safe
			if u.Version != lastHooked+1 {
				hookErr = fmt.Errorf("hook saw version %d after %d", u.Version, lastHooked)
			}
			lastHooked = u.Version
			hooked++
		},
	})
	start := time.Now()
	var sent, applied, dropped atomic.Uint64
	var wg sync.WaitGroup
	for w := range writers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			rng := rand.New(rand.NewPCG(uint64(w), 99))
			var s, a, d uint64
			for range total / writers {
				x, v := tu.Param1()
				y := -p
				if rng.Float64() <= x {
					y = 1 - p
				}
				out, err := tu.Report1(v, y)
				s++
				switch {
				case err != nil:
					t.Errorf("Report1: %v", err)
					return
				case out == Applied:
					a++
				case out == Stale || out == Frozen:
					d++
				}
			}
			sent.Add(s)
			applied.Add(a)
			dropped.Add(d)
		}()
	}
	stop := make(chan struct{})
	var rwg sync.WaitGroup
	for range readers {
		rwg.Add(1)
		go func() {
			defer rwg.Done()
			last := uint64(0)
			dst := make([]float64, 1)
			for i := 0; ; i++ {
				select {
				case <-stop:
					return
				default:
				}
				v := tu.Param(dst)
				if v < last || dst[0] < 0 || dst[0] > 1 {
					t.Errorf("read %v at version %d after version %d", dst[0], v, last)
					return
				}
				last = v
			}
		}()
	}
	rwg.Add(1)
	go func() { // operator: short freezes, occasional overrides
		defer rwg.Done()
		for i := 0; ; i++ {
			select {
			case <-stop:
				return
			case <-time.After(2 * time.Millisecond):
			}
			if i%4 == 0 {
				tu.Freeze()
				time.Sleep(100 * time.Microsecond)
				tu.Resume()
			}
			if i%5 == 0 {
				tu.Override([]float64{0.5})
			}
			tu.Stats()
		}
	}()
	wg.Wait()
	close(stop)
	rwg.Wait()
	tu.Resume()
	st := tu.Stats()
	if sent.Load() != total || st.Reports() != total {
		t.Fatalf("sent %d, tuner counted %d, want %d", sent.Load(), st.Reports(), total)
	}
	if applied.Load()+dropped.Load() != sent.Load() || st.Applied+st.Dropped() != total {
		t.Fatalf("applied %d + dropped %d != sent %d (tuner: %+v)", applied.Load(), dropped.Load(), sent.Load(), st)
	}
	if st.Applied != applied.Load() || st.Dropped() != dropped.Load() {
		t.Fatalf("callers saw applied %d, dropped %d; tuner counted %+v", applied.Load(), dropped.Load(), st)
	}
	if st.Version != st.Applied+st.Overrides {
		t.Fatalf("version %d != applied %d + overrides %d", st.Version, st.Applied, st.Overrides)
	}
	if hookErr != nil || hooked != st.Applied+st.Overrides {
		t.Fatalf("hook: %v; called %d times for %d updates and %d overrides", hookErr, hooked, st.Applied, st.Overrides)
	}
	t.Logf("%d reports from %d goroutines in %v: applied %d, stale %d, frozen %d, overrides %d",
		total, writers, time.Since(start), st.Applied, st.Stale, st.Frozen, st.Overrides)
}

func TestTunerAllocs(t *testing.T) {
	tu := newTestTuner(t, []float64{0.5, 0.5}, TunerSettings{
		Gain: schedule.Power{Scale: 0.1, Exponent: 0.7}, Projection: Box{Lower: []float64{0, 0}, Upper: []float64{1, 1}},
		MaxChange: []float64{0.1, 0.1}, OnUpdate: func(Update) {},
	})
	x := make([]float64, 2)
	y := []float64{0.01, -0.01}
	if n := testing.AllocsPerRun(1000, func() {
		v := tu.Param(x)
		if out, _ := tu.Report(v, y); out != Applied {
			t.Fatal("not applied")
		}
	}); n != 0 {
		t.Errorf("Param+Report allocate %v times per call, want 0", n)
	}
	if n := testing.AllocsPerRun(1000, func() { tu.Report(0, y) }); n != 0 {
		t.Errorf("stale Report allocates %v times per call, want 0", n)
	}
	q, err := NewQuantileTuner(0.9, 1, TunerSettings{Gain: schedule.Constant(0.01)})
	if err != nil {
		t.Fatal(err)
	}
	if n := testing.AllocsPerRun(1000, func() {
		x, v := q.Param()
		q.Observe(v, x > 0.5)
	}); n != 0 {
		t.Errorf("QuantileTuner Param+Observe allocate %v times per call, want 0", n)
	}
	sp, err := NewSetpointTuner(1, Falling, 1, TunerSettings{Gain: schedule.Constant(0.01)})
	if err != nil {
		t.Fatal(err)
	}
	if n := testing.AllocsPerRun(1000, func() {
		x, v := sp.Param()
		sp.Observe(v, 2-x)
	}); n != 0 {
		t.Errorf("SetpointTuner Param+Observe allocate %v times per call, want 0", n)
	}
}

// TestSetpointTuner drives a noisy level m(θ) = 3 − 2θ (falling) to 1; the
// root is θ* = 1. With a decreasing gain and averaging the estimate's
// standard error is σ/(|m′|·√n) (Polyak & Juditsky 1992, Theorem 2): with
// σ = 0.5, |m′| = 2 and n = 20000 averaged iterates that is 0.0018; the
// tolerance is 4 of them.
func TestSetpointTuner(t *testing.T) {
	sp, err := NewSetpointTuner(1, Falling, 0, TunerSettings{
		Gain:   schedule.Power{Scale: 0.5, Exponent: 0.7},
		BurnIn: 1000,
	})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	for range 21000 {
		x, v := sp.Param()
		if _, err := sp.Observe(v, 3-2*x+0.5*rng.NormFloat64()); err != nil {
			t.Fatal(err)
		}
	}
	avg := make([]float64, 1)
	n := sp.Tuner().Average(avg)
	se := 0.5 / (2 * math.Sqrt(float64(n)))
	if math.Abs(avg[0]-1) > 4*se {
		t.Errorf("setpoint knob = %.5g, want 1 ± %.3g", avg[0], 4*se)
	}
}

// TestTunerReadsAreNotTorn publishes vectors whose coordinates are always
// equal (equal start, equal measurements) from two writers while two
// readers check every copy they get: a read mixing two versions would
// show unequal coordinates.
func TestTunerReadsAreNotTorn(t *testing.T) {
	const d, updates = 5, 200_000
	tu := newTestTuner(t, []float64{1, 1, 1, 1, 1}, TunerSettings{Gain: schedule.Constant(0.5), MaxLag: 1 << 20})
	var wg sync.WaitGroup
	var done atomic.Bool
	for w := range 2 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			rng := rand.New(rand.NewPCG(uint64(w), 1))
			x := make([]float64, d)
			y := make([]float64, d)
			for range updates / 2 {
				v := tu.Param(x)
				u := rng.NormFloat64() + x[0] - 1 // keeps x near 1
				for i := range y {
					y[i] = u
				}
				tu.Report(v, y)
			}
		}()
	}
	var reads atomic.Int64
	var rwg sync.WaitGroup
	for range 2 {
		rwg.Add(1)
		go func() {
			defer rwg.Done()
			x := make([]float64, d)
			for !done.Load() {
				tu.Param(x)
				reads.Add(1)
				for i := 1; i < d; i++ {
					if x[i] != x[0] {
						t.Errorf("torn read: %v", x)
						return
					}
				}
			}
		}()
	}
	wg.Wait()
	done.Store(true)
	rwg.Wait()
	if st := tu.Stats(); st.Applied != updates {
		t.Fatalf("applied %d of %d", st.Applied, updates)
	}
	t.Logf("%d reads checked during %d updates", reads.Load(), updates)
}

// TestTunerMatchesPullDriver feeds a tuner, one report at a time, the
// measurements RobbinsMonro draws from the same oracle and stream: both
// drive the one update core, so iterates and averages agree bit for bit.
func TestTunerMatchesPullDriver(t *testing.T) {
	h := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
		dst[0] = 2*(x[0]-1) + rng.NormFloat64()
		dst[1] = x[1] + 0.5*x[0] + rng.NormFloat64()
		return nil
	})
	box := Box{Lower: []float64{-2, -2}, Upper: []float64{2, 2}}
	gain := schedule.Power{Scale: 0.3, Exponent: 0.7}
	x0 := []float64{-1.5, 1.5}
	const n = 500
	r, err := RobbinsMonro(context.Background(), h, x0, Settings{Gain: gain, MaxSteps: n, BurnIn: 50, Projection: box, Seed: 9})
	if err != nil {
		t.Fatal(err)
	}
	tu := newTestTuner(t, x0, TunerSettings{Gain: gain, BurnIn: 50, Projection: box})
	rng := rand.New(rand.NewPCG(9, streamMeasure))
	x := make([]float64, 2)
	y := make([]float64, 2)
	for range n {
		v := tu.Param(x)
		h.Measure(y, x, rng)
		if out, err := tu.Report(v, y); out != Applied {
			t.Fatalf("report %v, %v", out, err)
		}
	}
	avg := make([]float64, 2)
	m := tu.Average(avg)
	tu.Param(x)
	for i := range x {
		if x[i] != r.X[i] || avg[i] != r.Average[i] {
			t.Fatalf("tuner x = %v, avg = %v; RobbinsMonro x = %v, avg = %v", x, avg, r.X, r.Average)
		}
	}
	if m != r.Averaged {
		t.Fatalf("averaged %d vs %d", m, r.Averaged)
	}
}
