package saplot_test

import (
	"bytes"
	"context"
	"errors"
	"image/png"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sa/saplot"
	"github.com/stochroot/stochroot/schedule"
)

func tracedRun(t testing.TB) (*sa.Trace, []float64) {
	t.Helper()
	root := []float64{2, -1}
	h := oracle.FieldFunc(func(dst, x []float64, rng *rand.Rand) error {
		for i := range dst {
			dst[i] = x[i] - root[i] + rng.NormFloat64()
		}
		return nil
	})
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{0, 0}, sa.Settings{
		Gain: schedule.Power{Scale: 1, Exponent: 0.6}, MaxSteps: 20000, Seed: 3,
		Trace: &sa.Tracing{Every: 10},
	})
	if err != nil {
		t.Fatal(err)
	}
	return r.Trace, root
}

func TestPlotsArePNG(t *testing.T) {
	tr, root := tracedRun(t)
	dir := t.TempDir()
	for name, draw := range map[string]func(string) error{
		"distance.png": func(p string) error { return saplot.Distance(p, tr, root, saplot.Options{}) },
		"estimate.png": func(p string) error { return saplot.Estimate(p, tr, 1, root, saplot.Options{Title: "x_2"}) },
		"notruth.png":  func(p string) error { return saplot.Estimate(p, tr, 0, nil, saplot.Options{Width: 8, Height: 6}) },
	} {
		path := filepath.Join(dir, name)
		if err := draw(path); err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		b, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		cfg, err := png.DecodeConfig(bytes.NewReader(b))
		if err != nil || cfg.Width < 100 || cfg.Height < 100 {
			t.Errorf("%s: not a PNG of sensible size: %+v, %v", name, cfg, err)
		}
	}
}

func TestPlotBadInput(t *testing.T) {
	tr, root := tracedRun(t)
	dir := t.TempDir()
	ok := filepath.Join(dir, "p.png")
	// A path inside a file, which no one can create.
	blocker := filepath.Join(dir, "file")
	if err := os.WriteFile(blocker, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	unwritable := filepath.Join(blocker, "sub", "p.png")
	cases := map[string]error{
		"unwritable distance": saplot.Distance(unwritable, tr, root, saplot.Options{}),
		"unwritable estimate": saplot.Estimate(unwritable, tr, 0, nil, saplot.Options{}),
		"missing directory":   saplot.Distance(filepath.Join(dir, "no", "such", "p.png"), tr, root, saplot.Options{}),
		"unknown extension":   saplot.Distance(filepath.Join(dir, "p.xyz"), tr, root, saplot.Options{}),
		"nil trace":           saplot.Distance(ok, nil, root, saplot.Options{}),
		"truth length":        saplot.Distance(ok, tr, []float64{1}, saplot.Options{}),
		"coordinate range":    saplot.Estimate(ok, tr, 2, nil, saplot.Options{}),
		"negative coordinate": saplot.Estimate(ok, tr, -1, nil, saplot.Options{}),
		"estimate truth len":  saplot.Estimate(ok, tr, 0, []float64{1, 2, 3}, saplot.Options{}),
		"negative size":       saplot.Estimate(ok, tr, 0, nil, saplot.Options{Width: -3}),
	}
	for name, err := range cases {
		if err == nil {
			t.Errorf("%s: error = nil, want an error", name)
		}
	}
	// An unknown format is refused before the file is created.
	if _, err := os.Stat(filepath.Join(dir, "p.xyz")); !os.IsNotExist(err) {
		t.Errorf("unknown extension: a file was left behind (%v)", err)
	}
	if err := saplot.Distance(ok, nil, root, saplot.Options{}); !errors.Is(err, saplot.ErrEmptyTrace) {
		t.Errorf("nil trace: error = %v, want ErrEmptyTrace", err)
	}
}
