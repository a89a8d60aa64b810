package saplot

import (
	"math"
	"strconv"
	"strings"

	"gonum.org/v1/plot"
)

// The tick markers below put labelled ticks at "round" values: multiples
// of 1, 2, 2.5 or 5 times a power of ten on a linear axis, powers of ten
// (and, on short log axes, their multiples by 2 and 5) on a log axis. That
// rule is common practice in chart making; Heckbert (1990, "Nice numbers
// for graph labels", Graphics Gems I, pp. 61–63) states it.

const (
	minLabels = 3 // fewest labelled ticks a linear axis of non-zero span gets
	maxLabels = 7 // most labelled ticks an axis gets
)

// linearTicks marks a linear axis with between minLabels and maxLabels
// labelled ticks at round values and unlabelled ticks between them. All
// labels are written with the same number of decimals, the fewest that
// tell them apart.
type linearTicks struct{}

// Ticks returns the ticks of [lo, hi].
func (linearTicks) Ticks(lo, hi float64) []plot.Tick {
	if !(hi > lo) || math.IsInf(lo, 0) || math.IsInf(hi, 0) {
		if math.IsNaN(lo) || math.IsInf(lo, 0) {
			return nil
		}
		return []plot.Tick{{Value: lo, Label: strconv.FormatFloat(lo, 'g', -1, 64)}}
	}
	step, minor := roundStep(lo, hi)
	first := math.Ceil(lo/step - 1e-9)
	last := math.Floor(hi/step + 1e-9)
	var vals []float64
	for k := first; k <= last; k++ {
		v := k * step
		if math.Abs(v) < step*1e-9 {
			v = 0 // no "-0"
		}
		vals = append(vals, v)
	}
	labels := formatLinear(vals, step)
	var ticks []plot.Tick
	for j, v := range vals {
		ticks = append(ticks, plot.Tick{Value: v, Label: labels[j]})
	}
	// Unlabelled ticks between (and just outside) the labelled ones.
	sub := step / float64(minor)
	for k := math.Ceil(lo/sub - 1e-9); k <= math.Floor(hi/sub+1e-9); k++ {
		if int64(k)%int64(minor) != 0 {
			ticks = append(ticks, plot.Tick{Value: k * sub})
		}
	}
	return ticks
}

// roundStep returns the smallest round step (1, 2, 2.5 or 5 times a power
// of ten) that puts at most maxLabels multiples in [lo, hi], and the number
// of minor intervals per step.
func roundStep(lo, hi float64) (step float64, minor int) {
	e := math.Floor(math.Log10(hi-lo)) - 2
	for range 8 { // the loop ends within four powers of ten
		p := math.Pow(10, e)
		for _, m := range [...]struct {
			f     float64
			minor int
		}{{1, 5}, {2, 4}, {2.5, 5}, {5, 5}} {
			s := m.f * p
			if n := math.Floor(hi/s+1e-9) - math.Ceil(lo/s-1e-9) + 1; n <= maxLabels {
				return s, m.minor
			}
		}
		e++
	}
	return hi - lo, 1 // only reached when the arithmetic overflows
}

// formatLinear writes the values, multiples of step, all with the same
// number of decimals (or the same exponent form when they are very large
// or very small).
func formatLinear(vals []float64, step float64) []string {
	big := 0.0
	for _, v := range vals {
		big = math.Max(big, math.Abs(v))
	}
	out := make([]string, len(vals))
	if big >= 1e6 || (big < 1e-4 && big > 0) {
		// d.ddd×10^n: as many mantissa digits as the step needs.
		exp := math.Floor(math.Log10(big))
		dec := max(0, int(exp-math.Floor(math.Log10(step)+1e-9)))
		if isQuarter(step) {
			dec++
		}
		for j, v := range vals {
			out[j] = compactExp(strconv.FormatFloat(v, 'e', dec, 64))
		}
		return out
	}
	dec := max(0, int(-math.Floor(math.Log10(step)+1e-9)))
	if isQuarter(step) {
		dec++
	}
	for j, v := range vals {
		out[j] = strconv.FormatFloat(v, 'f', dec, 64)
	}
	return out
}

// isQuarter reports whether step is 2.5 times a power of ten, whose
// multiples need one decimal more than the power.
func isQuarter(step float64) bool {
	m := step / math.Pow(10, math.Floor(math.Log10(step)+1e-9))
	return math.Abs(m-2.5) < 1e-6
}

// compactExp turns Go's "1.5e-05" into "1.5e-5" and "2e+06" into "2e6".
func compactExp(s string) string {
	mant, exp, ok := strings.Cut(s, "e")
	if !ok {
		return s
	}
	neg := strings.HasPrefix(exp, "-")
	exp = strings.TrimLeft(exp, "+-0")
	if exp == "" {
		exp = "0"
	}
	if neg {
		exp = "-" + exp
	}
	return mant + "e" + exp
}

// logTicks marks a log axis: labelled ticks at the powers of ten in range,
// unlabelled ones at their multiples 2…9. An axis spanning too few powers
// of ten for two labels gets labels at the multiples by 2 and 5 too, and
// one narrower still gets round linear ticks. Labels are plain numbers
// when every label lies in [0.001, 100000] and all in exponent form
// ("1e-5") otherwise, never a mix.
type logTicks struct{}

// Ticks returns the ticks of [lo, hi], lo > 0.
func (logTicks) Ticks(lo, hi float64) []plot.Tick {
	if !(lo > 0) || !(hi >= lo) || math.IsInf(hi, 0) {
		return nil
	}
	const eps = 1e-9
	e0, e1 := math.Floor(math.Log10(lo)), math.Floor(math.Log10(hi)+eps)
	// Over many powers of ten, label every every-th and draw no
	// intermediate ticks, so that labels never crowd.
	every := max(1, int(math.Ceil((e1-e0+1)/maxLabels)))
	var ticks []plot.Tick
	var labelled []float64
	for e := e0; e <= e1; e++ {
		p := math.Pow(10, e)
		for m := 1.0; m < 10; m++ {
			v := m * p
			if v < lo*(1-eps) || v > hi*(1+eps) || (m > 1 && every > 1) {
				continue
			}
			ticks = append(ticks, plot.Tick{Value: v})
			if m == 1 && int(e)%every == 0 {
				labelled = append(labelled, v)
			}
		}
	}
	if len(labelled) < 2 {
		labelled = labelled[:0]
		for _, t := range ticks {
			m := t.Value / math.Pow(10, math.Floor(math.Log10(t.Value)+eps))
			if math.Abs(m-1) < 1e-6 || math.Abs(m-2) < 1e-6 || math.Abs(m-5) < 1e-6 {
				labelled = append(labelled, t.Value)
			}
		}
	}
	if len(labelled) < 2 {
		return linearTicks{}.Ticks(lo, hi)
	}
	labels := formatLog(labelled)
	j := 0
	for k := range ticks {
		if j < len(labelled) && ticks[k].Value == labelled[j] {
			ticks[k].Label = labels[j]
			j++
		}
	}
	return ticks
}

// formatLog writes the labels of a log axis: plain when all lie in
// [0.001, 100000], all in exponent form otherwise.
func formatLog(vals []float64) []string {
	plain := true
	for _, v := range vals {
		if v < 1e-3*(1-1e-9) || v > 1e5*(1+1e-9) {
			plain = false
		}
	}
	out := make([]string, len(vals))
	for j, v := range vals {
		if plain {
			// As many decimals as the value's leading digit needs, which
			// also rounds away binary noise such as 0.30000000000000004.
			out[j] = strconv.FormatFloat(v, 'f', max(0, int(-math.Floor(math.Log10(v)+1e-9))), 64)
		} else {
			out[j] = compactExp(strconv.FormatFloat(v, 'e', 0, 64))
		}
	}
	return out
}
