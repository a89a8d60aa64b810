package saplot

import "testing"

// The y axis carries the quantity and its unit when given, and a plain
// description (never a bare symbol such as "x_1") when not; a title the
// caller sets is kept.
func TestAxisLabels(t *testing.T) {
	tr, root := debugTrace(t)
	for _, c := range []struct {
		o                Options
		estY, estTitle   string
		distY, distTitle string
	}{
		{Options{}, "coordinate 2", "Estimate of coordinate 2",
			"distance to the truth", "Distance to the truth"},
		{Options{Quantity: "open time", Unit: "s"}, "open time (s)", "Estimate of open time",
			"distance to the truth (s)", "Distance of open time to the truth"},
		{Options{Unit: "ml"}, "coordinate 2 (ml)", "Estimate of coordinate 2",
			"distance to the truth (ml)", "Distance to the truth"},
		{Options{Title: "Line 3", Quantity: "fill"}, "fill", "Line 3",
			"distance to the truth", "Line 3"},
	} {
		est, _, _, err := estimateFigure(tr, 1, root, c.o)
		if err != nil {
			t.Fatal(err)
		}
		if est.yLabel != c.estY || est.pl.Title.Text != c.estTitle {
			t.Errorf("Estimate %+v: y label %q, title %q; want %q, %q", c.o, est.yLabel, est.pl.Title.Text, c.estY, c.estTitle)
		}
		if est.pl.X.Label.Text != "measurements used" {
			t.Errorf("Estimate: x label %q", est.pl.X.Label.Text)
		}
		// The y axis as drawn carries a readable number of labels.
		lab := 0
		for _, tk := range est.pl.Y.Tick.Marker.Ticks(est.pl.Y.Min, est.pl.Y.Max) {
			if tk.Label != "" && tk.Value >= est.pl.Y.Min && tk.Value <= est.pl.Y.Max {
				lab++
			}
		}
		if lab < minLabels || lab > maxLabels {
			t.Errorf("Estimate: %d labelled y ticks in [%g, %g], want %d to %d", lab, est.pl.Y.Min, est.pl.Y.Max, minLabels, maxLabels)
		}
		dist, _, _, err := distanceFigure(tr, root, c.o)
		if err != nil {
			t.Fatal(err)
		}
		if dist.yLabel != c.distY || dist.pl.Title.Text != c.distTitle {
			t.Errorf("Distance %+v: y label %q, title %q; want %q, %q", c.o, dist.yLabel, dist.pl.Title.Text, c.distY, c.distTitle)
		}
	}
}
