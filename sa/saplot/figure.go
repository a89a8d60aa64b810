package saplot

import (
	"fmt"
	"image/color"
	"math"
	"os"
	"path/filepath"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// figure is a plot whose legend is drawn outside the data area: in a strip
// between the title and the data, with the entries side by side (in more
// than one row when they do not fit the width). plot.Plot draws its own
// legend inside the data area, where it covers lines; so the entries are
// kept here and the plot's own legend stays empty.
//
// The y-axis label is drawn here too, centred on the data area: plot.Plot
// reserves room for it as if it were centred on the linear middle of the
// axis values, which on a log axis lies near the top and shrinks the data
// area by half the label's length (gonum/plot v0.17 padY).
type figure struct {
	pl      *plot.Plot
	yLabel  string
	entries []entry
}

// entry is one legend entry: a name and the thumbnails drawn before it.
type entry struct {
	name   string
	thumbs []plot.Thumbnailer
}

// Sizes of the legend strip.
const (
	legendFontSize = 10 // points
	entryGap       = 14 // points between entries in a row
	rowGap         = 2  // points between rows
	stripGap       = 8  // points between the strip and the data area
	labelMargin    = 3  // points left of the y-axis label
)

func newFigure() *figure {
	pl := plot.New()
	pl.Legend.TextStyle.Font.Size = vg.Points(legendFontSize)
	pl.Title.Padding = vg.Points(4)
	return &figure{pl: pl}
}

// add adds a legend entry.
func (f *figure) add(name string, thumbs ...plot.Thumbnailer) {
	f.entries = append(f.entries, entry{name: name, thumbs: thumbs})
}

// entryWidth is the width of an entry: thumbnail, a space, the name.
func (f *figure) entryWidth(e entry) vg.Length {
	sty := f.pl.Legend.TextStyle
	return f.pl.Legend.ThumbnailWidth + sty.Rectangle(" "+e.name).Max.X
}

// rows splits the entries into rows no wider than width (one entry per
// row at least).
func (f *figure) rows(width vg.Length) [][]entry {
	var rows [][]entry
	var row []entry
	var used vg.Length
	for _, e := range f.entries {
		w := f.entryWidth(e)
		if len(row) > 0 && used+entryGap+w > width {
			rows = append(rows, row)
			row, used = nil, 0
		}
		if len(row) > 0 {
			used += entryGap
		}
		row = append(row, e)
		used += w
	}
	if len(row) > 0 {
		rows = append(rows, row)
	}
	return rows
}

// rowHeight is the height of one row of the legend.
func (f *figure) rowHeight() vg.Length {
	sty := f.pl.Legend.TextStyle
	return sty.Rectangle("Xg").Size().Y
}

// inner returns the part of dc right of the y-axis label, where the plot
// itself is drawn.
func (f *figure) inner(dc draw.Canvas) draw.Canvas {
	if f.yLabel == "" {
		return dc
	}
	sty := f.pl.Y.Label.TextStyle
	return draw.Crop(dc, labelMargin+sty.Height(f.yLabel)+sty.FontExtents().Descent+f.pl.Y.Label.Padding, 0, 0, 0)
}

// layout returns the rows of the legend, the rectangle of the legend strip
// and the padding below the title that makes room for it, for a plot drawn
// on dc.
func (f *figure) layout(dc draw.Canvas) (rows [][]entry, strip vg.Rectangle, pad vg.Length) {
	dc = f.inner(dc)
	pad = f.pl.Title.Padding
	if len(f.entries) == 0 {
		return nil, vg.Rectangle{}, pad
	}
	margin := vg.Points(6)
	rows = f.rows(dc.Max.X - dc.Min.X - 2*margin)
	h := vg.Length(len(rows))*f.rowHeight() + vg.Length(len(rows)-1)*rowGap
	top := dc.Max.Y
	if f.pl.Title.Text != "" {
		top -= f.pl.Title.TextStyle.Rectangle(f.pl.Title.Text).Size().Y + pad
	}
	strip = vg.Rectangle{
		Min: vg.Point{X: dc.Min.X + margin, Y: top - h},
		Max: vg.Point{X: dc.Max.X - margin, Y: top},
	}
	// The top tick label of the y axis is centred on the top of the data
	// area; half its height reaches up, so the gap is at least that.
	tick := f.pl.Y.Tick.Label.Rectangle("0").Size().Y / 2
	return rows, strip, pad + h + max(vg.Points(stripGap), tick+vg.Points(2))
}

// dataArea returns the rectangle of dc that the data are drawn in.
func (f *figure) dataArea(dc draw.Canvas) vg.Rectangle {
	_, _, pad := f.layout(dc)
	old := f.pl.Title.Padding
	f.pl.Title.Padding = pad
	defer func() { f.pl.Title.Padding = old }()
	return f.pl.DataCanvas(f.inner(dc)).Rectangle
}

// draw draws the plot and its legend strip on dc.
func (f *figure) draw(dc draw.Canvas) {
	rows, strip, pad := f.layout(dc)
	dc.SetColor(color.White)
	dc.Fill(dc.Rectangle.Path())
	old := f.pl.Title.Padding
	f.pl.Title.Padding = pad
	f.pl.Draw(f.inner(dc))
	data := f.pl.DataCanvas(f.inner(dc)).Rectangle
	f.pl.Title.Padding = old

	if f.yLabel != "" {
		sty := f.pl.Y.Label.TextStyle
		sty.Rotation += math.Pi / 2
		x := dc.Min.X + labelMargin + f.pl.Y.Label.TextStyle.Height(f.yLabel)
		dc.FillText(sty, vg.Point{X: x - sty.FontExtents().Descent, Y: (data.Min.Y + data.Max.Y) / 2}, f.yLabel)
	}

	rh := f.rowHeight()
	y := strip.Max.Y
	for _, row := range rows {
		var w vg.Length
		for k, e := range row {
			if k > 0 {
				w += entryGap
			}
			w += f.entryWidth(e)
		}
		x := (strip.Min.X+strip.Max.X)/2 - w/2 // centred
		for _, e := range row {
			l := plot.NewLegend()
			l.TextStyle = f.pl.Legend.TextStyle
			l.ThumbnailWidth = f.pl.Legend.ThumbnailWidth
			l.Top, l.Left = true, true
			l.Add(e.name, e.thumbs...)
			ew := f.entryWidth(e)
			l.Draw(draw.Canvas{Canvas: dc.Canvas, Rectangle: vg.Rectangle{
				Min: vg.Point{X: x, Y: y - rh},
				Max: vg.Point{X: x + ew, Y: y},
			}})
			x += ew + entryGap
		}
		y -= rh + rowGap
	}
}

// save writes the figure, w × h, to path in the format its extension names.
func save(f *figure, w, h vg.Length, path string) error {
	format := strings.ToLower(strings.TrimPrefix(filepath.Ext(path), "."))
	c, err := draw.NewFormattedCanvas(w, h, format)
	if err != nil {
		return fmt.Errorf("saplot: writing %s: %w", path, err)
	}
	// Create the file before drawing: an unwritable path fails at once.
	file, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("saplot: writing %s: %w", path, err)
	}
	f.draw(draw.New(c))
	_, err = c.WriteTo(file)
	if cerr := file.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fmt.Errorf("saplot: writing %s: %w", path, err)
	}
	// Some canvases report failures only through a file left empty.
	if fi, err := os.Stat(path); err != nil || fi.Size() == 0 {
		return fmt.Errorf("saplot: writing %s: file missing or empty", filepath.Clean(path))
	}
	return nil
}
