package saplot

import (
	"testing"

	"gonum.org/v1/plot/plotter"
)

// line returns the line of the legend entry called name.
func line(t *testing.T, f *figure, name string) *plotter.Line {
	t.Helper()
	for _, e := range f.entries {
		if e.name == name {
			if l, ok := e.thumbs[0].(*plotter.Line); ok {
				return l
			}
		}
	}
	t.Fatalf("no line %q in the legend", name)
	return nil
}

// The iterate is drawn as a line of at least 1 pt, and the y axis of
// Estimate frames most of it over the averaged stretch, so that it is not
// cut into vertical slivers; the average, its band and the truth are
// framed whole.
func TestIterateIsFramed(t *testing.T) {
	tr, root := debugTrace(t)
	const i = 0
	f, _, _, err := estimateFigure(tr, i, root, Options{})
	if err != nil {
		t.Fatal(err)
	}
	lo, hi := f.pl.Y.Min, f.pl.Y.Max
	in, n := 0, 0
	for p := range tr.All() {
		if p.Average == nil {
			continue
		}
		n++
		if p.X[i] >= lo && p.X[i] <= hi {
			in++
		}
		if a := p.Average[i]; a < lo || a > hi {
			t.Fatalf("average %g outside the frame [%g, %g]", a, lo, hi)
		}
		if p.HalfWidth != nil {
			if b := p.Average[i] - p.HalfWidth[i]; b < lo {
				t.Fatalf("band edge %g below the frame [%g, %g]", b, lo, hi)
			}
			if b := p.Average[i] + p.HalfWidth[i]; b > hi {
				t.Fatalf("band edge %g above the frame [%g, %g]", b, lo, hi)
			}
		}
	}
	if n == 0 {
		t.Fatal("the trace has no averages")
	}
	if share := float64(in) / float64(n); share < iterateShare {
		t.Errorf("%.3f of the averaged iterate inside the frame, want ≥ %g", share, iterateShare)
	}
	if root[i] < lo || root[i] > hi {
		t.Errorf("truth %g outside the frame [%g, %g]", root[i], lo, hi)
	}
	for _, name := range []string{"iterate", "average", "truth"} {
		if w := line(t, f, name).Width; w < 1 {
			t.Errorf("%s drawn %v pt wide, want ≥ 1", name, w)
		}
	}
	d, _, _, err := distanceFigure(tr, root, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if w := line(t, d, "iterate").Width; w < 1 {
		t.Errorf("Distance: iterate drawn %v pt wide, want ≥ 1", w)
	}
}
