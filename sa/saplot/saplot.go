// Package saplot draws convergence plots of stochastic-approximation runs
// from the traces of package sa (Settings.Trace) and writes them as image
// files with gonum.org/v1/plot.
//
// It is a separate package so that a service importing sa does not pull a
// plotting library into its build.
//
//   - [Distance] plots ‖x_k − x*‖ and ‖x̄_k − x*‖ against the measurements
//     used, on log–log axes, with the Euclidean norm of the confidence
//     half-widths of the average beside them, when the truth x* is known.
//   - [Estimate] plots one coordinate of the iterate and of the average
//     against the measurements used, with the confidence band of the
//     average and, when known, the true value.
//
// [Options] names the plotted quantity and its unit for the y axis. The
// legend sits in a strip between the title and the data area, never over
// the lines; ticks fall on round values.
//
// The file format follows the extension of the path: .png, .svg, .pdf,
// .eps, .jpg, .tif.
package saplot

import (
	"errors"
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"

	"github.com/stochroot/stochroot/sa"
)

// Options are the optional knobs of a plot. The zero value is a 16 cm ×
// 10 cm plot with a generated title and generic axis labels.
type Options struct {
	// Title replaces the generated title when not empty.
	Title string
	// Quantity names in words what the plotted coordinate measures, for
	// example "open time of the 500 ml valve". [Estimate] labels its y
	// axis with it and, when Title is empty, titles the plot
	// "Estimate of " + Quantity. [Distance], whose y axis is always
	// "distance to the truth", titles the plot
	// "Distance of " + Quantity + " to the truth" when Title is empty.
	// Empty means "coordinate i" (counted from 1) for Estimate and no
	// name for Distance.
	Quantity string
	// Unit is the unit of the quantity, for example "s" or "ml", added to
	// the y-axis label in parentheses. Empty adds nothing.
	Unit string
	// Width and Height of the image in centimetres; 0 means 16 and 10.
	Width, Height float64
}

// yLabel returns the y-axis label: what, then the unit in parentheses.
func (o Options) yLabel(what string) string {
	if o.Unit == "" {
		return what
	}
	return what + " (" + o.Unit + ")"
}

// ErrEmptyTrace reports a nil trace or one without records.
var ErrEmptyTrace = errors.New("saplot: the trace has no records")

// ErrNothingToShow reports a trace with records of which none can be drawn
// on the plot's axes: on the log–log axes of [Distance], every distance and
// half-width 0 (a run that started at the truth and never left it) or not
// finite.
var ErrNothingToShow = errors.New("saplot: nothing to show")

// ErrBadTruth reports a truth with a NaN or ±Inf coordinate.
var ErrBadTruth = errors.New("saplot: the truth is not finite")

func (o Options) size() (vg.Length, vg.Length, error) {
	w, h := o.Width, o.Height
	if w == 0 {
		w = 16
	}
	if h == 0 {
		h = 10
	}
	if !(w > 0 && h > 0) || math.IsInf(w, 0) || math.IsInf(h, 0) {
		return 0, 0, fmt.Errorf("saplot: size %v × %v cm: must be finite and > 0", o.Width, o.Height)
	}
	return vg.Length(w) * vg.Centimeter, vg.Length(h) * vg.Centimeter, nil
}

// Distance writes to path a log–log plot of the distances ‖x_k − x*‖ and
// ‖x̄_k − x*‖ to the known truth x* against the measurements used, with the
// Euclidean norm of the confidence half-widths of the average where they
// are available (a radius the distance of the average should mostly stay
// under). A trace of one record draws one marked point per curve. It
// returns an error if the trace is empty ([ErrEmptyTrace]), truth has the
// wrong length or a coordinate that is not finite ([ErrBadTruth]), no
// distance is > 0 ([ErrNothingToShow]: a run that never left the truth),
// or the file cannot be written. Options.Quantity goes into the generated
// title and Options.Unit onto the y axis; a Euclidean distance has one unit
// only when every coordinate has it, so give a Unit only then. The legend
// sits above the data area, outside it.
func Distance(path string, tr *sa.Trace, truth []float64, o Options) error {
	f, w, h, err := distanceFigure(tr, truth, o)
	if err != nil {
		return err
	}
	return save(f, w, h, path)
}

// distanceFigure builds the plot of [Distance] and returns it with its size.
func distanceFigure(tr *sa.Trace, truth []float64, o Options) (f *figure, w, h vg.Length, err error) {
	if tr == nil || tr.Len() == 0 {
		return nil, 0, 0, ErrEmptyTrace
	}
	if len(truth) != tr.Dim() {
		return nil, 0, 0, fmt.Errorf("saplot: truth has length %d, the trace dimension %d", len(truth), tr.Dim())
	}
	if err := finiteTruth(truth); err != nil {
		return nil, 0, 0, err
	}
	w, h, err = o.size()
	if err != nil {
		return nil, 0, 0, err
	}
	// Only values > 0 and finite have a place on log–log axes.
	drawable := func(v float64) bool { return v > 0 && !math.IsInf(v, 1) }
	var dx, da, hw plotter.XYs
	for p := range tr.All() {
		m := float64(max(p.Measurements, 1))
		if v := dist(p.X, truth); drawable(v) {
			dx = append(dx, plotter.XY{X: m, Y: v})
		}
		if p.Average != nil {
			if v := dist(p.Average, truth); drawable(v) {
				da = append(da, plotter.XY{X: m, Y: v})
			}
		}
		if p.HalfWidth != nil {
			if v := norm(p.HalfWidth); drawable(v) {
				hw = append(hw, plotter.XY{X: m, Y: v})
			}
		}
	}
	if len(dx)+len(da)+len(hw) == 0 {
		return nil, 0, 0, fmt.Errorf("%w: all %d records of the trace are at distance 0 from the truth (or not finite), and a log–log plot needs values > 0; a run that starts at the truth with noise-free measurements never leaves it", ErrNothingToShow, tr.Len())
	}
	f = newFigure()
	pl := f.pl
	pl.Title.Text = o.Title
	if pl.Title.Text == "" {
		pl.Title.Text = "Distance to the truth"
		if o.Quantity != "" {
			pl.Title.Text = "Distance of " + o.Quantity + " to the truth"
		}
	}
	pl.X.Label.Text = "measurements used"
	f.yLabel = o.yLabel("distance to the truth")
	pl.X.Scale, pl.Y.Scale = plot.LogScale{}, plot.LogScale{}
	pl.X.Tick.Marker, pl.Y.Tick.Marker = logTicks{}, logTicks{}
	if err := addLine(f, dx, "iterate", 0, false); err != nil {
		return nil, 0, 0, err
	}
	if err := addLine(f, da, "average", 1, false); err != nil {
		return nil, 0, 0, err
	}
	if err := addLine(f, hw, fmt.Sprintf("norm of the %g%% half-widths", 100*tr.Level()), 2, true); err != nil {
		return nil, 0, 0, err
	}
	widenLog(&pl.X)
	widenLog(&pl.Y)
	return f, w, h, nil
}

// iterateShare is the share of the iterate's records over the averaged
// stretch that the y axis of [Estimate] frames.
const iterateShare = 0.98

// Estimate writes to path a plot of coordinate i of the iterate and of the
// average against the measurements used (log scale), with the confidence
// band of the average where available. If truth is not nil, truth[i] is
// drawn as a horizontal line. A trace of one record draws one marked point
// per curve. Once the trace has averages, the y axis frames the average,
// its band, the truth and the middle 98% of the iterate's values over the
// averaged records: the iterate's start-up transient and its rarest
// excursions run off the frame, the rest is drawn whole. Without averages
// it frames everything. Options.Quantity and Options.Unit label the y
// axis; the legend sits above the data area, outside it. It returns an
// error if the trace is empty ([ErrEmptyTrace]), i is out of range, truth
// has the wrong length or a coordinate that is not finite ([ErrBadTruth]),
// or the file cannot be written.
func Estimate(path string, tr *sa.Trace, i int, truth []float64, o Options) error {
	f, w, h, err := estimateFigure(tr, i, truth, o)
	if err != nil {
		return err
	}
	return save(f, w, h, path)
}

// estimateFigure builds the plot of [Estimate] and returns it with its size.
func estimateFigure(tr *sa.Trace, i int, truth []float64, o Options) (f *figure, w, h vg.Length, err error) {
	if tr == nil || tr.Len() == 0 {
		return nil, 0, 0, ErrEmptyTrace
	}
	if i < 0 || i >= tr.Dim() {
		return nil, 0, 0, fmt.Errorf("saplot: coordinate %d out of range [0, %d)", i, tr.Dim())
	}
	if truth != nil && len(truth) != tr.Dim() {
		return nil, 0, 0, fmt.Errorf("saplot: truth has length %d, the trace dimension %d", len(truth), tr.Dim())
	}
	if err := finiteTruth(truth); err != nil {
		return nil, 0, 0, err
	}
	w, h, err = o.size()
	if err != nil {
		return nil, 0, 0, err
	}
	var xs, as, lo, hi plotter.XYs
	var averaged []float64 // the iterate where the average exists
	first, last := math.Inf(1), 0.0
	ymin, ymax := math.Inf(1), math.Inf(-1) // of the average, band and truth
	widen := func(v float64) { ymin, ymax = math.Min(ymin, v), math.Max(ymax, v) }
	for p := range tr.All() {
		m := float64(max(p.Measurements, 1))
		first, last = math.Min(first, m), math.Max(last, m)
		xs = append(xs, plotter.XY{X: m, Y: p.X[i]})
		if p.Average != nil {
			as = append(as, plotter.XY{X: m, Y: p.Average[i]})
			averaged = append(averaged, p.X[i])
			widen(p.Average[i])
		}
		if p.HalfWidth != nil {
			lo = append(lo, plotter.XY{X: m, Y: p.Average[i] - p.HalfWidth[i]})
			hi = append(hi, plotter.XY{X: m, Y: p.Average[i] + p.HalfWidth[i]})
			widen(p.Average[i] - p.HalfWidth[i])
			widen(p.Average[i] + p.HalfWidth[i])
		}
	}
	if truth != nil {
		widen(truth[i])
	}
	f = newFigure()
	pl := f.pl
	what := o.Quantity
	if what == "" {
		what = fmt.Sprintf("coordinate %d", i+1)
	}
	pl.Title.Text = o.Title
	if pl.Title.Text == "" {
		pl.Title.Text = "Estimate of " + what
	}
	pl.X.Label.Text = "measurements used"
	f.yLabel = o.yLabel(what)
	pl.X.Scale = plot.LogScale{}
	pl.X.Tick.Marker = logTicks{}
	pl.Y.Tick.Marker = linearTicks{}
	if err := addLine(f, xs, "iterate", 0, false); err != nil {
		return nil, 0, 0, err
	}
	if len(lo) > 1 {
		// The band: upper edge forward, lower edge back.
		ring := make(plotter.XYs, 0, 2*len(lo))
		ring = append(ring, hi...)
		for k := len(lo) - 1; k >= 0; k-- {
			ring = append(ring, lo[k])
		}
		band, err := plotter.NewPolygon(ring)
		if err != nil {
			return nil, 0, 0, fmt.Errorf("saplot: %w", err)
		}
		band.Color = fade(2)
		band.LineStyle.Width = 0
		pl.Add(band)
		f.add(fmt.Sprintf("%g%% confidence band", 100*tr.Level()), band)
	}
	if err := addLine(f, as, "average", 1, false); err != nil {
		return nil, 0, 0, err
	}
	if truth != nil {
		if first == last {
			// One point in x: span the decade either side that
			// widenLog gives the axis, or the line has no length.
			first, last = first/10, last*10
		}
		tl := plotter.XYs{{X: first, Y: truth[i]}, {X: last, Y: truth[i]}}
		if err := addLine(f, tl, "truth", 3, true); err != nil {
			return nil, 0, 0, err
		}
	}
	if len(as) > 0 {
		// Frame the average, its band, the truth and the middle of the
		// iterate over the averaged stretch (set after Add, which widens
		// the axes to every line). Framing only the average would cut the
		// noisier iterate into vertical slivers; framing all of it would
		// flatten the band under the start-up transient.
		slices.Sort(averaged)
		n := len(averaged)
		tail := int(float64(n-1) * (1 - iterateShare) / 2)
		widen(averaged[tail])
		widen(averaged[n-1-tail])
		pad := 0.05 * (ymax - ymin)
		if pad == 0 {
			pad = 0.1 * math.Abs(ymax)
		}
		if pad == 0 {
			pad = 1
		}
		pl.Y.Min, pl.Y.Max = ymin-pad, ymax+pad
	}
	widenLog(&pl.X)
	return f, w, h, nil
}

// finiteTruth returns an error wrapping ErrBadTruth naming the first
// coordinate of truth that is NaN or ±Inf.
func finiteTruth(truth []float64) error {
	for i, v := range truth {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%w: truth[%d] = %v", ErrBadTruth, i, v)
		}
	}
	return nil
}

func dist(x, y []float64) float64 {
	s := 0.0
	for i := range x {
		s += (x[i] - y[i]) * (x[i] - y[i])
	}
	return math.Sqrt(s)
}

func norm(x []float64) float64 {
	s := 0.0
	for _, v := range x {
		s += v * v
	}
	return math.Sqrt(s)
}
