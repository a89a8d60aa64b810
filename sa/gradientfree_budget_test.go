package sa_test

import (
	"context"
	"fmt"
	"math"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"

	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// quarticLoss is the noise-free skewed quartic of skewedQuartic.
func quarticLoss(x []float64) float64 {
	p := len(x)
	l, suffix := 0.0, 0.0
	for i := p - 1; i >= 0; i-- {
		suffix += x[i]
		b := suffix / float64(p)
		l += b*b + 0.1*b*b*b + 0.01*b*b*b*b
	}
	return l
}

// quarticLosses runs the default plan (nil Settings.Gain) of method
// ("SPSA" or "KW") on Spall's skewed quartic, p = 10, θ0 = (1, …, 1),
// noise sd 0.1, sizes c_k = 0.1/(k+1)^0.101 (Spall 1998, IEEE Trans.
// Aerosp. Electron. Syst. 34(3): c about the noise sd, γ = 0.101), with a
// budget of n measurements, on seeds 1…reps, and returns the noise-free
// loss L(θ̂) of each run's estimate.
func quarticLosses(t testing.TB, method string, n, reps int) []float64 {
	t.Helper()
	const p = 10
	f := skewedQuartic(p, 0.1)
	x0 := make([]float64, p)
	for i := range x0 {
		x0[i] = 1
	}
	out := make([]float64, reps)
	for i := range out {
		g, err := newGradientFree(method, f, p, schedule.PowerSizes{Scale: 0.1, Exponent: schedule.SpallGamma})
		if err != nil {
			t.Fatal(err)
		}
		r, err := sa.RobbinsMonro(context.Background(), g, x0, sa.Settings{MaxMeasurements: n, Seed: uint64(1 + i), Inference: sa.Inference{Covariance: sa.CovarianceOff}})
		if err != nil {
			t.Fatalf("%s, %d measurements, seed %d: %v", method, n, 1+i, err)
		}
		if r.Calibration == nil {
			t.Fatalf("%s: nil gain but no Calibration on the Result", method)
		}
		out[i] = quarticLoss(r.Estimate())
	}
	return out
}

// TestReferenceSkewedQuarticBudgets checks the default plans of SPSA and
// Kiefer–Wolfowitz (Settings.Gain nil: the robust constant step with
// averaging of calibrateGradientFree) on Spall's skewed quartic, p = 10,
// θ0 = 1, L(θ0) = 4.177833, noise sd 0.1 (Spall 1992, IEEE Trans. Automat.
// Control 37(3); Spall 1998, IEEE Trans. Aerosp. Electron. Syst. 34(3);
// the loss is defined in skewedQuartic):
//
//  1. the loss falls with the budget: the mean loss of SPSA at 2 000
//     measurements is at least 4 times its mean loss at 64 000;
//  2. SPSA reaches a loss with at least 5 times fewer measurements than
//     Kiefer–Wolfowitz (Spall 1992 states about p-fold fewer,
//     asymptotically): at each budget B of claim2Budgets, KW's mean loss
//     at 5B is still above SPSA's at B. Since the mean loss falls with
//     the budget (1, and the table), KW then needs more than 5B
//     measurements to get down to SPSA's loss at B.
//
// Measured (100 seeds; the table's last column, the budget KW needs for
// SPSA's mean loss at B over B): 6.1× at B = 2 000, 7.3× at 4 000, 7.9×
// at 8 000, 8.1× at 16 000, 9.0× at 32 000 and more than 5× at 64 000
// (1.7×, 2.0×, 2.6×, 3.6×, 8.4× and more than 5× when the step used M̂ at
// x0 alone; see calibrateGradientFree). At 2 000 the point estimate is
// above 5 but the difference it rests on, KW's mean at 10 000 against
// SPSA's at 2 000 (0.048 against 0.044), is within 3 standard errors; at
// 4 000 and 16 000 the z-test below passes by less than 10% of its
// threshold, so a change of rounding in the update could flip it. Claim
// 2 is checked at the budgets where it passes with room (8 000, 32 000,
// 64 000: by 24%, 44% and 57% of the threshold).
//
// Each claim is a one-sided z-test on means over independent seeds: claim
// 1 requires m₂ₖ − f·m₆₄ₖ > 3·√(se₂ₖ² + f²·se₆₄ₖ²) with f = 4, claim 2
// requires m_KW(5B) − m_SPSA(B) > 3·√(se_KW² + se_SPSA²), with se the
// standard error of a mean over the seeds. A claim that is false (a true
// ratio of at most f, or of at most 5 budgets) passes with probability
// below 0.0013 (normal tail at 3); the runs at different budgets share
// seed numbers, but their streams differ after the first step, and any
// positive correlation only makes the stated variance of a difference
// too large, so the test is conservative. The short form runs 12 seeds
// (about 4 s with -race; the Kiefer–Wolfowitz runs at 5B would cost 15 s
// more) and checks claim 1 with f = 2: the true factor, about 5.6, is
// too close to 4 for 12 seeds to resolve at 3 standard errors, and f = 2
// still catches a plan whose loss stalls or grows with the budget (the
// defect of the issue). STOCHROOT_LONG_TESTS=1 checks both claims with
// 100 seeds and f = 4, runs budgets 2 000·2^j (j = 0…5, and 5× those for
// KW) and prints the table with -v (about 30 s without -race).
func TestReferenceSkewedQuarticBudgets(t *testing.T) {
	if testing.Short() {
		t.Skip("Monte Carlo comparison skipped in -short mode")
	}
	reps, factor := 12, 2.0
	budgets := []int{2000, 64000}
	var claim2 []int
	if longTests() {
		reps, factor = 100, 4
		budgets = []int{2000, 4000, 8000, 16000, 32000, 64000}
		claim2 = claim2Budgets
	}
	type cell = lossCell
	measure := func(method string, n int) cell {
		ls := quarticLosses(t, method, n, reps)
		m, v := stat.MeanVariance(ls, nil)
		return cell{m, math.Sqrt(v / float64(reps))}
	}
	spsa, kw, kw5 := map[int]cell{}, map[int]cell{}, map[int]cell{}
	for _, b := range budgets {
		spsa[b] = measure("SPSA", b)
		if longTests() {
			kw[b] = measure("KW", b)
		}
	}
	for _, b := range claim2 {
		kw5[b] = measure("KW", 5*b)
	}
	if longTests() {
		for _, b := range budgets {
			if _, ok := kw5[b]; !ok {
				kw5[b] = measure("KW", 5*b)
			}
		}
	}
	lo, hi := spsa[2000], spsa[64000]
	if d, se := lo.mean-factor*hi.mean, math.Sqrt(lo.se*lo.se+factor*factor*hi.se*hi.se); !(d > 3*se) {
		t.Errorf("SPSA mean loss %.4g at 2000 measurements is not %g× its %.4g at 64000 by 3 standard errors (%.3g − %g·%.3g = %.3g, 3 se = %.3g)", lo.mean, factor, hi.mean, lo.mean, factor, hi.mean, d, 3*se)
	}
	for _, b := range claim2 {
		s, k := spsa[b], kw5[b]
		if d, se := k.mean-s.mean, math.Hypot(k.se, s.se); !(d > 3*se) {
			t.Errorf("KW's mean loss %.4g at %d measurements is not above SPSA's %.4g at %d by 3 standard errors (%.3g): SPSA's advantage is below 5×", k.mean, 5*b, s.mean, b, 3*se)
		}
	}
	var sb strings.Builder
	fmt.Fprintf(&sb, "skewed quartic p = 10, default plans (nil gain), mean loss L(θ̂) ± se over %d seeds (L(θ0) = 4.178):\n", reps)
	fmt.Fprintf(&sb, "%12s %20s %20s %20s %9s\n", "budget B", "SPSA at B", "KW at B", "KW at 5B", "KW/SPSA")
	for _, b := range budgets {
		k, k5 := "", ""
		if c, ok := kw[b]; ok {
			k = fmt.Sprintf("%.3g ± %.2g", c.mean, c.se)
		}
		ratio := ""
		if c, ok := kw5[b]; ok {
			k5 = fmt.Sprintf("%.3g ± %.2g", c.mean, c.se)
			switch n := kwBudgetFor(spsa[b].mean, kw, kw5); {
			case n > 0:
				ratio = fmt.Sprintf("%.3g", n/float64(b))
			case c.mean > spsa[b].mean:
				ratio = "> 5"
			}
		}
		fmt.Fprintf(&sb, "%12d %20s %20s %20s %9s\n", b, fmt.Sprintf("%.3g ± %.2g", spsa[b].mean, spsa[b].se), k, k5, ratio)
	}
	sb.WriteString("KW/SPSA: the budget KW needs for SPSA's mean loss at B, over B (log-log interpolation of KW's means; \"> 5\" where KW's mean at 5B is still above it)")
	t.Log(sb.String())
}

// claim2Budgets are the budgets B at which the long form checks that KW's
// mean loss at 5B is above SPSA's at B (see
// TestReferenceSkewedQuarticBudgets).
var claim2Budgets = []int{8000, 32000, 64000}

// lossCell is a mean loss over seeds and its standard error.
type lossCell struct{ mean, se float64 }

// kwBudgetFor returns the budget at which KW's mean loss curve (the means
// at the budgets of kw and at 5× those of kw5) first falls to loss, by
// linear interpolation in log budget and log loss, or 0 outside the range
// measured.
func kwBudgetFor(loss float64, kw, kw5 map[int]lossCell) float64 {
	pts := map[int]float64{}
	for b, c := range kw {
		pts[b] = c.mean
	}
	for b, c := range kw5 {
		pts[5*b] = c.mean
	}
	bs := make([]int, 0, len(pts))
	for b := range pts {
		bs = append(bs, b)
	}
	slices.Sort(bs)
	for i := 1; i < len(bs); i++ {
		b0, b1 := bs[i-1], bs[i]
		l0, l1 := pts[b0], pts[b1]
		if l0 >= loss && l1 <= loss && l0 > l1 {
			w := math.Log(l0/loss) / math.Log(l0/l1)
			return math.Exp(math.Log(float64(b0)) + w*math.Log(float64(b1)/float64(b0)))
		}
	}
	return 0
}
