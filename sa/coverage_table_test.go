package sa_test

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"sort"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// covConfig is one configuration of the coverage table: a seeded run and
// the true answer of its first coordinate.
type covConfig struct {
	name  string
	truth float64
	// run performs one seeded run; toUser maps the estimate and the
	// interval ends of coordinate 0 to the units the truth is in (nil:
	// identity). It returns the Result and, for pull runs, the number of
	// steps at which the bars were first available (0 if never or not
	// tracked).
	run    func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error)
	toUser func(v float64) float64
	// refused: the configuration must never report bars; Why must say
	// so. deterministic: and ErrorBars.Deterministic must be set.
	refused, deterministic bool
	// inDefault: checked in the default (short) run.
	inDefault bool
}

// covRow is a line of the table.
type covRow struct {
	name                  string
	runs, avail, cover    int
	unsettled             int
	meanHalf, trueSE      float64
	medianFirst           int
	why                   string
	refused, inBand, band bool
}

// pullRun runs a Robbins–Monro solver step by step for n steps and notes
// when the bars first appear (checked every 250 steps).
func pullRun(h oracle.Field, x0 []float64, s sa.Settings, n int) (sa.Result, int, error) {
	s.MaxSteps = n
	sv, err := sa.NewSolver(h, x0, s)
	if err != nil {
		return sv.Result(), 0, err
	}
	first := 0
	for k := 1; k <= n; k++ {
		if err := sv.Step(); err != nil {
			return sv.Result(), 0, err
		}
		if first == 0 && k%250 == 0 && sv.Result().ErrorBars.Available {
			first = k
		}
	}
	return sv.Result(), first, nil
}

// firstShown returns the first traced step at which the bars were shown
// (0 if never or if the run was not traced).
func firstShown(r sa.Result) int {
	if r.Trace == nil {
		return 0
	}
	for p := range r.Trace.All() {
		if p.HalfWidth != nil {
			return p.Step
		}
	}
	return 0
}

// covConfigs returns the configurations of issue 11, item 1. The tuner
// with a decreasing gain is not among them: its error bars are the tuner
// work's (sa/tuner_*.go), and it has its own check.
//
// Sources of the true values: gonum distuv (the median of the exponential,
// 50·ln 2), closed forms (the kiln's 0.9 point of a logistic curve, the
// minimiser of the quadratic, the box-constrained root), the generating
// coefficients of the streaming least-squares problem (lsqBeta), and the
// NIST StRD NoInt1 certified value (noInt1B1).
func covConfigs(t testing.TB, long bool) []covConfig {
	// Median of an exponential latency with mean 50 (the README example's
	// shape; gonum distuv gives the truth 50·ln 2).
	lat := distuv.Exponential{Rate: 1.0 / 50}
	median := lat.Quantile(0.5)
	medianField := quantileField(0.5, func(r *rand.Rand) float64 { return r.ExpFloat64() * 50 })

	// Kiln: logistic pass curve, the 0.9 point 1180 + 12·ln 9 (closed form).
	kilnTruth := 1180 + 12*math.Log(9)
	kiln := oracle.Scalar(func(x float64, rng *rand.Rand) (float64, error) {
		if rng.Float64() < 1/(1+math.Exp(-(x-1180)/12)) {
			return 0.1, nil
		}
		return -0.9, nil
	})

	// Noisy quadratic f(x) = ½‖x − m‖² + N(0, 1) noise per evaluation,
	// minimiser m (closed form).
	m := []float64{1, -2}
	quad := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		s := 0.0
		for i, v := range x {
			s += (v - m[i]) * (v - m[i])
		}
		return s/2 + rng.NormFloat64(), nil
	})
	noint := noInt1Model(t)
	nFS := 100000
	traced := func(s sa.Settings) sa.Settings { s.Trace = &sa.Tracing{Every: 250, Max: 1 << 12}; return s }
	cfg := []covConfig{
		{name: "RM scalar: README median, 10^4 steps", truth: median, inDefault: true,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				// As in the README: no Gain (a pilot in the budget picks it).
				r, err := sa.RobbinsMonro(context.Background(), medianField, []float64{100}, traced(sa.Settings{MaxSteps: 10000, Seed: seed, Inference: in}))
				return r, firstShown(r), err
			}},
		{name: "RM scalar: median, gain 5x small, 10^4", truth: median,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				return pullRun(medianField, []float64{100}, sa.Settings{Gain: schedule.Power{Scale: 20, Exponent: 0.7}, BurnIn: 1000, Seed: seed, Inference: in}, 10000)
			}},
		{name: "RM scalar: kiln demo (gain ^0.6), 10^4", truth: kilnTruth,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				// As in examples/kiln: budget 10^4, burn-in a tenth, the safe range as a box.
				r, err := sa.RobbinsMonro(context.Background(), kiln, []float64{1150}, traced(sa.Settings{Gain: schedule.Power{Scale: 150, Exponent: 0.6},
					MaxMeasurements: 10000, MaxSteps: sa.NoLimit, BurnIn: 1000, Seed: seed, Inference: in,
					Projection: sa.Box{Lower: []float64{1100}, Upper: []float64{1300}}}))
				return r, firstShown(r), err
			}},
		{name: "RM vector: streaming LSQ d=5, 2·10^4", truth: lsqBeta[0], inDefault: true,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				s := lsqSettings(0.6, 20000)
				s.Seed, s.Inference = seed, in
				s.Inference.BatchScale = 3
				return pullRun(lsqProblem(), make([]float64, 5), s, 20000)
			}},
		{name: "Kiefer–Wolfowitz, gain ^0.8, 2·10^4", truth: m[0],
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				g, err := oracle.NewKieferWolfowitz(quad, 2, oracle.KieferWolfowitzSettings{Sizes: schedule.PowerSizes{Scale: 0.5}})
				if err != nil {
					t.Fatal(err)
				}
				// Scale 5: the run then spans about 18 noise memories by 2·10^4
				// steps (n·a_n·λ/2 with λ = 1); with Scale 1 it spans 4 and the
				// bars are withheld as unsettled.
				return pullRun(g, []float64{0, 0}, sa.Settings{Gain: schedule.Power{Scale: 5, Offset: 5, Exponent: 0.8}, BurnIn: 200, Seed: seed, Inference: in}, 20000)
			}},
		{name: "SPSA two-measurement, 2·10^4", truth: m[0],
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				g, err := oracle.NewSPSA(quad, 2, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.5}})
				if err != nil {
					t.Fatal(err)
				}
				// Scale 3 (Offset 10 keeps a_0·λ below 1): the run spans about
				// 29 noise memories by 2·10^4 steps (n·a_n·λ/2 with λ = 1); with
				// Scale 1 it spans about 9 and the bars are withheld as unsettled.
				return pullRun(g, []float64{0, 0}, sa.Settings{Gain: schedule.Power{Scale: 3, Offset: 10, Exponent: 0.7}, BurnIn: 200, Seed: seed, Inference: in}, 20000)
			}},
		{name: "SPSA one-measurement, 2·10^4", truth: m[0],
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				g, err := oracle.NewSPSA(quad, 2, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.5}, OneMeasurement: true})
				if err != nil {
					t.Fatal(err)
				}
				// The one-measurement estimate f/(c·Δ) grows with f, so a large
				// gain diverges (Scale 0.3 did at step 23); with a stable gain
				// the memory is long and the bars are expected to be withheld.
				return pullRun(g, []float64{0, 0}, sa.Settings{Gain: schedule.Power{Scale: 0.05, Offset: 20, Exponent: 0.6}, BurnIn: 200, Seed: seed, Inference: in}, 20000)
			}},
		{name: "RM projected, active bound", truth: 0.9, refused: true, inDefault: true,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				h := oracle.Scalar(func(x float64, rng *rand.Rand) (float64, error) { return x - 1 + rng.NormFloat64(), nil })
				return pullRun(h, []float64{0}, sa.Settings{Gain: schedule.Power{Scale: 1, Exponent: 0.7}, Seed: seed, Inference: in,
					Projection: sa.Box{Lower: []float64{-5}, Upper: []float64{0.9}}}, 20000)
			}},
		{name: "SGD Uniform NoInt1, 10^5", truth: noInt1B1,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				r, err := noInt1Run(t, noint, "uniform", 1, nFS, seed, in)
				return r, firstShown(r), err
			}},
		{name: "MBGD-4 Uniform NoInt1, 10^5", truth: noInt1B1,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				r, err := noInt1Run(t, noint, "uniform", 4, nFS, seed, in)
				return r, firstShown(r), err
			}},
		{name: "SGD Shuffled NoInt1", truth: noInt1B1, refused: true, inDefault: true,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				r, err := noInt1Run(t, noint, "shuffled", 1, 20000, seed, in)
				return r, 0, err
			}},
		{name: "SGD BlockShuffled NoInt1", truth: noInt1B1, refused: true,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				r, err := noInt1Run(t, noint, "block", 1, 20000, seed, in)
				return r, 0, err
			}},
		{name: "SGD caller's sampler NoInt1", truth: noInt1B1, refused: true,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				r, err := noInt1Run(t, noint, "custom", 1, 20000, seed, in)
				return r, 0, err
			}},
		{name: "SGD Sequential NoInt1", truth: noInt1B1, refused: true, deterministic: true, inDefault: true,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				r, err := noInt1Run(t, noint, "sequential", 1, 20000, seed, in)
				return r, 0, err
			}},
		{name: "Shuffled batch n NoInt1", truth: noInt1B1, refused: true, deterministic: true, inDefault: true,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				r, err := noInt1Run(t, noint, "shuffled", 11, 2000, seed, in)
				return r, 0, err
			}},
		{name: "Full batch NoInt1", truth: noInt1B1, refused: true, deterministic: true, inDefault: true,
			run: func(t testing.TB, seed uint64, in sa.Inference) (sa.Result, int, error) {
				r, err := noInt1Run(t, noint, "full", 0, 2000, seed, in)
				return r, 0, err
			}},
	}
	for i := range cfg {
		if strings.Contains(cfg[i].name, "NoInt1") {
			cfg[i].toUser = func(v float64) float64 { return noint.ToOriginal(make([]float64, 1), []float64{v})[0] }
		}
	}
	return cfg
}

// covStudy runs R seeded runs of c with inference in and fills a row.
func covStudy(t *testing.T, c covConfig, R int, in sa.Inference) covRow {
	row := covRow{name: c.name, runs: R}
	id := func(v float64) float64 { return v }
	to := c.toUser
	if to == nil {
		to = id
	}
	var est []float64
	var firsts []int
	for r := range R {
		res, first, err := c.run(t, uint64(1000+r), in)
		if err != nil {
			t.Fatalf("%s, seed %d: %v", c.name, 1000+r, err)
		}
		eb := res.ErrorBars
		est = append(est, to(res.Estimate()[0]))
		if eb.Unsettled {
			row.unsettled++
		}
		if c.deterministic && !eb.Deterministic {
			t.Errorf("%s: ErrorBars.Deterministic = false (Why %q)", c.name, eb.Why)
		}
		if !eb.Available {
			if eb.Why == "" {
				t.Errorf("%s: bars not available and Why is empty", c.name)
			}
			row.why = eb.Why
			continue
		}
		row.avail++
		if first > 0 {
			firsts = append(firsts, first)
		}
		lo, hi, _ := eb.Interval(0)
		lo, hi = to(lo), to(hi)
		if lo > hi {
			lo, hi = hi, lo
		}
		if lo <= c.truth && c.truth <= hi {
			row.cover++
		}
		row.meanHalf += (hi - lo) / 2
	}
	if row.avail > 0 {
		row.meanHalf /= float64(row.avail)
	}
	mu := 0.0
	for _, v := range est {
		mu += (v - c.truth) * (v - c.truth)
	}
	row.trueSE = math.Sqrt(mu / float64(len(est))) // root-mean-square error about the truth
	if len(firsts) > 0 {
		sort.Ints(firsts)
		row.medianFirst = firsts[len(firsts)/2]
	}
	row.refused = row.avail == 0
	return row
}

// TestCoverageTable is item 6 of issue 11: for every configuration the
// drivers support, the nominal 95% intervals either cover the true value
// in [0.92, 0.98] of seeded runs or are refused with a reason.
//
// Methods: random scaling (RS, the default; Lee, Liao, Seo & Shin 2022,
// AAAI 36(7)) and batch means (BM; Chen, Lee, Tong & Zhang 2020, Ann.
// Statist. 48(1)), on the same seeds. The default method is asserted; the
// batch-means rows are printed for comparison.
//
// Band: the number of covering runs among the A runs that show bars is
// Binomial(A, p). For A = 400 and p = 0.95 the band 0.95 ± 0.03 is ±2.75
// binomial standard deviations (√(0.95·0.05/400) = 0.0109; normal
// approximation, common practice) — the band issue 11 asks for. Rows
// where some runs withhold their bars are judged on the runs that show
// them, with the band 0.95 ± 2.75·√(0.95·0.05/A) for their number A
// (so that a configuration whose shown intervals undercover is caught,
// and one whose few shown intervals are few is not condemned by chance).
// The default run (no STOCHROOT_LONG_TESTS) checks the configurations
// marked inDefault with R = 150 and ±3 binomial standard deviations
// (probability about 0.997 for a correct method).
//
// Truths: see covConfigs. The "RMS error" column is the root-mean-square
// error of the estimates about the truth over all runs; "half/1.96·RMS"
// is the mean half-width of the shown intervals over 1.96 times it (about
// 1 for a normal interval of the right width; random scaling's is wider
// on average, about 1.2–1.3, by the nature of its limit law). "first" is
// the median step at which the bars were first shown (checked every 250
// steps).
func TestCoverageTable(t *testing.T) {
	long := longTests()
	R := 150
	if long {
		R = 400
	}
	methods := []sa.Method{sa.MethodAuto, sa.MethodBatchMeans}
	if !long {
		// Batch means on the same least-squares problem is checked with
		// R = 400 by TestReferenceBatchMeansCoverage.
		methods = methods[:1]
	}
	var b strings.Builder
	fmt.Fprintf(&b, "\n%-40s %-4s %5s %5s %8s %13s %10s %11s %6s  %s\n", "configuration", "meth", "runs", "bars", "coverage", "band", "RMS error", "half/1.96RMS", "first", "verdict / reason")
	for _, c := range covConfigs(t, long) {
		if !long && !c.inDefault {
			continue
		}
		for _, meth := range methods {
			R := R
			if c.refused {
				R = min(R, 20) // a refusal is a property of the configuration, not of chance
			}
			row := covStudy(t, c, R, sa.Inference{Method: meth})
			name := map[sa.Method]string{sa.MethodBatchMeans: "BM", sa.MethodAuto: "RS"}[meth]
			verdict := ""
			p := float64(row.cover) / float64(max(row.avail, 1))
			k := 2.75
			if !long {
				k = 3
			}
			band := k * math.Sqrt(0.95*0.05/float64(max(row.avail, 1)))
			lo, hi := 0.95-band, math.Min(0.95+band, 1)
			bandStr := "-"
			if row.avail > 0 {
				bandStr = fmt.Sprintf("[%.3f,%.3f]", lo, hi)
			}
			fail := false
			switch {
			case c.refused && row.avail == 0:
				verdict = "refused: " + short(row.why)
			case c.refused:
				verdict = "FAIL: bars reported"
				fail = true
			case row.avail == 0:
				verdict = "withheld in every run: " + short(row.why)
			case p >= lo && p <= hi && row.avail < R:
				verdict = fmt.Sprintf("in band; withheld in %d runs: %s", R-row.avail, short(row.why))
			case p >= lo && p <= hi:
				verdict = "in band"
			default:
				verdict = "OUT of band"
				if row.avail < R {
					verdict += fmt.Sprintf(" (withheld in %d runs)", R-row.avail)
				}
				fail = meth == sa.MethodAuto
			}
			if fail {
				t.Errorf("%s (%s): %s: %d of %d runs show bars, coverage %.3f, band [%.3f, %.3f]", c.name, name, verdict, row.avail, R, p, lo, hi)
			}
			cov := "-"
			if row.avail > 0 {
				cov = fmt.Sprintf("%.3f", p)
			}
			ratio := "-"
			if row.avail > 0 && row.trueSE > 0 {
				ratio = fmt.Sprintf("%.2f", row.meanHalf/(1.96*row.trueSE))
			}
			fmt.Fprintf(&b, "%-40s %-4s %5d %5d %8s %13s %10.3g %11s %6d  %s\n", c.name, name, R, row.avail, cov, bandStr, row.trueSE, ratio, row.medianFirst, verdict)
		}
	}
	b.WriteString("tuner with a decreasing gain: checked by TestTunerErrorBarsCoverage (sa/tuner_bars_test.go; SetpointTuner offered at 0.930, QuantileTuner and learned gains refused)\n")
	t.Log(b.String())
}

func short(s string) string {
	if len(s) > 90 {
		return s[:90] + "…"
	}
	return s
}
