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
// published parameter must be finite and inside the bounds, a snapshot of
// the result must restore again, and the restored tuner must take a report
// (no counter near overflow). Input above MaxSnapshotBytes is refused
// without parsing.
func FuzzTunerRestore(f *testing.F) {
	fuzzRestore(f, TunerSettings{Gain: schedule.Kesten{Base: schedule.Harmonic(0.5)}, Projection: tunerBox1(-5, 5), MaxChange: []float64{1}})
}

// FuzzTunerRestoreLearned is FuzzTunerRestore for a tuner that learns its
// gain (nil Gain): the snapshot then carries the learner's state. A
// restored learner whose slope is clearly negative refuses the report with
// ErrSlopeSign, which is its documented behaviour.
func FuzzTunerRestoreLearned(f *testing.F) {
	s := TunerSettings{Projection: tunerBox1(-5, 5), MaxChange: []float64{1}}
	src, err := NewTuner([]float64{1}, s)
	if err != nil {
		f.Fatal(err)
	}
	for i := range 200 {
		x, v := src.Param1()
		src.Report1(v, x-0.5+float64(i%3)-1)
	}
	learned, _ := src.Snapshot()
	f.Add(learned)
	fuzzRestore(f, s)
}

func fuzzRestore(f *testing.F, s TunerSettings) {
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
	const counts = `{"applied":0,"stale":0,"frozen":0,"not_finite":0,"future":0,"failed":0,"after_close":0,"overrides":0,"restores":0}`
	f.Add([]byte(`{"format":1,"dim":1,"version":0,"x":[0],"average":[0],"averaged":0,"steps":0,"gain_index":0,"active":false,"limited":false,"frozen":false,"counts":` + counts + `}`))
	f.Add([]byte(`{"format":1,"dim":1,"version":0,"x":[0],"x":[0],"average":[0],"averaged":0,"steps":0,"gain_index":0,"active":false,"limited":false,"frozen":false,"counts":` + counts + `}`))
	f.Add([]byte(`{"format":1,"dim":1,"version":9007199254740992,"x":[-5],"average":[5],"averaged":9007199254740992,"steps":9007199254740992,"gain_index":1,"previous_measurement":[1e308],"active":true,"limited":true,"frozen":false,"counts":{"applied":9007199254740992,"stale":0,"frozen":0,"not_finite":0,"future":0,"failed":0,"after_close":0,"overrides":0,"restores":9007199254740992}}`))
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
		tu.Resume()
		out, err := tu.Report1(v, 0.25)
		if errors.Is(err, ErrSlopeSign) && s.Gain == nil {
			return
		}
		if atCap := tu.Stats().Steps == MaxSnapshotCount; (atCap && !errors.Is(err, ErrGain)) || (!atCap && (out != Applied || err != nil)) {
			t.Fatalf("restored tuner: report gives %v, %v\n%s", out, err, again)
		}
		if again, err = tu.Snapshot(); err != nil || other.Restore(again) != nil {
			t.Fatalf("snapshot after a report does not restore: %v\n%s", err, again)
		}
	})
}
