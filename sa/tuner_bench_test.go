package sa

import (
	"math"
	"runtime"
	"sync"
	"sync/atomic"
	"testing"

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
