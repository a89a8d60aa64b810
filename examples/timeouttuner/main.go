// Command timeouttuner runs a small HTTP service on 127.0.0.1 whose backend
// slows down part-way through the run, and keeps the service's request
// timeout at the level that lets 99% of requests finish (the 0.99-quantile
// of the backend's latency) with a sa.QuantileTuner.
//
// Every request reads the current timeout (lock-free), calls the simulated
// backend with that deadline, answers 200 or 504, and reports to the tuner
// whether the call finished in time, with the version of the timeout it
// used. An in-process load generator sends requests for 10 seconds (at most
// 120000). The program prints the tuned timeout and the fraction of
// requests that finished in time, second by second, with the backend's
// designed 0.99-quantile beside it, and writes a PNG plot.
//
// The tuner is given no gain: it moves the timeout by at most 2 ms per
// request while it learns the slope of the fraction within the timeout,
// then keeps a constant gain with a time constant of about 80 requests
// (TunerSettings.Memory). The program prints the gain it learned and how,
// and the tracking noise of the timeout once enough requests back it.
//
// The backend's latency is log-normal with a median of 4 ms that ramps to
// 8 ms between 4.5 s and 5.5 s (a scenario of our own). The handler adds
// the scheduling delay of a loaded 2-core machine on top, so the measured
// fraction, not the designed quantile, is what the tuner must hit. Latency
// draws are seeded per request number; the order in which requests run is
// up to the scheduler, so numbers vary a little from run to run.
//
// The plot goes to $TIMEOUTTUNER_PNG, or timeouttuner.png in the system's
// temporary directory.
package main

import (
	"context"
	"errors"
	"fmt"
	"image/color"
	"log"
	"math"
	"math/rand/v2"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"sync"
	"sync/atomic"
	"time"

	"gonum.org/v1/gonum/stat/distuv"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"

	"github.com/stochroot/stochroot/sa"
)

const (
	p           = 0.99             // target fraction of requests within the timeout
	runFor      = 10 * time.Second // load generator stops after this ...
	maxRequests = 120000           // ... or after this many requests
	workers     = 32               // concurrent clients
	sigma       = 0.35             // log-normal shape of the backend latency
	bin         = 250 * time.Millisecond
	seed        = 2026
)

// medianMs is the backend's median latency at time t since the start.
func medianMs(t time.Duration) float64 {
	const before, after = 4.0, 8.0
	s := t.Seconds()
	switch {
	case s < 4.5:
		return before
	case s > 5.5:
		return after
	}
	return before + (after-before)*(s-4.5)
}

// designedQuantileMs is the backend's designed p-quantile at time t (gonum).
func designedQuantileMs(t time.Duration) float64 {
	return distuv.LogNormal{Mu: math.Log(medianMs(t)), Sigma: sigma}.Quantile(p)
}

type binStats struct{ total, within atomic.Int64 }

func main() {
	log.SetFlags(0)
	began := time.Now()
	q, err := sa.NewQuantileTuner(p, 30, sa.TunerSettings{ // start at a generous 30 ms
		// No gain: the tuner learns the slope of the fraction within the
		// timeout from the reports (moving at most MaxChange meanwhile)
		// and then keeps a constant gain with a time constant of about
		// Memory requests, so that it follows the drift.
		Memory:     80,
		Projection: sa.Box{Lower: []float64{1}, Upper: []float64{200}}, // ms
		MaxChange:  []float64{2},                                       // ms per update
		MaxLag:     64,                                                 // ≈ 2 versions per concurrent request
	})
	if err != nil {
		log.Fatal(err)
	}

	var (
		start   time.Time
		reqNo   atomic.Uint64
		nBins   = int(runFor/bin) + 1
		bins    = make([]binStats, nBins)
		samples struct {
			sync.Mutex
			t, timeout []float64
		}
	)
	handler := func(w http.ResponseWriter, r *http.Request) {
		timeoutMs, version := q.Param()
		now := time.Since(start)
		rng := rand.New(rand.NewPCG(seed, reqNo.Add(1)))
		latency := time.Duration(medianMs(now) * math.Exp(sigma*rng.NormFloat64()) * float64(time.Millisecond))
		work := time.NewTimer(latency)
		defer work.Stop()
		deadline := time.NewTimer(time.Duration(timeoutMs * float64(time.Millisecond)))
		defer deadline.Stop()
		within := false
		select {
		case <-work.C:
			within = true
		case <-deadline.C:
		case <-r.Context().Done():
			return // the client left (end of the run): no observation of the timeout
		}
		if _, err := q.Observe(version, within); err != nil {
			log.Printf("report: %v", err)
		}
		if b := int(now / bin); b < nBins {
			bins[b].total.Add(1)
			if within {
				bins[b].within.Add(1)
			}
		}
		if !within {
			http.Error(w, "timeout", http.StatusGatewayTimeout)
			return
		}
		fmt.Fprintln(w, "ok")
	}

	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		log.Fatal(err)
	}
	srv := &http.Server{Handler: http.HandlerFunc(handler), ReadHeaderTimeout: time.Second}
	go srv.Serve(ln)
	url := "http://" + ln.Addr().String() + "/"
	client := &http.Client{
		Timeout:   2 * time.Second,
		Transport: &http.Transport{MaxIdleConnsPerHost: workers, MaxConnsPerHost: workers},
	}

	start = time.Now()
	ctx, cancel := context.WithTimeout(context.Background(), runFor)
	defer cancel()
	var sent atomic.Int64
	var wg sync.WaitGroup
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for ctx.Err() == nil && sent.Add(1) <= maxRequests {
				req, _ := http.NewRequestWithContext(ctx, http.MethodGet, url, nil)
				resp, err := client.Do(req)
				if err != nil {
					if !errors.Is(err, context.DeadlineExceeded) {
						log.Printf("request: %v", err)
					}
					continue
				}
				resp.Body.Close()
			}
		}()
	}
	// Sample the timeout every 20 ms for the plot.
	wg.Add(1)
	go func() {
		defer wg.Done()
		tick := time.NewTicker(20 * time.Millisecond)
		defer tick.Stop()
		for {
			select {
			case <-ctx.Done():
				return
			case now := <-tick.C:
				x, _ := q.Param()
				samples.Lock()
				samples.t = append(samples.t, now.Sub(start).Seconds())
				samples.timeout = append(samples.timeout, x)
				samples.Unlock()
			}
		}
	}()
	wg.Wait()
	shut, cancelShut := context.WithTimeout(context.Background(), 2*time.Second)
	defer cancelShut()
	srv.Shutdown(shut)
	q.Tuner().Close()

	// Report.
	st := q.Tuner().Stats()
	fmt.Printf("target: %.4g of requests within the timeout; backend median 4 ms → 8 ms between 4.5 s and 5.5 s\n", p)
	fmt.Printf("%6s %12s %12s %14s %9s %9s\n", "t (s)", "timeout at t", "mean of s", "designed q ms", "requests", "within")
	perSec := int(time.Second / bin)
	for s := 0; s < int(runFor/time.Second); s++ {
		var tot, in int64
		for b := s * perSec; b < (s+1)*perSec; b++ {
			tot += bins[b].total.Load()
			in += bins[b].within.Load()
		}
		at := time.Duration(s+1) * time.Second
		fmt.Printf("%6d %12.4g %12.4g %14.4g %9d %9.4g\n", s+1, timeoutAt(samples.t, samples.timeout, at.Seconds()-0.01),
			meanTimeout(samples.t, samples.timeout, float64(s), float64(s+1)), designedQuantileMs(at-time.Millisecond), tot, frac(in, tot))
	}
	phase := func(name string, from, to float64) {
		var tot, in int64
		for b := int(from / bin.Seconds()); b < int(to/bin.Seconds()); b++ {
			tot += bins[b].total.Load()
			in += bins[b].within.Load()
		}
		fmt.Printf("%s (%.4g–%.4g s): mean timeout %.4g ms (designed 0.99-quantile %.4g ms), %d requests, %.4g within\n",
			name, from, to, meanTimeout(samples.t, samples.timeout, from, to), designedQuantileMs(time.Duration(from*float64(time.Second))), tot, frac(in, tot))
	}
	phase("before the drift", 2, 4.5)
	phase("after the drift ", 7, 10)
	fmt.Printf("tuner: %d reports applied, %d stale, %d rejected; version %d\n",
		st.Applied, st.Stale, st.NotFinite+st.Future+st.Failed+st.AfterClose, st.Version)
	if lg, ok := q.Tuner().LearnedGain(); ok {
		if lg.WarmUp {
			fmt.Printf("learned gain: still warming up after %d reports (slope %.3g ± %.2g per ms, not yet clear of its noise); warm-up gain %.4g ms, every move within MaxChange\n",
				st.Applied, lg.Slope, lg.StdErr, lg.Gain)
		} else {
			fmt.Printf("learned gain: warm-up ended after %d reports; slope %.3g ± %.2g per ms (in use %.3g), gain %.4g ms\n",
				lg.SwitchStep+1, lg.Slope, lg.StdErr, lg.InUse, lg.Gain)
		}
	}
	if tn := q.Tuner().TrackingNoise(); tn.Available {
		fmt.Printf("tracking noise: the timeout wobbles by ±%.3g ms (one standard deviation) over a memory of %.0f requests\n", tn.Spread[0], tn.Memory)
	} else {
		fmt.Printf("tracking noise: not available (%s)\n", tn.Why)
	}

	path := os.Getenv("TIMEOUTTUNER_PNG")
	if path == "" {
		path = filepath.Join(os.TempDir(), "timeouttuner.png")
	}
	if err := writePlot(path, samples.t, samples.timeout, bins); err != nil {
		log.Fatal(err)
	}
	fmt.Printf("plot: %s; finished in %.3g s\n", path, time.Since(began).Seconds())
}

func frac(in, tot int64) float64 {
	if tot == 0 {
		return math.NaN()
	}
	return float64(in) / float64(tot)
}

// meanTimeout returns the mean of the sampled timeouts in [from, to) seconds.
func meanTimeout(ts, xs []float64, from, to float64) float64 {
	var sum float64
	var n int
	for i, t := range ts {
		if t >= from && t < to {
			sum += xs[i]
			n++
		}
	}
	return sum / float64(n)
}

// timeoutAt returns the last sampled timeout at or before time t.
func timeoutAt(ts, xs []float64, t float64) float64 {
	v := math.NaN()
	for i, s := range ts {
		if s > t {
			break
		}
		v = xs[i]
	}
	return v
}

// stepTicks labels every multiple of step inside the axis range.
func stepTicks(step float64, format string) plot.Ticker {
	return plot.TickerFunc(func(lo, hi float64) []plot.Tick {
		var ts []plot.Tick
		for i := math.Ceil(lo/step - 1e-9); i*step <= hi+1e-9*step; i++ {
			v := i * step
			if v == 0 {
				v = 0 // not "-0"
			}
			ts = append(ts, plot.Tick{Value: v, Label: fmt.Sprintf(format, v)})
		}
		return ts
	})
}

func writePlot(path string, ts, xs []float64, bins []binStats) error {
	top := plot.New()
	top.Title.Text = "Request timeout tuned to the 0.99-quantile of a drifting backend"
	top.Y.Label.Text = "timeout (ms)"
	tuned := make(plotter.XYs, len(ts))
	for i := range ts {
		tuned[i] = plotter.XY{X: ts[i], Y: xs[i]}
	}
	var truth plotter.XYs
	for t := 0.0; t <= runFor.Seconds(); t += 0.05 {
		truth = append(truth, plotter.XY{X: t, Y: designedQuantileMs(time.Duration(t * float64(time.Second)))})
	}
	lt, err := plotter.NewLine(tuned)
	if err != nil {
		return err
	}
	lt.Color = color.RGBA{B: 200, A: 255}
	lt.Width = vg.Points(1.5)
	lq, err := plotter.NewLine(truth)
	if err != nil {
		return err
	}
	lq.Color = color.RGBA{R: 200, A: 255}
	lq.Dashes = []vg.Length{vg.Points(5), vg.Points(3)}
	top.Add(lt, lq, plotter.NewGrid())
	top.Legend.Add("tuned timeout", lt)
	top.Legend.Add("designed 0.99-quantile of backend latency", lq)
	top.Legend.Top = false // bottom right, below the tuned line
	top.X.Min, top.X.Max = 0, runFor.Seconds()
	top.Y.Min = 0
	top.Y.Tick.Marker = stepTicks(5, "%.0f") // 0, 5, 10, … ms, not two labels with needless decimals

	bottom := plot.New()
	bottom.X.Label.Text = "time (s)"
	bottom.Y.Label.Text = "fraction within timeout"
	var fr plotter.XYs
	for b := range bins {
		tot := bins[b].total.Load()
		if tot == 0 {
			continue
		}
		fr = append(fr, plotter.XY{X: (float64(b) + 0.5) * bin.Seconds(), Y: frac(bins[b].within.Load(), tot)})
	}
	lf, pts, err := plotter.NewLinePoints(fr)
	if err != nil {
		return err
	}
	target := plotter.NewFunction(func(float64) float64 { return p })
	target.Dashes = []vg.Length{vg.Points(5), vg.Points(3)}
	target.Color = color.RGBA{R: 200, A: 255}
	pts.Radius = vg.Points(1.5)
	bottom.Add(lf, pts, target, plotter.NewGrid())
	bottom.Legend.Add("per 0.25 s", lf)
	bottom.Legend.Add("target 0.99", target)
	bottom.Legend.Left = true
	bottom.X.Min, bottom.X.Max = 0, runFor.Seconds()
	bottom.Y.Min, bottom.Y.Max = 0.9, 1.005
	bottom.Y.Tick.Marker = stepTicks(0.02, "%.2f")

	img := vgimg.New(vg.Points(720), vg.Points(560))
	dc := draw.New(img)
	tiles := draw.Tiles{Rows: 2, Cols: 1, PadX: vg.Millimeter * 2, PadY: vg.Millimeter * 2, PadTop: vg.Millimeter * 2, PadBottom: vg.Millimeter * 2, PadLeft: vg.Millimeter * 2, PadRight: vg.Millimeter * 2}
	plots := [][]*plot.Plot{{top}, {bottom}}
	canvases := plot.Align(plots, tiles, dc)
	top.Draw(canvases[0][0])
	bottom.Draw(canvases[1][0])
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	if _, err := (vgimg.PngCanvas{Canvas: img}).WriteTo(f); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}
