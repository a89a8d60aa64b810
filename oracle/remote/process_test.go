package remote

import (
	"bufio"
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"os/signal"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// Environment of a worker process: the test binary re-executed with
// -test.run=^TestHelperWorker$.
const (
	envURL      = "STOCHROOT_REMOTE_WORKER_URL"
	envSubject  = "STOCHROOT_REMOTE_WORKER_SUBJECT"
	envDelay    = "STOCHROOT_REMOTE_WORKER_DELAY"
	envAnnounce = "STOCHROOT_REMOTE_WORKER_ANNOUNCE"
)

// slowBowl is the worker processes' measurement: a pause of delay (the
// wall time of a simulation run) and then the noisy quadratic.
func slowBowl(delay time.Duration) oracle.ValueFunc {
	bowl := noisyBowl(0)
	return func(x []float64, rng *rand.Rand) (float64, error) {
		time.Sleep(delay)
		return bowl(x, rng)
	}
}

// TestHelperWorker is not a test: it is the body of a worker process,
// and skips unless the environment names a server.
func TestHelperWorker(t *testing.T) {
	url := os.Getenv(envURL)
	if url == "" {
		t.Skip("not a worker process")
	}
	delay, err := time.ParseDuration(os.Getenv(envDelay))
	if err != nil {
		t.Fatal(err)
	}
	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	ctx, stop := signal.NotifyContext(context.Background(), syscall.SIGTERM, os.Interrupt)
	defer stop()
	measure := slowBowl(delay)
	announce := os.Getenv(envAnnounce) != ""
	f := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		if announce {
			fmt.Println("start")
		}
		return measure(x, rng)
	})
	go func() {
		for nc.NumSubscriptions() < 1 {
			time.Sleep(time.Millisecond)
		}
		if nc.Flush() == nil {
			fmt.Println("ready")
		}
	}()
	served, err := Serve(ctx, nc, WorkerSettings{Subject: os.Getenv(envSubject), Value: f})
	if err != nil {
		t.Fatal(err)
	}
	fmt.Printf("served %d\n", served.Measurements)
}

// proc is a worker process and the lines it prints.
type proc struct {
	cmd   *exec.Cmd
	lines chan string
}

// startProc starts a worker process serving slowBowl(delay) on subject and
// waits until it has joined the queue group.
func startProc(t testing.TB, url, subject string, delay time.Duration, announce bool) *proc {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run=^TestHelperWorker$")
	cmd.Env = append(os.Environ(), envURL+"="+url, envSubject+"="+subject, envDelay+"="+delay.String())
	if announce {
		cmd.Env = append(cmd.Env, envAnnounce+"=1")
	}
	cmd.Stderr = os.Stderr
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	p := &proc{cmd: cmd, lines: make(chan string, 1024)}
	go func() {
		defer close(p.lines)
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			p.lines <- sc.Text()
		}
	}()
	t.Cleanup(func() {
		_ = cmd.Process.Kill()
		_ = cmd.Wait()
	})
	for line := range p.lines {
		if line == "ready" {
			return p
		}
	}
	t.Fatalf("worker process ended before it was ready")
	return nil
}

// stop ends the process with SIGTERM (a drain) and returns the number of
// measurements it reports.
func (p *proc) stop(t testing.TB) int {
	t.Helper()
	_ = p.cmd.Process.Signal(syscall.SIGTERM)
	n := -1
	for line := range p.lines {
		if v, ok := strings.CutPrefix(line, "served "); ok {
			fmt.Sscan(v, &n)
		}
	}
	_ = p.cmd.Wait()
	return n
}

// TestWorkerProcessKilled: one of three worker processes is killed
// (SIGKILL) in the middle of a measurement of an SPSA run; its request is
// re-sent to another worker and the run ends with the bits of the local
// run.
func TestWorkerProcessKilled(t *testing.T) {
	if testing.Short() {
		t.Skip("starts worker processes")
	}
	url := startServer(t)
	const dim, q, delay = 3, 4, 20 * time.Millisecond
	sizes := schedule.PowerSizes{Scale: 0.2, Exponent: schedule.SpallGamma}
	settings := sa.Settings{Gain: schedule.Power{Scale: 0.2, Exponent: 0.602}, MaxSteps: 12, BurnIn: 4, Seed: 5}
	local, _ := oracle.NewSPSA(noisyBowl(0), dim, oracle.SPSASettings{Sizes: sizes, Perturbations: q})
	want, err := sa.RobbinsMonro(context.Background(), local, make([]float64, dim), settings)
	if err != nil {
		t.Fatal(err)
	}
	victim := startProc(t, url, "kill", delay, true)
	others := []*proc{startProc(t, url, "kill", delay, false), startProc(t, url, "kill", delay, false)}
	// The Timeout leaves room for a loaded machine under -race; the killed
	// worker's request waits it out once before it is re-sent.
	v, _ := NewValue(connect(t, url), Settings{Subject: "kill", Timeout: 2 * time.Second, Retries: 3})
	sp, _ := oracle.NewSPSA(v, dim, oracle.SPSASettings{Sizes: sizes, Perturbations: q, Workers: 2 * q})
	killed := make(chan int, 1)
	go func() {
		starts := 0
		for line := range victim.lines {
			if line == "start" {
				if starts++; starts == 10 {
					_ = victim.cmd.Process.Kill() // mid-measurement: it sleeps 20 ms
					killed <- int(v.Stats().Answered)
				}
			}
		}
	}()
	got, err := sa.RobbinsMonro(context.Background(), sp, make([]float64, dim), settings)
	if err != nil {
		t.Fatal(err)
	}
	var answeredAtKill int
	select {
	case answeredAtKill = <-killed:
	default:
		t.Fatal("the run ended before the worker was killed")
	}
	if !sameBits(got.X, want.X) || !sameBits(got.Average, want.Average) {
		t.Errorf("remote X %v avg %v, local X %v avg %v", got.X, got.Average, want.X, want.Average)
	}
	s := v.Stats()
	if s.Resent < 1 {
		t.Errorf("stats %+v: the killed worker's request should have been re-sent", s)
	}
	n := 0
	for _, p := range others {
		n += p.stop(t)
	}
	t.Logf("killed after %d of %d answers; %d re-sent; the two survivors served %d", answeredAtKill, s.Answered, s.Resent, n)
}

// TestScale measures throughput over worker processes whose measurement
// takes 20 ms of wall time: SPSA with q = 8 perturbation pairs and
// Kiefer–Wolfowitz at p = 8 (16 measurements a step each) on 1, 2 and 4
// workers, and the overhead per measurement against a local call. It
// takes about 20 s and runs only with STOCHROOT_REMOTE_SCALE=1.
func TestScale(t *testing.T) {
	if os.Getenv("STOCHROOT_REMOTE_SCALE") == "" {
		t.Skip("set STOCHROOT_REMOTE_SCALE=1 to measure the scaling")
	}
	url := startServer(t)
	const p, q, steps, delay = 8, 8, 8, 20 * time.Millisecond
	sizes := schedule.PowerSizes{Scale: 0.2, Exponent: schedule.SpallGamma}
	x0 := make([]float64, p)
	throughput := map[string]map[int]float64{"SPSA": {}, "KW": {}}
	for _, n := range []int{1, 2, 4} {
		subject := fmt.Sprintf("scale.w%d", n)
		var procs []*proc
		for range n {
			procs = append(procs, startProc(t, url, subject, delay, false))
		}
		v, _ := NewValue(connect(t, url), Settings{Subject: subject, Timeout: 10 * time.Second})
		sp, _ := oracle.NewSPSA(v, p, oracle.SPSASettings{Sizes: sizes, Perturbations: q, Workers: 2 * q})
		kw, _ := oracle.NewKieferWolfowitz(v, p, oracle.KieferWolfowitzSettings{Sizes: sizes, Workers: 2 * p})
		for name, g := range map[string]oracle.Gradient{"SPSA": sp, "KW": kw} {
			before := v.Stats()
			t0 := time.Now()
			_, err := sa.RobbinsMonro(context.Background(), g, x0, sa.Settings{Gain: schedule.Power{Scale: 0.01, Exponent: 0.602}, MaxSteps: steps, Seed: 3})
			if err != nil {
				t.Fatal(err)
			}
			el := time.Since(t0)
			after := v.Stats()
			m := after.Answered - before.Answered
			throughput[name][n] = float64(m) / el.Seconds()
			t.Logf("%-4s %d worker(s): %d measurements in %v: %.1f per second (busy answers %d)", name, n, m, el.Round(time.Millisecond), throughput[name][n], after.Busy-before.Busy)
		}
		for _, pr := range procs {
			pr.stop(t)
		}
	}
	for name, tp := range throughput {
		r := tp[4] / tp[1]
		t.Logf("%s: 4 workers / 1 worker = %.2f (2 workers: %.2f)", name, r, tp[2]/tp[1])
		if r < 3.2 {
			t.Errorf("%s: throughput with 4 workers is %.2f× one worker's, want ≥ 3.2", name, r)
		}
	}

	// Overhead per measurement: one request at a time to a worker whose
	// measurement takes no time, against a local call of the same function.
	pr := startProc(t, url, "scale.rtt", 0, false)
	v, _ := NewValue(connect(t, url), Settings{Subject: "scale.rtt"})
	local := slowBowl(0)
	x := make([]float64, p)
	const reps = 2000
	rng := rand.New(rand.NewPCG(1, 1))
	t0 := time.Now()
	for range reps {
		if _, err := local(x, rng); err != nil {
			t.Fatal(err)
		}
	}
	perLocal := time.Since(t0) / reps
	t0 = time.Now()
	for i := range reps {
		if _, err := v.ValueSeeded(context.Background(), x, 1, uint64(i)); err != nil {
			t.Fatal(err)
		}
	}
	perRemote := time.Since(t0) / reps
	t.Logf("per measurement: local call %v, remote round trip %v: overhead %v", perLocal, perRemote, perRemote-perLocal)
	pr.stop(t)
}
