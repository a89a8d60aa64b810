package sa

import (
	"fmt"
	"math"
	"os"
	"runtime"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/stochroot/stochroot/schedule"
)

// Benchmarks of the push tuner. Each has a hand-written baseline in the
// same run: an atomic load of one float64 for reads, and a mutex-guarded
// scalar update x −= a·y for reports, so the ratio shows the tuner's cost
// over the least a concurrent tuner must do.

var tunerSink float64

func benchTuner(b *testing.B) *Tuner {
	tu, err := NewTuner([]float64{0.5}, TunerSettings{
		Gain: schedule.Constant(1e-6), Projection: tunerBox1(0, 1), MaxChange: []float64{0.1}, MaxLag: 1 << 30,
	})
	if err != nil {
		b.Fatal(err)
	}
	return tu
}

func BenchmarkTunerRead(b *testing.B) {
	b.Run("baseline=atomic.Uint64", func(b *testing.B) {
		var u atomic.Uint64
		b.ReportAllocs()
		for b.Loop() {
			tunerSink += float64(u.Load())
		}
	})
	b.Run("Param1", func(b *testing.B) {
		tu := benchTuner(b)
		b.ReportAllocs()
		for b.Loop() {
			x, _ := tu.Param1()
			tunerSink += x
		}
	})
	b.Run("Param1/parallel-while-reporting", func(b *testing.B) {
		tu := benchTuner(b)
		stop := make(chan struct{})
		var wg sync.WaitGroup
		wg.Add(1)
		go func() { // one writer keeps publishing
			defer wg.Done()
			for {
				select {
				case <-stop:
					return
				default:
				}
				_, v := tu.Param1()
				tu.Report1(v, 0.1)
				tu.Report1(v, -0.1)
			}
		}()
		b.ReportAllocs()
		b.RunParallel(func(pb *testing.PB) {
			s := 0.0
			for pb.Next() {
				x, _ := tu.Param1()
				s += x
			}
			_ = s
		})
		close(stop)
		wg.Wait()
	})
}

type mutexScalar struct {
	mu sync.Mutex
	x  float64
}

func (m *mutexScalar) update(a, y float64) {
	m.mu.Lock()
	m.x -= a * y
	m.mu.Unlock()
}

func BenchmarkTunerReport(b *testing.B) {
	for _, g := range []int{1, 8} {
		b.Run(tunerBenchName("baseline=mutex-scalar", g), func(b *testing.B) {
			var m mutexScalar
			b.ReportAllocs()
			if g == 1 {
				for b.Loop() {
					m.update(1e-6, 0.1)
				}
				return
			}
			b.SetParallelism(max(1, g/runtime.GOMAXPROCS(0)))
			b.RunParallel(func(pb *testing.PB) {
				for pb.Next() {
					m.update(1e-6, 0.1)
				}
			})
		})
		b.Run(tunerBenchName("Param1+Report1", g), func(b *testing.B) {
			tu := benchTuner(b)
			b.ReportAllocs()
			if g == 1 {
				y := 0.1
				for b.Loop() {
					_, v := tu.Param1()
					tu.Report1(v, y)
					y = -y
				}
				return
			}
			b.SetParallelism(max(1, g/runtime.GOMAXPROCS(0)))
			b.RunParallel(func(pb *testing.PB) {
				y := 0.1
				for pb.Next() {
					_, v := tu.Param1()
					tu.Report1(v, y)
					y = -y
				}
			})
		})
	}
}

func tunerBenchName(s string, g int) string {
	if g == 1 {
		return s + "/goroutines=1"
	}
	return s + "/goroutines=8" // with GOMAXPROCS ≤ 8 dividing 8
}

// BenchmarkTunerReportHook measures what an OnUpdate hook that feeds a
// metric costs a report, against the same tuner without a hook.
func BenchmarkTunerReportHook(b *testing.B) {
	for _, withHook := range []bool{false, true} {
		n := "baseline=no-hook"
		if withHook {
			n = "hook=counter+last-value"
		}
		b.Run(n, func(b *testing.B) {
			var updates atomic.Uint64
			var last atomic.Uint64
			s := TunerSettings{Gain: schedule.Constant(1e-6), Projection: tunerBox1(0, 1), MaxChange: []float64{0.1}}
			if withHook {
				s.OnUpdate = func(u Update) {
					updates.Add(1)
					last.Store(math.Float64bits(u.X[0]))
				}
			}
			tu, err := NewTuner([]float64{0.5}, s)
			if err != nil {
				b.Fatal(err)
			}
			b.ReportAllocs()
			y := 0.1
			for b.Loop() {
				_, v := tu.Param1()
				tu.Report1(v, y)
				y = -y
			}
		})
	}
}

// mutexVector is the baseline of a report at dimension d: a mutex-guarded
// update x −= a·y of d floats.
type mutexVector struct {
	mu sync.Mutex
	x  []float64
}

func (m *mutexVector) update(a float64, y []float64) {
	m.mu.Lock()
	for i, v := range y {
		m.x[i] -= a * v
	}
	m.mu.Unlock()
}

// loadAverage returns the one-minute load average of the machine (Linux),
// or −1: the benchmarks below print it beside their ratios, since the
// machine's cores are shared.
func loadAverage() float64 {
	b, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return -1
	}
	f := strings.Fields(string(b))
	if len(f) == 0 {
		return -1
	}
	v, err := strconv.ParseFloat(f[0], 64)
	if err != nil {
		return -1
	}
	return v
}

// parallelOps runs ops calls of op spread over g goroutines and returns
// the wall time per call.
func parallelOps(g, ops int, op func(w int, i int)) float64 {
	var wg sync.WaitGroup
	start := time.Now()
	for w := range g {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range ops / g {
				op(w, i)
			}
		}()
	}
	wg.Wait()
	return float64(time.Since(start).Nanoseconds()) / float64(ops/g*g)
}

// BenchmarkTunerReportRatio measures Param+Report from g goroutines
// against the mutex-guarded update of d floats (mutexVector), side by side
// in the same run: the two alternate in rounds of 20 000 calls, so that
// both see the same load. Metrics: ns/report and ns/baseline (wall time per
// call, all goroutines together), ratio = report/baseline; ns/core-step
// and core-ratio, the update core's step alone on one goroutine (the floor
// of any report, which the tuner does not own) against the same baseline;
// and load1, the machine's one-minute load average at the end (the 2
// cores are shared). b.N counts rounds.
func BenchmarkTunerReportRatio(b *testing.B) {
	for _, d := range []int{1, 8} {
		for _, g := range []int{1, 8} {
			b.Run(fmt.Sprintf("d=%d/goroutines=%d", d, g), func(b *testing.B) {
				x0 := make([]float64, d)
				lo, hi, mc := make([]float64, d), make([]float64, d), make([]float64, d)
				for i := range d {
					x0[i], lo[i], hi[i], mc[i] = 0.5, 0, 1, 0.1
				}
				tu, err := NewTuner(x0, TunerSettings{
					Gain: schedule.Constant(1e-6), Projection: Box{Lower: lo, Upper: hi}, MaxChange: mc, MaxLag: 1 << 30,
				})
				if err != nil {
					b.Fatal(err)
				}
				base := &mutexVector{x: make([]float64, d)}
				xs := make([][]float64, g)
				ys := make([][]float64, g)
				for w := range g {
					xs[w], ys[w] = make([]float64, d), make([]float64, d)
					for i := range d {
						ys[w][i] = 0.1
					}
				}
				// The floor: the core's step alone, on one goroutine, with
				// the same settings (what any tuner built on the one update
				// core must pay per report).
				floor := newCore(x0, schedule.Constant(1e-6), 0, Box{Lower: lo, Upper: hi}, 0)
				floor.maxChange = mc
				const round = 20_000
				var tRep, tBase, tCore float64
				b.ReportAllocs()
				for b.Loop() {
					y := ys[0]
					start := time.Now()
					for i := range round {
						y[0] = 0.1 - 0.2*float64(i&1)
						floor.step(y)
					}
					tCore += float64(time.Since(start).Nanoseconds()) / round
					tBase += parallelOps(g, round, func(w, i int) {
						base.update(1e-6, ys[w])
					})
					tRep += parallelOps(g, round, func(w, i int) {
						y := ys[w]
						v := tu.Param(xs[w])
						if i&1 == 1 {
							y[0] = -0.1
						} else {
							y[0] = 0.1
						}
						tu.Report(v, y)
					})
				}
				n := float64(b.N)
				b.ReportMetric(tRep/n, "ns/report")
				b.ReportMetric(tBase/n, "ns/baseline")
				b.ReportMetric(tRep/tBase, "ratio")
				b.ReportMetric(tCore/n, "ns/core-step")
				b.ReportMetric(tCore/tBase, "core-ratio")
				b.ReportMetric(loadAverage(), "load1")
			})
		}
	}
}

// BenchmarkTunerReadRatio measures Param1 against one atomic load of a
// uint64, side by side in rounds of 100 000 calls on one goroutine, idle
// and with a writer on another goroutine that reports all the time and
// stores a new value into the baseline's word after each report (so both
// reads meet a cache line written by another core). Metrics as in
// BenchmarkTunerReportRatio.
func BenchmarkTunerReadRatio(b *testing.B) {
	for _, busy := range []bool{false, true} {
		name := "idle"
		if busy {
			name = "while-reporting"
		}
		b.Run(name, func(b *testing.B) {
			tu := benchTuner(b)
			var u atomic.Uint64
			u.Store(math.Float64bits(0.5))
			stop := make(chan struct{})
			var wg sync.WaitGroup
			if busy {
				wg.Add(1)
				go func() {
					defer wg.Done()
					for {
						select {
						case <-stop:
							return
						default:
						}
						_, v := tu.Param1()
						tu.Report1(v, 0.1)
						u.Store(math.Float64bits(0.1)) // the baseline's value changes as often
						tu.Report1(v, -0.1)
						u.Store(math.Float64bits(-0.1))
					}
				}()
			}
			const round = 100_000
			var tRead, tBase float64
			s := 0.0
			b.ReportAllocs()
			for b.Loop() {
				start := time.Now()
				for range round {
					s += math.Float64frombits(u.Load())
				}
				tBase += float64(time.Since(start).Nanoseconds()) / round
				start = time.Now()
				for range round {
					x, _ := tu.Param1()
					s += x
				}
				tRead += float64(time.Since(start).Nanoseconds()) / round
			}
			close(stop)
			wg.Wait()
			tunerSink += s
			n := float64(b.N)
			b.ReportMetric(tRead/n, "ns/read")
			b.ReportMetric(tBase/n, "ns/baseline")
			b.ReportMetric(tRead/tBase, "ratio")
			b.ReportMetric(loadAverage(), "load1")
		})
	}
}
