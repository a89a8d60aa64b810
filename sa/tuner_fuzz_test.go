package sa

import (
	"bytes"
	"errors"
	"math"
	"testing"

	"github.com/stochroot/stochroot/schedule"
)

// FuzzTunerRestore feeds arbitrary bytes to Restore. Whatever the input,
// Restore must not panic; when it fails the tuner must be exactly as it was
// (same snapshot, same published value and version); when it succeeds the
// published parameter must be finite and inside the bounds, and a snapshot
// of the result must restore again.
func FuzzTunerRestore(f *testing.F) {
	s := TunerSettings{Gain: schedule.Kesten{Base: schedule.Harmonic(0.5)}, Projection: tunerBox1(-5, 5), MaxChange: []float64{1}}
	src, err := NewTuner([]float64{1}, s)
	if err != nil {
		f.Fatal(err)
	}
	for i := range 7 {
		_, v := src.Param1()
		src.Report1(v, float64(i%3)-1)
	}
	good, _ := src.Snapshot()
	f.Add(good)
	f.Add(good[:len(good)/2])
	f.Add([]byte(`{"format":2}`))
	f.Add([]byte(`{"format":1}`))
	f.Add([]byte(`{"format":1,"dim":1,"version":0,"x":[0],"average":[0],"averaged":0,"steps":0,"gain_index":0,"active":false,"limited":false,"frozen":false,"counts":{}}`))
	f.Add([]byte(`{"format":1,"dim":2,"version":0,"x":[0,0],"average":[0,0],"averaged":0,"steps":0,"gain_index":0,"active":false,"limited":false,"frozen":false,"counts":{}}`))
	f.Add([]byte(`{"format":1,"dim":1,"version":18446744073709551615,"x":[0],"average":[0],"averaged":0,"steps":0,"gain_index":0,"active":false,"limited":false,"frozen":true,"counts":{}}`))
	f.Add([]byte(`null`))
	f.Add([]byte(``))
	f.Fuzz(func(t *testing.T, data []byte) {
		tu, err := NewTuner([]float64{2}, s)
		if err != nil {
			t.Fatal(err)
		}
		_, v := tu.Param1()
		tu.Report1(v, 0.5)
		before, _ := tu.Snapshot()
		xb, vb := tu.Param1()
		if err := tu.Restore(data); err != nil {
			if !errors.Is(err, ErrSnapshot) {
				t.Fatalf("Restore error %v does not wrap ErrSnapshot", err)
			}
			after, _ := tu.Snapshot()
			if !bytes.Equal(before, after) {
				t.Fatalf("failed Restore changed the state:\n%s\n%s", before, after)
			}
			if x, v := tu.Param1(); x != xb || v != vb {
				t.Fatalf("failed Restore changed the published value")
			}
			return
		}
		x, v := tu.Param1()
		if math.IsNaN(x) || x < -5 || x > 5 || v <= vb {
			t.Fatalf("restored x = %v, version %d (before %d)", x, v, vb)
		}
		again, err := tu.Snapshot()
		if err != nil {
			t.Fatal(err)
		}
		other, _ := NewTuner([]float64{0}, s)
		if err := other.Restore(again); err != nil {
			t.Fatalf("snapshot of a restored tuner does not restore: %v\n%s", err, again)
		}
	})
}
