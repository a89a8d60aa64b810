package remote_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"sync"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/oracle/remote"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// SPSA over two workers that serve a noisy cost on a subject. Here an
// embedded server and two goroutines stand in for a NATS deployment and
// worker processes on other machines; the answer is the same bits as a
// run on this machine alone.
func Example() {
	srv, err := server.NewServer(&server.Options{Host: "127.0.0.1", Port: -1, NoLog: true, NoSigs: true})
	if err != nil {
		fmt.Println(err)
		return
	}
	srv.Start()
	defer srv.Shutdown()
	srv.ReadyForConnections(10 * time.Second)

	// The measurement: a noisy cost with its minimum at (1, −2).
	cost := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		return (x[0]-1)*(x[0]-1) + (x[1]+2)*(x[1]+2) + 0.1*rng.NormFloat64(), nil
	})

	// The worker side: each worker is normally a process of its own.
	ctx, stop := context.WithCancel(context.Background())
	defer stop()
	var wg sync.WaitGroup
	served := make([]remote.Served, 2)
	for i := range served {
		nc, err := nats.Connect(srv.ClientURL())
		if err != nil {
			fmt.Println(err)
			return
		}
		defer nc.Close()
		wg.Go(func() {
			served[i], _ = remote.Serve(ctx, nc, remote.WorkerSettings{Subject: "example.cost", Value: cost})
		})
	}

	// The driver side.
	nc, err := nats.Connect(srv.ClientURL())
	if err != nil {
		fmt.Println(err)
		return
	}
	defer nc.Close()
	v, err := remote.NewValue(nc, remote.Settings{Subject: "example.cost", Timeout: 10 * time.Second})
	if err != nil {
		fmt.Println(err)
		return
	}
	run := func(f oracle.Value) sa.Result {
		// Workers = 2q: the 2q measurements of a step are in flight at once.
		g, _ := oracle.NewSPSA(f, 2, oracle.SPSASettings{
			Sizes: schedule.PowerSizes{Scale: 0.1, Exponent: schedule.SpallGamma}, Perturbations: 2, Workers: 4,
		})
		r, err := sa.RobbinsMonro(context.Background(), g, []float64{0, 0}, sa.Settings{
			Gain: schedule.Power{Scale: 0.5, Exponent: schedule.SpallAlpha}, MaxSteps: 200, BurnIn: 100, Seed: 1,
		})
		if err != nil {
			fmt.Println(err)
		}
		return r
	}
	remoteRun := run(v)
	stop()
	wg.Wait()
	localRun := run(cost)

	fmt.Printf("minimum near (%.2f, %.2f) after %d measurements\n", remoteRun.Average[0], remoteRun.Average[1], remoteRun.Measurements)
	fmt.Println("workers served", served[0].Measurements+served[1].Measurements)
	fmt.Println("same as the local run:", remoteRun.Average[0] == localRun.Average[0] && remoteRun.Average[1] == localRun.Average[1])
	// Output:
	// minimum near (1.06, -2.01) after 800 measurements
	// workers served 800
	// same as the local run: true
}
