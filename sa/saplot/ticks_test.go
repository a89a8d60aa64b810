package saplot

import (
	"math"
	"strconv"
	"strings"
	"testing"

	"gonum.org/v1/plot"
)

// labelled returns the labelled ticks.
func labelled(ticks []plot.Tick) []plot.Tick {
	var out []plot.Tick
	for _, t := range ticks {
		if t.Label != "" {
			out = append(out, t)
		}
	}
	return out
}

// isRound reports whether v is 1, 2, 2.5 or 5 times a power of ten.
func isRound(v float64) bool {
	m := v / math.Pow(10, math.Floor(math.Log10(v)+1e-9))
	for _, r := range []float64{1, 2, 2.5, 5, 10} {
		if math.Abs(m-r) < 1e-6 {
			return true
		}
	}
	return false
}

// A linear axis gets 3 to 7 labelled ticks at multiples of a round step,
// inside the range, with distinct labels of equal precision that read
// back as the tick values (round labels are common practice; Heckbert
// 1990, "Nice numbers for graph labels", Graphics Gems I).
func TestLinearTicksAreRound(t *testing.T) {
	for _, r := range [][2]float64{
		{0, 1}, {2.87251, 2.8739}, {-0.003, 0.0021}, {1.9, 2.1}, {-1, -0.99999},
		{0, 37}, {123456, 987654}, {1e6, 3e6}, {2e-6, 9e-6}, {-250, 250}, {0.1, 0.35},
	} {
		lo, hi := r[0], r[1]
		lab := labelled(linearTicks{}.Ticks(lo, hi))
		if len(lab) < minLabels || len(lab) > maxLabels {
			t.Errorf("[%g, %g]: %d labelled ticks, want %d to %d: %v", lo, hi, len(lab), minLabels, maxLabels, lab)
			continue
		}
		step := lab[1].Value - lab[0].Value
		if !isRound(step) {
			t.Errorf("[%g, %g]: step %g is not round", lo, hi, step)
		}
		seen := map[string]bool{}
		dec := -1
		for _, tk := range lab {
			if tk.Value < lo-1e-9*step || tk.Value > hi+1e-9*step {
				t.Errorf("[%g, %g]: tick %g outside the range", lo, hi, tk.Value)
			}
			if seen[tk.Label] {
				t.Errorf("[%g, %g]: label %q twice", lo, hi, tk.Label)
			}
			seen[tk.Label] = true
			v, err := strconv.ParseFloat(tk.Label, 64)
			if err != nil || math.Abs(v-tk.Value) > 1e-6*step {
				t.Errorf("[%g, %g]: label %q does not read back as %g", lo, hi, tk.Label, tk.Value)
			}
			if strings.HasPrefix(tk.Label, "-0") && v == 0 {
				t.Errorf("[%g, %g]: label %q", lo, hi, tk.Label)
			}
			d := 0
			if _, frac, ok := strings.Cut(strings.Split(tk.Label, "e")[0], "."); ok {
				d = len(frac)
			}
			if dec >= 0 && d != dec {
				t.Errorf("[%g, %g]: labels with %d and %d decimals: %v", lo, hi, dec, d, lab)
			}
			dec = d
		}
	}
}

// A log axis labels powers of ten, all in one form; a short one labels
// 1, 2 and 5 times them; every axis gets at least two labels and at most
// maxLabels.
func TestLogTicks(t *testing.T) {
	for _, c := range []struct {
		lo, hi float64
		want   []string
	}{
		{40, 22000, []string{"100", "1000", "10000"}},
		{3e-6, 0.02, []string{"1e-5", "1e-4", "1e-3", "1e-2"}},
		{0.004, 0.3, []string{"0.01", "0.1"}},
		{150, 900, []string{"200", "500"}},
		{1, 1e6, []string{"1e0", "1e1", "1e2", "1e3", "1e4", "1e5", "1e6"}},
	} {
		lab := labelled(logTicks{}.Ticks(c.lo, c.hi))
		var got []string
		for _, tk := range lab {
			got = append(got, tk.Label)
		}
		if strings.Join(got, " ") != strings.Join(c.want, " ") {
			t.Errorf("[%g, %g]: labels %q, want %q", c.lo, c.hi, got, c.want)
		}
	}
	// Very wide and very narrow ranges stay within the label budget.
	for _, r := range [][2]float64{{1e-300, 1e300}, {1e-30, 1}, {1000, 1001}, {7, 7.5}} {
		n := len(labelled(logTicks{}.Ticks(r[0], r[1])))
		if n < 2 || n > maxLabels {
			t.Errorf("[%g, %g]: %d labels, want 2 to %d", r[0], r[1], n, maxLabels)
		}
	}
}
