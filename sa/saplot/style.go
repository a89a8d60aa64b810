package saplot

import (
	"image/color"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// palette holds the line colours (dark, readable on white and in grey).
var palette = []color.RGBA{
	{R: 0xaa, G: 0xaa, B: 0xaa, A: 0xff}, // iterate: grey
	{R: 0x1f, G: 0x4e, B: 0x9c, A: 0xff}, // average: blue
	{R: 0xc2, G: 0x41, B: 0x0c, A: 0xff}, // half-widths / band: orange
	{R: 0x1b, G: 0x7a, B: 0x3a, A: 0xff}, // truth: green
}

// Line widths. The iterate is the noisy background, drawn thinner and in
// grey, but at 1 pt so that it stays a line, not a hairline, when printed
// or scaled down.
const (
	lineWidth    = vg.Length(1.6) // points
	iterateWidth = vg.Length(1)   // points
)

// fade returns palette colour k at low opacity, for bands.
func fade(k int) color.Color {
	c := palette[k]
	c.A = 0x50
	// Premultiplied alpha.
	c.R = uint8(uint16(c.R) * 0x50 / 0xff)
	c.G = uint8(uint16(c.G) * 0x50 / 0xff)
	c.B = uint8(uint16(c.B) * 0x50 / 0xff)
	return c
}

// addLine adds a line in palette colour k (dashed if asked) with a legend
// entry; an empty series is skipped.
func addLine(f *figure, xys plotter.XYs, name string, k int, dashed bool) error {
	if len(xys) == 0 {
		return nil
	}
	l, err := plotter.NewLine(xys)
	if err != nil {
		return err
	}
	l.Color = palette[k]
	l.Width = lineWidth
	if k == 0 {
		l.Width = iterateWidth
	}
	if dashed {
		l.Dashes = []vg.Length{vg.Points(5), vg.Points(3)}
	}
	if len(xys) == 1 {
		// A line through one point draws nothing: mark the point.
		sc, err := plotter.NewScatter(xys)
		if err != nil {
			return err
		}
		sc.GlyphStyle.Color = palette[k]
		sc.GlyphStyle.Radius = vg.Points(2.5)
		sc.GlyphStyle.Shape = draw.CircleGlyph{}
		f.pl.Add(l, sc)
		f.add(name, l, sc)
		return nil
	}
	f.pl.Add(l)
	f.add(name, l)
	return nil
}

// widenLog gives a log axis whose data collapse to one value (a trace of
// one record, say) a decade on each side. Left alone, plot would widen it
// by ±1 at drawing time, to 0 or below, where a log scale panics.
func widenLog(a *plot.Axis) {
	if a.Min == a.Max && a.Min > 0 {
		a.Min, a.Max = a.Min/10, a.Max*10
	}
}
