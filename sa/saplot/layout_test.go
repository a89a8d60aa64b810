package saplot

import (
	"testing"

	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// The legend sits in a strip of its own between the title and the data
// area, inside the image, never over the data; every entry is drawn, in
// more rows when the image is narrow.
func TestLegendIsOutsideTheData(t *testing.T) {
	tr, root := debugTrace(t)
	for _, size := range [][2]float64{{0, 0}, {8, 6}, {30, 8}} {
		o := Options{Width: size[0], Height: size[1], Quantity: "flow", Unit: "l/min"}
		dist, w, h, err := distanceFigure(tr, root, o)
		if err != nil {
			t.Fatal(err)
		}
		est, _, _, err := estimateFigure(tr, 0, root, o)
		if err != nil {
			t.Fatal(err)
		}
		for name, f := range map[string]*figure{"Distance": dist, "Estimate": est} {
			dc := draw.New(vgimg.New(w, h))
			rows, strip, _ := f.layout(dc)
			data := f.dataArea(dc)
			n := 0
			for _, r := range rows {
				n += len(r)
			}
			if n != len(f.entries) || n < 3 {
				t.Errorf("%s %v: %d of %d entries laid out", name, size, n, len(f.entries))
			}
			if strip.Min.Y < data.Max.Y {
				t.Errorf("%s %v: legend strip %v reaches into the data area %v", name, size, strip, data)
			}
			if strip.Max.Y > h || strip.Min.X < 0 || strip.Max.X > w {
				t.Errorf("%s %v: legend strip %v leaves the %v × %v image", name, size, strip, w, h)
			}
			if data.Max.Y-data.Min.Y < h/3 {
				t.Errorf("%s %v: data area %v is less than a third of the height %v", name, size, data, h)
			}
			// Each row fits the width.
			for _, r := range rows {
				var rw vg.Length
				for k, e := range r {
					if k > 0 {
						rw += entryGap
					}
					rw += f.entryWidth(e)
				}
				if len(r) > 1 && rw > strip.Max.X-strip.Min.X {
					t.Errorf("%s %v: a legend row of width %v in a strip of %v", name, size, rw, strip.Max.X-strip.Min.X)
				}
			}
		}
	}
}
