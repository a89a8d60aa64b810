package sa

import (
	"math"
	"math/rand/v2"
	"os"
	"sort"
	"testing"
)

// TestRandomScalingDirect checks the on-line V_n (with its moving centre)
// against the definition of Lee, Liao, Seo & Shin (2022),
// V_n = (1/n²) Σ_s w_s (x̄_s − x̄_n)², computed directly from the stored
// path with the grid weights w_s of MethodRandomScaling (s² on every
// step up to 2048, m·s² on every m-th step beyond; TestRandomScalingGrid
// compares the grid with the sum over every s); the two must agree to
// rounding (relative 1e-9), also for a path far from 0 whose spread is
// tiny (where a sum about 0 would cancel).
func TestRandomScalingDirect(t *testing.T) {
	const n = 3000
	rng := rand.New(rand.NewPCG(5, 6))
	rs := newRandomScalingOf(2, false, 0.95)
	avg := make([]float64, 2)
	var path [][2]float64
	for s := 1; s <= n; s++ {
		x := [2]float64{1e6 + 1e-3*rng.NormFloat64(), -2 + rng.NormFloat64()}
		for i := range avg {
			avg[i] += (x[i] - avg[i]) / float64(s)
		}
		path = append(path, [2]float64{avg[0], avg[1]})
		rs.add(avg)
	}
	for i := range 2 {
		var v float64
		for s, p := range path {
			d := p[i] - avg[i]
			v += float64((s+1)*(s+1)) * d * d
		}
		v /= n * n
		// Grid weights: the spacing doubles at s = 2·1024.
		v = 0
		for s, p := range path {
			w := 0.0
			switch {
			case s+1 <= 2*randomScalingGrid:
				w = 1
			case (s+1)%2 == 0:
				w = 2
			}
			d := p[i] - avg[i]
			v += w * float64((s+1)*(s+1)) * d * d
		}
		v /= n * n
		got := rs.variance(i, avg) * n // V_n,ii
		if math.Abs(got-v) > 1e-9*v {
			t.Errorf("coordinate %d: on-line V = %.12g, direct %.12g", i, got, v)
		}
	}
}

// TestRandomScalingQuantiles re-simulates the law of
// |W(1)| / (∫₀¹ (W(r) − rW(1))² dr)^{1/2} (Brownian paths on a grid of 200
// steps) and checks RandomScalingQuantile against its empirical quantiles.
// Tolerance: the standard error of an empirical p-quantile is
// √(p(1−p)/N)/f(q) (common practice); with the density f estimated from
// the same sample by the spacing of nearby order statistics, we accept 4
// standard errors plus an allowance of 0.1 for the grid of 200 steps (not
// derived; our simulation with 400 000 paths of 2000 steps gave 5.307,
// 6.717 and 10.018 at the three levels).
func TestRandomScalingQuantiles(t *testing.T) {
	N, steps := 4000, 200
	if testing.Short() {
		t.Skip("simulation")
	}
	if os.Getenv("STOCHROOT_LONG_TESTS") == "1" {
		N = 100000
	}
	rng := rand.New(rand.NewPCG(7, 8))
	out := make([]float64, N)
	w := make([]float64, steps+1)
	sd := 1 / math.Sqrt(float64(steps))
	for p := range out {
		for k := 1; k <= steps; k++ {
			w[k] = w[k-1] + sd*rng.NormFloat64()
		}
		s := 0.0
		for k := 1; k <= steps; k++ {
			b := w[k] - float64(k)/float64(steps)*w[steps]
			s += b * b / float64(steps)
		}
		out[p] = math.Abs(w[steps]) / math.Sqrt(s)
	}
	sort.Float64s(out)
	for _, level := range []float64{0.90, 0.95, 0.99} {
		q, ok := RandomScalingQuantile(level)
		if !ok {
			t.Fatalf("level %v not supported", level)
		}
		k := int(level * float64(N))
		h := max(N/100, 5)
		lo, hi := out[max(k-h, 0)], out[min(k+h, N-1)]
		f := float64(2*h) / float64(N) / (hi - lo) // density by spacing
		se := math.Sqrt(level*(1-level)/float64(N)) / f
		tol := 4*se + 0.1
		t.Logf("level %v: table %.3f, simulated %.3f (SE %.3f, tolerance %.3f)", level, q, out[k], se, tol)
		if math.Abs(out[k]-q) > tol {
			t.Errorf("level %v: table %v, simulated %v ± %v", level, q, out[k], tol)
		}
	}
}

// TestRandomScalingGrid checks the grid sum of randomScaling (see
// MethodRandomScaling) against the exact V_n of Lee, Liao, Seo & Shin
// (2022), Σ_{s=1}^{n} s²(x̄_s − x̄_n)(x̄_s − x̄_n)ᵀ/n², computed in
// two passes, on a random path (AR(1) iterates about a drifting mean,
// d = 3, n = 60 000, so that the grid spacing reaches 32).
//
// Tolerance: on a grid cell (s − m, s] with m ≤ s/1024 the weight s²
// changes by at most 2m/s ≤ 0.2% and the running mean x̄ by at most m/s
// of the spread of the iterates, so the Riemann sum differs from the
// exact sum by well under 1% of the largest diagonal entry; we accept 1%.
func TestRandomScalingGrid(t *testing.T) {
	const d, n = 3, 60000
	rng := rand.New(rand.NewPCG(3, 4))
	xs := make([][]float64, n)
	x := make([]float64, d)
	for s := range n {
		for i := range x {
			x[i] = 0.95*x[i] + rng.NormFloat64() + 1e-4*float64(i)*float64(s)/100
		}
		xs[s] = append([]float64(nil), x...)
	}
	for _, full := range []bool{true, false} {
		rs := newRandomScalingOf(d, full, 0.95)
		avg := make([]float64, d)
		avgs := make([][]float64, n)
		for s, v := range xs {
			for i := range avg {
				avg[i] += (v[i] - avg[i]) / float64(s+1)
			}
			avgs[s] = append([]float64(nil), avg...)
			rs.add(avg)
		}
		scale := 0.0
		for i := range d {
			scale = max(scale, exactV(avgs, i, i))
		}
		for i := range d {
			for k := range d {
				want := exactV(avgs, i, k)
				got := rs.cov(i, k, avg) / (n * n)
				if !full && i != k {
					if got != 0 {
						t.Errorf("diagonal accumulator: V[%d][%d] = %g, want 0", i, k, got)
					}
					continue
				}
				if math.Abs(got-want) > 0.01*scale {
					t.Errorf("full=%v: V[%d][%d] = %.6g, exact %.6g", full, i, k, got, want)
				}
			}
		}
		if v := rs.variance(0, avg); math.Abs(v-exactV(avgs, 0, 0)/n) > 0.01*scale/n {
			t.Errorf("variance(0) = %g, exact %g", v, exactV(avgs, 0, 0)/n)
		}
	}
}

func exactV(avgs [][]float64, i, k int) float64 {
	n := len(avgs)
	last := avgs[n-1]
	sum := 0.0
	for s, a := range avgs {
		w := float64(s+1) * float64(s+1)
		sum += w * (a[i] - last[i]) * (a[k] - last[k])
	}
	return sum / float64(n) / float64(n)
}

// TestMethodString checks the printed names of the error-bar methods.
func TestMethodString(t *testing.T) {
	for m, want := range map[Method]string{
		MethodAuto: "automatic", MethodRandomScaling: "random scaling",
		MethodBatchMeans: "batch means", MethodReplications: "replications", Method(9): "Method(9)",
	} {
		if got := m.String(); got != want {
			t.Errorf("Method(%d).String() = %q, want %q", int(m), got, want)
		}
	}
}

// TestRandomScalingCoarseCorrelations checks the accumulator pair of the
// reported bars (newRandomScalingBars): its variances are those of the
// fine grid, bit for bit, and the correlations taken from the coarse full
// sum (randomScalingCorrGrid points per doubling) match the exact sum's.
// Tolerance: a Riemann sum of the same integral with relative spacing at
// most 1/32 differs from the exact sum by at most about 1/32 of the
// largest term's share, so 0.05 in a correlation (not derived more
// closely; the path is the one of TestRandomScalingGrid, whose spacing
// 1/1024 stays under 1%).
func TestRandomScalingCoarseCorrelations(t *testing.T) {
	const d, n = 3, 60000
	rng := rand.New(rand.NewPCG(3, 4))
	fine := newRandomScalingOf(d, false, 0.95)
	pair := newRandomScalingBars(d, true, 0.95)
	x := make([]float64, d)
	avg := make([]float64, d)
	avgs := make([][]float64, n)
	for s := range n {
		for i := range x {
			// Coordinates 1 and 2 share part of their noise, so the
			// correlations are far from 0.
			x[i] = 0.95*x[i] + rng.NormFloat64() + 1e-4*float64(i)*float64(s)/100
		}
		x[2] += 0.5 * x[1]
		for i := range avg {
			avg[i] += (x[i] - avg[i]) / float64(s+1)
		}
		avgs[s] = append([]float64(nil), avg...)
		fine.add(avg)
		pair.add(avg)
	}
	for i := range d {
		if a, b := fine.variance(i, avg), pair.variance(i, avg); a != b {
			t.Errorf("variance(%d): pair %v, fine grid alone %v", i, b, a)
		}
	}
	cr := pair.corr
	for i := range d {
		for k := i + 1; k < d; k++ {
			want := exactV(avgs, i, k) / math.Sqrt(exactV(avgs, i, i)*exactV(avgs, k, k))
			got := cr.cov(i, k, avg) / math.Sqrt(cr.cov(i, i, avg)*cr.cov(k, k, avg))
			if math.Abs(got-want) > 0.05 {
				t.Errorf("correlation [%d][%d]: coarse %.4f, exact %.4f", i, k, got, want)
			}
			t.Logf("correlation [%d][%d]: coarse %.4f, exact %.4f", i, k, got, want)
		}
	}
}
