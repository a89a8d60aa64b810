package sa

import (
	"bytes"
	"errors"
	"runtime"
	"strings"
	"testing"
	"time"

	"github.com/stochroot/stochroot/schedule"
)

// bigSnapshot returns a snapshot of a 1-D tuner whose "x" array is padded
// with numbers to about n bytes: the input of defect 7 of issue 9 (a 40 MB
// snapshot for a 1-D tuner took 4.7 s and 690 MB to reject).
func bigSnapshot(t testing.TB, n int, item string) []byte {
	t.Helper()
	tu := newTestTuner(t, []float64{1}, TunerSettings{Gain: schedule.Constant(0.1)})
	good := string(tunerSnap(t, tu))
	pad := strings.Repeat(item, n/len(item))
	return []byte(strings.Replace(good, `"x":[`, `"x":[`+pad, 1))
}

// TestTunerRestoreSizeCap checks that an oversized snapshot is refused
// before it is parsed: little time, little memory, the ErrSnapshot sentinel,
// and the tuner unchanged.
func TestTunerRestoreSizeCap(t *testing.T) {
	for _, tc := range []struct{ name, item string }{
		{"short numbers", "0,"},
		{"long numbers", "1.2345678901234567e-300,"},
	} {
		t.Run(tc.name, func(t *testing.T) { testRestoreSizeCap(t, bigSnapshot(t, 40<<20, tc.item)) })
	}
}

func testRestoreSizeCap(t *testing.T, data []byte) {
	tu := newTestTuner(t, []float64{1}, TunerSettings{Gain: schedule.Constant(0.1)})
	before := tunerSnap(t, tu)
	var m0, m1 runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&m0)
	start := time.Now()
	err := tu.Restore(data)
	el := time.Since(start)
	runtime.ReadMemStats(&m1)
	alloc := m1.TotalAlloc - m0.TotalAlloc
	t.Logf("Restore of a %d-byte snapshot into a 1-D tuner: %v, %d bytes allocated, error %v", len(data), el, alloc, firstLine(err))
	if !errors.Is(err, ErrSnapshot) {
		t.Fatalf("Restore(40 MB) = %v, want an error wrapping ErrSnapshot", err)
	}
	// The cap is checked before any parsing: nothing proportional to the
	// input may be allocated (the limit leaves room for the error message).
	if alloc > 64<<10 {
		t.Errorf("Restore allocated %d bytes to reject an oversized snapshot; want < 64 KiB", alloc)
	}
	if !bytes.Equal(before, tunerSnap(t, tu)) {
		t.Errorf("failed Restore changed the state")
	}
}

func firstLine(err error) string {
	if err == nil {
		return "<nil>"
	}
	s := err.Error()
	if len(s) > 120 {
		s = s[:120] + "…"
	}
	return s
}
