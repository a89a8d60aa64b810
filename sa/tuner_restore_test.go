package sa

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"regexp"
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
	good := tunerSnap(t, tu)
	i := bytes.Index(good, []byte(`"x":[`)) + len(`"x":[`)
	pad := bytes.Repeat([]byte(item), n/len(item))
	out := make([]byte, 0, len(good)+len(pad))
	return append(append(append(out, good[:i]...), pad...), good[i:]...)
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

// snapFields builds a snapshot object from raw JSON values in the order
// Snapshot writes them; a value "-" leaves the field out.
func snapFields(f map[string]string) string {
	var b strings.Builder
	b.WriteString("{")
	first := true
	for _, name := range snapshotFields {
		v, ok := f[name]
		if !ok || v == "-" {
			continue
		}
		if !first {
			b.WriteString(",")
		}
		first = false
		fmt.Fprintf(&b, "%q:%s", name, v)
	}
	b.WriteString("}")
	return b.String()
}

// TestTunerRestoreInvariants: Restore refuses every snapshot that the live
// tuner could not have written (defect 7 of issue 9), and leaves the tuner
// as it was.
func TestTunerRestoreInvariants(t *testing.T) {
	plain := TunerSettings{Gain: schedule.Constant(0.1), Projection: tunerBox1(0, 10), BurnIn: 2, MaxAbs: 8}
	adaptive := TunerSettings{Gain: schedule.Kesten{Base: schedule.Harmonic(0.5)}, Projection: tunerBox1(0, 10)}
	const counts = `{"applied":5,"stale":1,"frozen":0,"not_finite":0,"future":0,"failed":0,"after_close":0,"overrides":0,"restores":0}`
	base := func() map[string]string {
		return map[string]string{
			"format": "1", "dim": "1", "version": "5", "x": "[5]", "average": "[4]", "averaged": "3",
			"steps": "5", "gain_index": "5", "active": "false", "limited": "false", "frozen": "false", "counts": counts,
		}
	}
	with := func(kv ...string) string {
		f := base()
		for i := 0; i < len(kv); i += 2 {
			f[kv[i]] = kv[i+1]
		}
		return snapFields(f)
	}
	good := with()
	for _, s := range []TunerSettings{plain, adaptive} {
		tu := newTestTuner(t, []float64{1}, s)
		if err := tu.Restore([]byte(good)); err != nil {
			t.Fatalf("the base snapshot does not restore: %v\n%s", err, good)
		}
	}
	cnt := func(name, v string) string {
		return regexp.MustCompile(`"`+name+`":-?[0-9]+`).ReplaceAllString(counts, `"`+name+`":`+v)
	}
	for _, tc := range []struct {
		name string
		s    TunerSettings
		data string
		want error // besides ErrSnapshot
	}{
		// Counters near MaxInt: the step counter would overflow.
		{"steps MaxInt", plain, with("steps", "9223372036854775807", "gain_index", "9223372036854775807", "counts", cnt("applied", "9223372036854775807")), nil},
		{"steps 2^53+1", plain, with("steps", "9007199254740993", "gain_index", "9007199254740993", "counts", cnt("applied", "9007199254740993")), nil},
		{"negative version", plain, with("version", "-1"), nil},
		{"counter MaxUint64", plain, with("counts", cnt("stale", "18446744073709551615")), nil},
		{"counter 2^53+1", plain, with("counts", cnt("stale", "9007199254740993")), nil},
		{"negative averaged", plain, with("averaged", "-1"), nil},
		{"negative counter", plain, with("counts", cnt("stale", "-1")), nil},
		{"fractional steps", plain, with("steps", "5.5"), nil},
		{"steps in exponent form", plain, with("steps", "5e0"), nil},
		// Relations between counters.
		{"averaged > steps − BurnIn", plain, with("averaged", "4"), nil},
		{"steps != applied", plain, with("steps", "6", "gain_index", "6"), nil},
		{"gain index != steps, fixed gain", plain, with("gain_index", "4"), nil},
		{"gain index > steps, adaptive", adaptive, with("gain_index", "6"), nil},
		{"previous measurement, fixed gain", plain, with("previous_measurement", "[1]"), nil},
		{"previous measurement before any step", adaptive, with("steps", "0", "gain_index", "0", "averaged", "0", "average", "[0]", "previous_measurement", "[1]", "counts", cnt("applied", "0")), nil},
		{"average without averaged iterates", plain, with("averaged", "0"), nil},
		{"active before any step", plain, with("steps", "0", "gain_index", "0", "averaged", "0", "average", "[0]", "active", "true", "counts", cnt("applied", "0")), nil},
		{"limited without MaxChange", plain, with("limited", "true"), nil},
		// Bounds.
		{"x outside the box", plain, with("x", "[-1]"), ErrOutOfBounds},
		{"x beyond MaxAbs", plain, with("x", "[9]"), ErrOutOfBounds},
		{"average outside the box", adaptive, with("average", "[1e300]"), ErrOutOfBounds},
		{"average beyond MaxAbs", plain, with("average", "[9]"), ErrOutOfBounds},
		// Shape of the JSON.
		{"x of length 2", plain, with("x", "[5,5]"), ErrDimension},
		{"average empty", plain, with("average", "[]"), ErrDimension},
		{"dim 0", plain, with("dim", "0"), ErrDimension},
		{"dim MaxInt", plain, with("dim", "9223372036854775807"), ErrDimension},
		{"dim huge", plain, with("dim", "1e300"), nil},
		{"non-finite x", plain, with("x", "[1e999]"), nil},
		{"NaN as a string", plain, with("x", `["NaN"]`), nil},
		{"null x", plain, with("x", "null"), nil},
		{"null entry of x", plain, with("x", "[null]"), nil},
		{"null frozen", plain, with("frozen", "null"), nil},
		{"null counts", plain, with("counts", "null"), nil},
		{"null counter", plain, with("counts", strings.Replace(counts, `"stale":1`, `"stale":null`, 1)), nil},
		{"missing frozen", plain, with("frozen", "-"), nil},
		{"missing x", plain, with("x", "-"), nil},
		{"missing counter", plain, with("counts", strings.Replace(counts, `"stale":1,`, ``, 1)), nil},
		{"unknown counter", plain, with("counts", strings.Replace(counts, `{`, `{"dropped":0,`, 1)), nil},
		{"field name in other case", plain, strings.Replace(good, `"steps"`, `"Steps"`, 1), nil},
		{"duplicate field", plain, strings.Replace(good, `"steps":5`, `"steps":5,"steps":5`, 1), nil},
		{"duplicate field, second differs", plain, strings.Replace(good, `"x":[5]`, `"x":[5],"x":[-500]`, 1), nil},
		{"duplicate counter", plain, with("counts", strings.Replace(counts, `"stale":1`, `"stale":1,"stale":1`, 1)), nil},
		{"boolean as number", plain, with("frozen", "0"), nil},
		{"format null", plain, with("format", "null"), nil},
		{"format huge", plain, with("format", "1e300"), nil},
		{"trailing value", plain, good + " 1", nil},
	} {
		t.Run(tc.name, func(t *testing.T) {
			tu := newTestTuner(t, []float64{1}, tc.s)
			_, v := tu.Param1()
			tu.Report1(v, -1)
			before := tunerSnap(t, tu)
			xb, vb := tu.Param1()
			err := tu.Restore([]byte(tc.data))
			if !errors.Is(err, ErrSnapshot) || (tc.want != nil && !errors.Is(err, tc.want)) {
				t.Fatalf("Restore(%s) = %v; want ErrSnapshot and %v", tc.data, err, tc.want)
			}
			if !bytes.Equal(before, tunerSnap(t, tu)) {
				t.Errorf("failed Restore changed the state")
			}
			if x, v := tu.Param1(); x != xb || v != vb {
				t.Errorf("failed Restore changed the published value")
			}
		})
	}
}

// TestTunerRestoreCapFitsSnapshots: the size cap never refuses what
// Snapshot writes, even indented, with the longest numbers and the largest
// counters.
func TestTunerRestoreCapFitsSnapshots(t *testing.T) {
	for _, d := range []int{1, 3, 1000} {
		x := make([]float64, d)
		for i := range x {
			x[i] = -0.0000012345678901234567 // 25 bytes in encoding/json, the longest
		}
		tu := newTestTuner(t, x, TunerSettings{Gain: schedule.Kesten{Base: schedule.Harmonic(1)}})
		y := make([]float64, d)
		for i := range y {
			y[i] = -1.2345678901234567e-300
		}
		tu.Report(0, y)
		var s snapshot
		if err := json.Unmarshal(tunerSnap(t, tu), &s); err != nil {
			t.Fatal(err)
		}
		s.Version = math.MaxUint64
		s.Counts = snapshotCount{MaxSnapshotCount, MaxSnapshotCount, MaxSnapshotCount, MaxSnapshotCount, MaxSnapshotCount, MaxSnapshotCount, MaxSnapshotCount, MaxSnapshotCount, MaxSnapshotCount}
		s.Counts.Applied = 1
		data, err := json.MarshalIndent(s, "\t\t\t\t", "\t\t\t\t")
		if err != nil {
			t.Fatal(err)
		}
		if len(data) > MaxSnapshotBytes(d) {
			t.Fatalf("d = %d: an indented snapshot of %d bytes exceeds MaxSnapshotBytes = %d", d, len(data), MaxSnapshotBytes(d))
		}
		other := newTestTuner(t, make([]float64, d), TunerSettings{Gain: schedule.Kesten{Base: schedule.Harmonic(1)}})
		if err := other.Restore(data); err != nil {
			t.Fatalf("d = %d: %v", d, err)
		}
		t.Logf("d = %d: indented snapshot %d bytes, cap %d", d, len(data), MaxSnapshotBytes(d))
		// One byte over the cap is refused.
		big := append(bytes.Repeat([]byte(" "), MaxSnapshotBytes(d)+1-len(data)), data...)
		if err := other.Restore(big); !errors.Is(err, ErrSnapshot) {
			t.Fatalf("d = %d: %d bytes (cap %d) not refused: %v", d, len(big), MaxSnapshotBytes(d), err)
		}
	}
	if MaxSnapshotBytes(math.MaxInt) != math.MaxInt || MaxSnapshotBytes(-1) != MaxSnapshotBytes(0) {
		t.Errorf("MaxSnapshotBytes does not saturate")
	}
}

// TestTunerCountersStayRestorable: near MaxSnapshotCount the live tuner
// refuses updates and its counters stop, so its own snapshot always
// restores (a step counter at MaxInt made every later report fail and the
// snapshot unusable before; defect 7 of issue 9).
func TestTunerCountersStayRestorable(t *testing.T) {
	const c = MaxSnapshotCount
	data := fmt.Sprintf(`{"format":1,"dim":1,"version":3,"x":[1],"average":[1],"averaged":%d,"steps":%d,"gain_index":%d,"active":false,"limited":false,"frozen":false,`+
		`"counts":{"applied":%d,"stale":%d,"frozen":0,"not_finite":0,"future":0,"failed":%d,"after_close":0,"overrides":0,"restores":%d}}`, c-1, c-1, c-1, c-1, c, c, c)
	tu := newTestTuner(t, []float64{0}, TunerSettings{Gain: schedule.Constant(0.5), Projection: tunerBox1(-2, 2)})
	if err := tu.Restore([]byte(data)); err != nil {
		t.Fatal(err)
	}
	_, v := tu.Param1()
	if out, err := tu.Report1(v, 1); out != Applied || err != nil {
		t.Fatalf("last step below the cap: %v, %v", out, err)
	}
	x, v := tu.Param1()
	if out, err := tu.Report1(v, 1); out != Rejected || !errors.Is(err, ErrGain) {
		t.Fatalf("step at the cap: %v, %v; want rejected, ErrGain", out, err)
	}
	if out, _ := tu.Report1(0, 1); out != Stale { // version 0 predates the restore
		t.Fatalf("stale report: %v", out)
	}
	st := tu.Stats()
	if x2, _ := tu.Param1(); x2 != x || st.Steps != c || st.Applied != c || st.Stale != c || st.Failed != c || st.Restores != c {
		t.Fatalf("x %v → %v, stats %+v", x, x2, st)
	}
	other := newTestTuner(t, []float64{0}, TunerSettings{Gain: schedule.Constant(0.5), Projection: tunerBox1(-2, 2)})
	if err := other.Restore(tunerSnap(t, tu)); err != nil {
		t.Fatalf("the snapshot of a tuner at the cap does not restore: %v", err)
	}
}
