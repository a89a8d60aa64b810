package remote

import (
	"context"
	"math"
	"math/rand/v2"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"

	"github.com/stochroot/stochroot/oracle"
)

// startServer starts an embedded NATS server on a random loopback port and
// returns its URL; it is shut down when the test ends.
func startServer(t testing.TB) string {
	t.Helper()
	s, err := server.NewServer(&server.Options{Host: "127.0.0.1", Port: -1, NoLog: true, NoSigs: true})
	if err != nil {
		t.Fatal(err)
	}
	s.Start()
	if !s.ReadyForConnections(10 * time.Second) {
		t.Fatal("embedded nats-server not ready")
	}
	t.Cleanup(s.Shutdown)
	return s.ClientURL()
}

// connect opens a connection closed when the test ends.
func connect(t testing.TB, url string) *nats.Conn {
	t.Helper()
	nc, err := nats.Connect(url, nats.Name(t.Name()))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	return nc
}

// startWorkers runs n in-process workers, each on its own connection, and
// stops them (and checks they drained without error) when the test ends.
// It returns once every worker has joined the queue group.
func startWorkers(t testing.TB, url string, n int, s WorkerSettings) *workerPool {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	p := &workerPool{cancel: cancel, served: make([]Served, n)}
	for i := range n {
		nc := connect(t, url)
		p.wg.Add(1)
		go func() {
			defer p.wg.Done()
			sv, err := Serve(ctx, nc, s)
			p.mu.Lock()
			p.served[i], p.errs = sv, append(p.errs, err)
			p.mu.Unlock()
		}()
		waitSubscribed(t, nc, 1)
	}
	t.Cleanup(func() {
		if errs := p.stop(); len(errs) > 0 {
			t.Errorf("workers: %v", errs)
		}
	})
	return p
}

type workerPool struct {
	cancel context.CancelFunc
	wg     sync.WaitGroup
	mu     sync.Mutex
	served []Served
	errs   []error
	once   sync.Once
}

// stop cancels the workers, waits for them and returns their errors.
func (p *workerPool) stop() []error {
	var out []error
	p.once.Do(func() {
		p.cancel()
		p.wg.Wait()
		for _, err := range p.errs {
			if err != nil {
				out = append(out, err)
			}
		}
	})
	return out
}

// waitSubscribed waits until nc holds n subscriptions the server has seen.
func waitSubscribed(t testing.TB, nc *nats.Conn, n int) {
	t.Helper()
	deadline := time.Now().Add(10 * time.Second)
	for nc.NumSubscriptions() < n {
		if time.Now().After(deadline) {
			t.Fatalf("worker did not subscribe")
		}
		time.Sleep(time.Millisecond)
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
}

// noisyBowl is the test measurement: a quadratic with its minimum at
// (1, 2, 3, …) plus noise drawn from the measurement's stream (several
// draws, so a stream mix-up would show), after a pause of up to jitter
// drawn from a source unrelated to the stream, so that replies arrive in
// a different order on every run.
func noisyBowl(jitter time.Duration) oracle.ValueFunc {
	return func(x []float64, rng *rand.Rand) (float64, error) {
		if jitter > 0 {
			time.Sleep(time.Duration(rand.Int64N(int64(jitter))))
		}
		f := 0.0
		for i, v := range x {
			d := v - float64(i+1)
			f += d * d
		}
		return f + 0.1*rng.NormFloat64() + 0.01*(rng.Float64()-0.5), nil
	}
}

// stepField is a vector field whose value depends on the step index k
// through oracle.ContextFieldFunc, with noise from the stream.
func stepField(jitter time.Duration) oracle.ContextFieldFunc {
	return func(_ context.Context, k int, dst, x []float64, rng *rand.Rand) error {
		if jitter > 0 {
			time.Sleep(time.Duration(rand.Int64N(int64(jitter))))
		}
		for i := range dst {
			dst[i] = x[i] - float64(i) + rng.NormFloat64()/float64(k+1)
		}
		return nil
	}
}

// sameBits reports whether a and b are equal bit for bit.
func sameBits(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if math.Float64bits(a[i]) != math.Float64bits(b[i]) {
			return false
		}
	}
	return true
}
