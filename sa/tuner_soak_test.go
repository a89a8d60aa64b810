package sa

import (
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"runtime"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/stochroot/stochroot/schedule"
)

// TestTunerSoak runs 32 reporting goroutines against one tuner while other
// goroutines read the parameter, snapshot and restore it, freeze and resume
// it, override it and read its counters, and the OnUpdate hook panics now
// and then (every caller recovers). It checks:
//   - no deadlock: a watchdog fails the test if a stage does not finish;
//   - every read (Param, lock-free) lies in the constraint set;
//   - versions never go back for a reader, and the hook sees every version
//     exactly once in order (it runs under the update lock);
//   - counters: Applied == Steps whenever Stats is read, and in the stage
//     without Restore (which replaces the counters by the snapshot's) the
//     counters grow by exactly what the callers saw, report by report.
//
// The default run sends 64 000 reports (a few seconds with -race);
// STOCHROOT_SOAK=1 sends 30 000 000 (run it without -race; a few minutes).
func TestTunerSoak(t *testing.T) {
	total := 64_000
	watchdog := 30 * time.Second
	if os.Getenv("STOCHROOT_SOAK") == "1" {
		total, watchdog = 30_000_000, 30*time.Minute
	} else if testing.Short() {
		total = 16_000
	}
	const (
		reporters = 32
		lo, hi    = 0.0, 1.0
		panicEach = 101 // the hook panics on every 101st call
	)
	var (
		hookCalls, lastVersion uint64
		hookErr                error
	)
	tu := newTestTuner(t, []float64{0.5, 0.5}, TunerSettings{
		Gain:       schedule.Constant(0.02),
		Projection: Box{Lower: []float64{lo, lo}, Upper: []float64{hi, hi}},
		MaxChange:  []float64{0.1, 0.1},
		MaxLag:     4,
		MaxAbs:     2,
		OnUpdate: func(u Update) { // under the update lock: plain variables are safe
			if u.Version != lastVersion+1 && hookErr == nil {
				hookErr = fmt.Errorf("hook saw version %d after %d", u.Version, lastVersion)
			}
			lastVersion = u.Version
			hookCalls++
			if hookCalls%panicEach == 0 {
				panic("soak hook")
			}
		},
	})
	inside := func(x []float64) bool { return x[0] >= lo && x[0] <= hi && x[1] >= lo && x[1] <= hi }

	// stage runs n reports and the operators; withRestore adds a goroutine
	// that snapshots and restores. It returns what the callers saw.
	type seen struct{ sent, applied, stale, frozen, failed, panics atomic.Uint64 }
	stage := func(name string, n int, withRestore bool) *seen {
		var s seen
		var fail atomic.Pointer[string]
		failf := func(format string, args ...any) {
			m := fmt.Sprintf(format, args...)
			fail.CompareAndSwap(nil, &m)
		}
		stop := make(chan struct{})
		var ops, reps sync.WaitGroup
		for w := range reporters {
			reps.Add(1)
			go func() {
				defer reps.Done()
				rng := rand.New(rand.NewPCG(uint64(w), 7))
				x, y := make([]float64, 2), make([]float64, 2)
				for range n / reporters {
					v := tu.Param(x)
					if !inside(x) {
						failf("reporter read %v (version %d) outside the box", x, v)
						return
					}
					y[0], y[1] = x[0]-0.3+rng.NormFloat64(), x[1]-0.7+rng.NormFloat64()
					var out Outcome
					var err error
					p := recovered(func() { out, err = tu.Report(v, y) })
					s.sent.Add(1)
					switch {
					case p != nil:
						s.panics.Add(1) // the hook panicked after the update was applied
					case err != nil:
						s.failed.Add(1)
						failf("Report: %v", err)
					case out == Applied:
						s.applied.Add(1)
					case out == Stale:
						s.stale.Add(1)
					case out == Frozen:
						s.frozen.Add(1)
					}
				}
			}()
		}
		loop := func(f func(i int)) {
			ops.Add(1)
			go func() {
				defer ops.Done()
				for i := 0; ; i++ {
					select {
					case <-stop:
						return
					default:
					}
					f(i)
				}
			}()
		}
		for range 2 { // readers of the lock-free value
			last := uint64(0)
			dst := make([]float64, 2)
			loop(func(int) {
				v := tu.Param(dst)
				if v < last || !inside(dst) {
					failf("read %v at version %d after version %d", dst, v, last)
				}
				last = v
			})
		}
		loop(func(i int) { // operator: freeze, resume, override, counters
			time.Sleep(200 * time.Microsecond)
			switch i % 8 {
			case 0:
				tu.Freeze()
			case 1:
				tu.Resume()
			case 3:
				recovered(func() {
					if err := tu.Override([]float64{0.5, 0.5}); err != nil {
						failf("Override: %v", err)
					}
				})
			}
			if st := tu.Stats(); st.Applied != uint64(st.Steps) {
				failf("Stats: applied %d, steps %d", st.Applied, st.Steps)
			}
			if _, err := tu.Snapshot(); err != nil {
				failf("Snapshot: %v", err)
			}
		})
		if withRestore {
			loop(func(int) {
				time.Sleep(500 * time.Microsecond)
				data, err := tu.Snapshot()
				if err != nil {
					failf("Snapshot: %v", err)
					return
				}
				recovered(func() {
					if err := tu.Restore(data); err != nil {
						failf("Restore of the tuner's own snapshot: %v", err)
					}
				})
			})
		}
		done := make(chan struct{})
		go func() {
			reps.Wait()
			close(stop)
			ops.Wait()
			close(done)
		}()
		select {
		case <-done:
		case <-time.After(watchdog):
			buf := make([]byte, 1<<20)
			buf = buf[:runtime.Stack(buf, true)]
			t.Fatalf("%s: deadlock: not done after %v\n%s", name, watchdog, buf)
		}
		if m := fail.Load(); m != nil {
			t.Fatalf("%s: %s", name, *m)
		}
		tu.Resume()
		return &s
	}

	start := time.Now()
	half := total / 2
	stage("with restores", half, true)
	before := tu.Stats()
	s := stage("without restores", half, false)
	after := tu.Stats()
	if hookErr != nil {
		t.Fatal(hookErr)
	}
	sent := s.sent.Load()
	if want := uint64(half / reporters * reporters); sent != want {
		t.Fatalf("sent %d reports, want %d", sent, want)
	}
	d := func(a, b uint64) uint64 { return a - b }
	if got := d(after.Reports(), before.Reports()); got != sent {
		t.Fatalf("the tuner counted %d reports, the callers sent %d", got, sent)
	}
	if d(after.Applied, before.Applied) != s.applied.Load()+s.panics.Load() ||
		d(after.Stale, before.Stale) != s.stale.Load() || d(after.Frozen, before.Frozen) != s.frozen.Load() ||
		d(after.Failed, before.Failed) != s.failed.Load() {
		t.Fatalf("counters grew by %+v → %+v; callers saw applied %d (+%d with a hook panic), stale %d, frozen %d, failed %d",
			before, after, s.applied.Load(), s.panics.Load(), s.stale.Load(), s.frozen.Load(), s.failed.Load())
	}
	if after.Version != lastVersion {
		t.Fatalf("version %d, hook saw %d last", after.Version, lastVersion)
	}
	// Closing works after all of it.
	returnsWithin(t, 5*time.Second, "Close", func() { tu.Close() })
	if _, err := tu.Report(after.Version, []float64{0, 0}); !errors.Is(err, ErrClosed) {
		t.Fatalf("Report after Close: %v", err)
	}
	t.Logf("%d reports from %d goroutines in %v; last stage: %+v; hook calls %d (%d panicked)",
		total, reporters, time.Since(start), after, hookCalls, hookCalls/panicEach)
}
