// Command greenhouse tunes the two set points of an invented greenhouse
// climate controller by SPSA, with every simulated day run by one of
// three worker processes over NATS.
//
// The controller heats in proportion to how far the air is below the
// heating set point h, and opens the vents in proportion to how far it is
// above the venting set point v. One simulated day (48 half-hours of
// random weather and sun) costs heating energy, venting losses and crop
// stress whenever the air leaves 17–26 °C. The optimiser sees only the cost
// of one simulated day at a time; each day here also waits 1 ms, standing
// in for a simulator that takes minutes.
//
// The program starts an embedded NATS server on a loopback port and three
// copies of itself as workers (GREENHOUSE_WORKER_URL set), tunes (h, v)
// within a box by five independent runs at once (sa.Replicate), prints the
// answer with the 95% interval of the runs' mean and the days each worker
// simulated, and checks that the same study on this machine alone, with
// the same seed, gives the same bits.
package main

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"os/signal"
	"syscall"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/oracle/remote"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

const (
	subject = "greenhouse.day.cost"
	workers = 3
	envURL  = "GREENHOUSE_WORKER_URL"
	envName = "GREENHOUSE_WORKER_NAME"
)

// day simulates one day with heating set point x[0] and venting set point
// x[1] (°C) and returns its cost.
func day(x []float64, rng *rand.Rand) (float64, error) {
	time.Sleep(time.Millisecond) // the simulator's wall time
	heatAt, ventAt := x[0], x[1]
	t, cost := 15.0, 0.0
	cloud := 0.5 + 0.5*rng.Float64() // one cloudiness for the day
	for h := range 48 {
		phase := 2 * math.Pi * float64(h) / 48
		out := 9 - 6*math.Cos(phase) + 1.5*rng.NormFloat64()
		sun := 0.0 // night
		if s := math.Sin(phase - math.Pi/2); s > 0 {
			sun = s * 9 * cloud * (1 + 0.2*rng.NormFloat64())
		}
		heat := max(0, 0.8*(heatAt-t))
		vent := max(0, 0.4*(t-ventAt))
		t += 0.15*(out-t) + 0.25*sun + heat - vent*0.5
		cost += 1.2*heat + 0.15*vent + 0.3*(sq(max(0, 17-t))+sq(max(0, t-26)))
	}
	return cost, nil
}

func sq(v float64) float64 { return v * v }

func main() {
	if url := os.Getenv(envURL); url != "" {
		worker(url, os.Getenv(envName))
		return
	}
	if err := drive(); err != nil {
		fmt.Fprintln(os.Stderr, "greenhouse:", err)
		os.Exit(1)
	}
}

// worker serves day on subject until SIGTERM, then reports.
func worker(url, name string) {
	nc, err := nats.Connect(url, nats.Name("greenhouse worker "+name))
	if err != nil {
		fmt.Fprintln(os.Stderr, "worker:", err)
		os.Exit(1)
	}
	defer nc.Close()
	ctx, stop := signal.NotifyContext(context.Background(), syscall.SIGTERM, os.Interrupt)
	defer stop()
	served, err := remote.Serve(ctx, nc, remote.WorkerSettings{Subject: subject, Value: oracle.ValueFunc(day), Dim: 2})
	if err != nil {
		fmt.Fprintln(os.Stderr, "worker:", err)
		os.Exit(1)
	}
	fmt.Printf("  worker %s simulated %d days (%d failed)\n", name, served.Measurements, served.Failed)
}

func drive() error {
	t0 := time.Now()
	srv, err := server.NewServer(&server.Options{Host: "127.0.0.1", Port: -1, NoLog: true, NoSigs: true})
	if err != nil {
		return err
	}
	srv.Start()
	defer srv.Shutdown()
	if !srv.ReadyForConnections(10 * time.Second) {
		return fmt.Errorf("embedded NATS server not ready")
	}
	var procs []*exec.Cmd
	for i := range workers {
		cmd := exec.Command(os.Args[0])
		cmd.Env = append(os.Environ(), envURL+"="+srv.ClientURL(), fmt.Sprintf("%s=%d", envName, i+1))
		cmd.Stdout, cmd.Stderr = os.Stdout, os.Stderr
		if err := cmd.Start(); err != nil {
			return err
		}
		procs = append(procs, cmd)
	}
	defer func() {
		for _, p := range procs {
			_ = p.Process.Kill()
		}
	}()

	nc, err := nats.Connect(srv.ClientURL())
	if err != nil {
		return err
	}
	defer nc.Close()
	// Timeout covers one simulated day and the workers' start.
	v, err := remote.NewValue(nc, remote.Settings{Subject: subject, Timeout: 20 * time.Second})
	if err != nil {
		return err
	}
	// Keep the set points in a box: heating 10–22 °C, venting 20–32 °C.
	// On a real greenhouse the perturbed set points h ± c_k, v ± c_k are
	// applied for real: bound them too, watch them, keep a manual override.
	box := sa.Box{Lower: []float64{10, 20}, Upper: []float64{22, 32}}
	const q, steps, runs = 4, 200, 5
	sizes := schedule.PowerSizes{Scale: 0.5, Exponent: schedule.SpallGamma}
	gain := schedule.Power{Scale: 0.5, Offset: 20, Exponent: schedule.SpallAlpha}
	study := func(f oracle.Value) (sa.Replicated, error) {
		g, err := oracle.NewSPSA(f, 2, oracle.SPSASettings{Sizes: sizes, Perturbations: q, CommonRandomNumbers: true, Workers: 2 * q})
		if err != nil {
			return sa.Replicated{}, err
		}
		return sa.Replicate(context.Background(), sa.Replications{Runs: runs, Workers: runs, Seed: 2026},
			func(ctx context.Context, _ int, seed uint64) (sa.Result, error) {
				return sa.RobbinsMonro(ctx, g, []float64{14, 24}, sa.Settings{
					Gain: gain, MaxSteps: steps, BurnIn: steps / 2, Projection: box, Seed: seed,
				})
			})
	}
	res, err := study(v)
	if err != nil {
		return err
	}
	took := time.Since(t0)
	fmt.Println("stopping the workers (they drain, then report):")
	for _, p := range procs {
		_ = p.Process.Signal(syscall.SIGTERM)
	}
	for _, p := range procs {
		_ = p.Wait()
	}
	procs = nil

	fmt.Printf("\nset points from %d runs of %d steps, %d simulated days (%v over %d workers):\n",
		runs, steps, res.Measurements, took.Round(100*time.Millisecond), workers)
	for i, name := range []string{"heating set point h", "venting set point v"} {
		lo, hi, err := res.ErrorBars.Interval(i)
		if err != nil {
			return err
		}
		fmt.Printf("  %-20s %.2f °C   95%% interval [%.2f, %.2f]\n", name, res.ErrorBars.Center[i], lo, hi)
	}
	s := v.Stats()
	fmt.Printf("requests %d, answered %d, re-sent %d, busy answers %d\n", s.Requests, s.Answered, s.Resent, s.Busy)

	local, err := study(oracle.ValueFunc(day))
	if err != nil {
		return err
	}
	same := true
	for r := range res.Estimates {
		for i := range res.Estimates[r] {
			same = same && math.Float64bits(local.Estimates[r][i]) == math.Float64bits(res.Estimates[r][i])
		}
	}
	fmt.Printf("the same study on this machine alone gives the same bits: %v\n", same)
	if !same {
		return fmt.Errorf("remote and local estimates differ: %v vs %v", res.Estimates, local.Estimates)
	}
	return nil
}
