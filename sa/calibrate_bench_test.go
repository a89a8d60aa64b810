package sa_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/optimize"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sampling"
)

// BenchmarkCalibratedLogisticVsLBFGS: logistic regression with n = 10^6
// samples and d = 20 standard normal features, fitted (a) by MinimizeSum
// with mini-batches of 64 and a nil gain (the step from the data), one
// epoch, and (b) by gonum's optimize.LBFGS on the full loss until its
// relative loss gap to the best value found is below 1e-3. It reports the
// relative loss gap of (a), (f(x̄) − f*)/f*, with f* the L-BFGS optimum at
// gradient norm 1e-8, and the time ratio (a)/(b). Run it with
//
//	go test ./sa -run XXX -bench CalibratedLogistic -benchtime 1x
func BenchmarkCalibratedLogisticVsLBFGS(b *testing.B) {
	const n, d = 1_000_000, 20
	rng := rand.New(rand.NewPCG(11, 12))
	a, y := make([]float64, n*d), make([]float64, n)
	beta := make([]float64, d)
	for j := range beta {
		beta[j] = rng.NormFloat64() / math.Sqrt(d)
	}
	for i := range n {
		row := a[i*d : (i+1)*d]
		for j := range row {
			row[j] = rng.NormFloat64()
		}
		if rng.Float64() < 1/(1+math.Exp(-(0.3+floats.Dot(row, beta)))) {
			y[i] = 1
		}
	}
	m, err := oracle.NewLogistic(oracle.Dense{Data: a, Cols: d}, y, oracle.RegressionSettings{})
	if err != nil {
		b.Fatal(err)
	}
	full, err := oracle.NewFullBatch(m, oracle.BatchSettings{})
	if err != nil {
		b.Fatal(err)
	}
	defer full.Close()
	prob := optimize.Problem{
		Func: m.Value,
		Grad: func(g, x []float64) {
			if err := full.Measure(g, x, nil); err != nil {
				panic(err)
			}
		},
	}
	// f*: L-BFGS to a gradient norm of 1e-8.
	ref, err := optimize.Minimize(prob, make([]float64, d+1), &optimize.Settings{GradientThreshold: 1e-8}, &optimize.LBFGS{})
	if ref == nil {
		b.Fatal(err)
	}
	fstar := ref.F
	b.ResetTimer()
	for b.Loop() {
		g, err := oracle.NewMiniBatch(m, sampling.NewShuffled(n), 64, oracle.BatchSettings{})
		if err != nil {
			b.Fatal(err)
		}
		t0 := time.Now()
		r, err := sa.MinimizeSum(context.Background(), g, make([]float64, d+1), sa.Settings{MaxEpochs: 1, Seed: 3})
		tSGD := time.Since(t0)
		g.Close()
		if err != nil {
			b.Fatal(err)
		}
		gapSGD := (m.Value(r.Estimate()) - fstar) / fstar
		// L-BFGS until its own relative gap is below 1e-3 (timed, in
		// the same process, on the same data).
		t0 = time.Now()
		var iters int
		lb, err := optimize.Minimize(prob, make([]float64, d+1),
			&optimize.Settings{Converger: gapConverger{fstar: fstar, tol: 1e-3, iters: &iters}}, &optimize.LBFGS{})
		tLB := time.Since(t0)
		if lb == nil {
			b.Fatal(err)
		}
		// The shortest prefix of the epoch (halving from 1) whose
		// estimate is within 1e-3: the time the calibrated run needs to
		// reach the gap L-BFGS is stopped at.
		frac, tFrac, gapFrac := 1.0, tSGD, gapSGD
		for f := 0.5; f >= 1.0/256; f /= 2 {
			g, err := oracle.NewMiniBatch(m, sampling.NewShuffled(n), 64, oracle.BatchSettings{})
			if err != nil {
				b.Fatal(err)
			}
			t0 := time.Now()
			r, err := sa.MinimizeSum(context.Background(), g, make([]float64, d+1), sa.Settings{MaxMeasurements: int(f * n), Seed: 3})
			el := time.Since(t0)
			g.Close()
			if err != nil {
				b.Fatal(err)
			}
			gp := (m.Value(r.Estimate()) - fstar) / fstar
			if gp > 1e-3 {
				break
			}
			frac, tFrac, gapFrac = f, el, gp
		}
		t0 = time.Now()
		m.CurvatureBoundsOf(10000)
		tCurv := time.Since(t0)
		b.Logf("auto reaches gap %.3g after %.3g epoch in %v (of which %v reading the data for R² and L): %.3g × the L-BFGS time", gapFrac, frac, tFrac, tCurv, tFrac.Seconds()/tLB.Seconds())
		b.ReportMetric(tFrac.Seconds()/tLB.Seconds(), "time-to-1e-3-auto/lbfgs")
		b.ReportMetric(gapSGD, "gap-auto")
		b.ReportMetric((lb.F-fstar)/fstar, "gap-lbfgs")
		b.ReportMetric(tSGD.Seconds()/tLB.Seconds(), "time-auto/lbfgs")
		b.Logf("auto (%s): 1 epoch in %v, relative loss gap %.3g; L-BFGS to gap %.3g in %v (%d iterations); time ratio %.3g",
			r.Calibration.How, tSGD, gapSGD, (lb.F-fstar)/fstar, tLB, iters, tSGD.Seconds()/tLB.Seconds())
	}
}

// gapConverger stops an optimize run once f is within tol (relative) of
// fstar.
type gapConverger struct {
	fstar, tol float64
	iters      *int
}

func (c gapConverger) Init(int) {}

func (c gapConverger) Converged(loc *optimize.Location) optimize.Status {
	*c.iters++
	if (loc.F-c.fstar)/c.fstar < c.tol {
		return optimize.FunctionConvergence
	}
	return optimize.NotTerminated
}
