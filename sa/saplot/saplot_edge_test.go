package saplot_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sa/saplot"
	"github.com/stochroot/stochroot/schedule"
)

// smallTrace runs steps Robbins–Monro steps of the noise-free field
// x − root from x0 and traces every step.
func smallTrace(t *testing.T, root, x0 []float64, steps int) *sa.Trace {
	t.Helper()
	h := oracle.FieldFunc(func(dst, x []float64, _ *rand.Rand) error {
		for i := range dst {
			dst[i] = x[i] - root[i]
		}
		return nil
	})
	r, err := sa.RobbinsMonro(context.Background(), h, x0, sa.Settings{
		Gain: schedule.Constant(0.5), MaxSteps: steps, Seed: 1,
		Trace: &sa.Tracing{Every: 1},
	})
	if err != nil {
		t.Fatal(err)
	}
	if r.Trace == nil || r.Trace.Len() == 0 {
		t.Fatalf("run of %d steps left no trace", steps)
	}
	return r.Trace
}

// noPanic calls draw and turns a panic into a test failure that names it.
func noPanic(t *testing.T, name string, draw func() error) (err error) {
	t.Helper()
	defer func() {
		if p := recover(); p != nil {
			t.Fatalf("%s panicked: %v", name, p)
		}
	}()
	return draw()
}

// A trace of one record has one point on each curve. Distance draws it
// (one marker per curve is a sensible plot of one step); Estimate draws it
// too.
func TestOneRecordTraceDraws(t *testing.T) {
	root := []float64{2, -1}
	tr := smallTrace(t, root, []float64{0, 0}, 1)
	if tr.Len() != 1 {
		t.Fatalf("trace has %d records, want 1", tr.Len())
	}
	dir := t.TempDir()
	for name, draw := range map[string]func(string) error{
		"distance.png": func(p string) error { return saplot.Distance(p, tr, root, saplot.Options{}) },
		"estimate.png": func(p string) error { return saplot.Estimate(p, tr, 0, root, saplot.Options{}) },
		"notruth.png":  func(p string) error { return saplot.Estimate(p, tr, 1, nil, saplot.Options{}) },
	} {
		path := filepath.Join(dir, name)
		if err := noPanic(t, name, func() error { return draw(path) }); err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if fi, err := os.Stat(path); err != nil || fi.Size() == 0 {
			t.Fatalf("%s: no image written (%v)", name, err)
		}
	}
}

// A run that starts at the truth with a noise-free field never leaves it:
// every distance is 0 and there is nothing to draw on a log scale.
// Distance must say so, not panic; Estimate (linear y axis) still draws.
func TestZeroDistancesAreNothingToShow(t *testing.T) {
	root := []float64{2, -1}
	for _, steps := range []int{1, 20} {
		tr := smallTrace(t, root, []float64{2, -1}, steps)
		path := filepath.Join(t.TempDir(), "d.png")
		err := noPanic(t, "Distance", func() error { return saplot.Distance(path, tr, root, saplot.Options{}) })
		if !errors.Is(err, saplot.ErrNothingToShow) {
			t.Fatalf("%d steps: err = %v, want ErrNothingToShow", steps, err)
		}
		if !strings.Contains(err.Error(), "0") {
			t.Fatalf("message does not say the distances are 0: %v", err)
		}
		if _, err := os.Stat(path); !os.IsNotExist(err) {
			t.Fatalf("a file was written although the plot failed: %v", err)
		}
		est := filepath.Join(t.TempDir(), "e.png")
		if err := noPanic(t, "Estimate", func() error { return saplot.Estimate(est, tr, 0, root, saplot.Options{}) }); err != nil {
			t.Fatalf("Estimate of a constant iterate: %v", err)
		}
	}
}

// A truth with NaN or ±Inf is bad input: an error that names the
// coordinate, for both plots, with the caller's slice unchanged.
func TestNonFiniteTruthIsAnError(t *testing.T) {
	root := []float64{2, -1}
	tr := smallTrace(t, root, []float64{0, 0}, 20)
	for _, bad := range []float64{math.NaN(), math.Inf(1), math.Inf(-1)} {
		truth := []float64{2, bad}
		path := filepath.Join(t.TempDir(), "p.png")
		for name, draw := range map[string]func() error{
			"Distance": func() error { return saplot.Distance(path, tr, truth, saplot.Options{}) },
			"Estimate": func() error { return saplot.Estimate(path, tr, 0, truth, saplot.Options{}) },
		} {
			err := noPanic(t, name, draw)
			if !errors.Is(err, saplot.ErrBadTruth) {
				t.Fatalf("%s with truth[1] = %v: err = %v, want ErrBadTruth", name, bad, err)
			}
			if !strings.Contains(err.Error(), "truth[1]") {
				t.Fatalf("%s: message does not name the coordinate: %v", name, err)
			}
			if truth[0] != 2 || !(math.IsNaN(bad) && math.IsNaN(truth[1]) || truth[1] == bad) {
				t.Fatalf("%s changed the caller's truth: %v", name, truth)
			}
		}
	}
}
