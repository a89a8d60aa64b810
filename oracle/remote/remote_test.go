package remote

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"runtime"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/schedule"
)

// gradients takes steps gradient measurements of g at moving points, with
// one stream for the whole sequence, and returns them concatenated.
func gradients(t *testing.T, g oracle.ContextField, dim, steps int) []float64 {
	t.Helper()
	rng := rand.New(rand.NewPCG(7, 11))
	x := make([]float64, dim)
	var out []float64
	for k := range steps {
		dst := make([]float64, dim)
		if err := g.MeasureContext(context.Background(), k, dst, x, rng); err != nil {
			t.Fatalf("step %d: %v", k, err)
		}
		for i := range x {
			x[i] -= 0.1 * dst[i]
		}
		out = append(out, dst...)
	}
	return out
}

// TestSameBitsAsLocal: Kiefer–Wolfowitz and SPSA gradients through 1, 2 and
// 4 workers, whose replies come back in a random order, equal the local
// adapters' bit for bit; so does a whole Robbins–Monro run with SPSA.
func TestSameBitsAsLocal(t *testing.T) {
	url := startServer(t)
	const dim, q, steps = 3, 4, 6
	sizes := schedule.PowerSizes{Scale: 0.2, Exponent: schedule.SpallGamma}
	local := noisyBowl(0)
	kwLocal, _ := oracle.NewKieferWolfowitz(local, dim, oracle.KieferWolfowitzSettings{Sizes: sizes})
	spLocal, _ := oracle.NewSPSA(local, dim, oracle.SPSASettings{Sizes: sizes, Perturbations: q, CommonRandomNumbers: true})
	wantKW := gradients(t, kwLocal, dim, steps)
	wantSP := gradients(t, spLocal, dim, steps)
	runSettings := sa.Settings{Gain: schedule.Power{Scale: 0.2, Exponent: 0.602}, MaxSteps: 25, BurnIn: 5, Seed: 99}
	want, err := sa.RobbinsMonro(context.Background(), spLocal, make([]float64, dim), runSettings)
	if err != nil {
		t.Fatal(err)
	}
	for n, subject := range map[int]string{1: "bits.one", 2: "bits.two", 4: "bits.four"} {
		t.Run(fmt.Sprint(n, "workers"), func(t *testing.T) {
			startWorkers(t, url, n, WorkerSettings{Subject: subject, Value: noisyBowl(time.Millisecond)})
			v, err := NewValue(connect(t, url), Settings{Subject: subject, Timeout: 10 * time.Second})
			if err != nil {
				t.Fatal(err)
			}
			kw, _ := oracle.NewKieferWolfowitz(v, dim, oracle.KieferWolfowitzSettings{Sizes: sizes, Workers: 2 * dim})
			sp, _ := oracle.NewSPSA(v, dim, oracle.SPSASettings{Sizes: sizes, Perturbations: q, CommonRandomNumbers: true, Workers: 2 * q})
			if got := gradients(t, kw, dim, steps); !sameBits(got, wantKW) {
				t.Errorf("Kiefer–Wolfowitz: remote %v\nlocal %v", got, wantKW)
			}
			if got := gradients(t, sp, dim, steps); !sameBits(got, wantSP) {
				t.Errorf("SPSA: remote %v\nlocal %v", got, wantSP)
			}
			got, err := sa.RobbinsMonro(context.Background(), sp, make([]float64, dim), runSettings)
			if err != nil {
				t.Fatal(err)
			}
			if !sameBits(got.X, want.X) || !sameBits(got.Average, want.Average) || got.Steps != want.Steps {
				t.Errorf("run: remote X %v avg %v, local X %v avg %v", got.X, got.Average, want.X, want.Average)
			}
			if s := v.Stats(); s.Answered != s.Requests || s.Requests == 0 {
				t.Errorf("stats %+v: every request should be answered", s)
			}
		})
	}
}

// TestMeanSameBits: the average of m measurements of a remote Field equals
// the average over the same Field run locally, bit for bit, and its
// variance is that of one measurement over m (checked loosely through the
// first step's value: the noise is N(0,1)/(k+1)).
func TestMeanSameBits(t *testing.T) {
	url := startServer(t)
	const dim, m, steps = 2, 6, 5
	localMean, err := NewMean(stepField(0), dim, m)
	if err != nil {
		t.Fatal(err)
	}
	want := gradients(t, localMean, dim, steps)
	startWorkers(t, url, 3, WorkerSettings{Subject: "mean.field", Field: stepField(time.Millisecond), Dim: dim})
	f, err := NewField(connect(t, url), dim, Settings{Subject: "mean.field"})
	if err != nil {
		t.Fatal(err)
	}
	remoteMean, _ := NewMean(f, dim, m)
	if got := gradients(t, remoteMean, dim, steps); !sameBits(got, want) {
		t.Errorf("remote %v\nlocal %v", got, want)
	}
	if n := f.Stats().Requests; n != m*steps {
		t.Errorf("%d requests, want m·steps = %d", n, m*steps)
	}
}

// TestFailuresBecomeReplies: an error and a panic of the worker's function
// reach the driver as errors (ErrWorker, oracle.ErrPanic), a NaN comes
// through as a NaN (the adapters detect it), and the worker keeps serving.
func TestFailuresBecomeReplies(t *testing.T) {
	url := startServer(t)
	faulty := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		switch {
		case x[0] > 100:
			return 0, errors.New("simulator licence expired")
		case x[0] < -100:
			panic("index out of range in the simulator")
		}
		if x[0] == 42 {
			return float64(0) / zero, nil
		}
		return x[0] + rng.Float64(), nil
	})
	pool := startWorkers(t, url, 1, WorkerSettings{Subject: "faulty", Value: faulty})
	v, _ := NewValue(connect(t, url), Settings{Subject: "faulty"})
	rng := rand.New(rand.NewPCG(1, 2))
	if _, err := v.Value([]float64{200}, rng); !errors.Is(err, ErrWorker) || !strings.Contains(err.Error(), "licence expired") {
		t.Errorf("error of the function: got %v", err)
	}
	if _, err := v.Value([]float64{-200}, rng); !errors.Is(err, oracle.ErrPanic) || !strings.Contains(err.Error(), "index out of range") {
		t.Errorf("panic of the function: got %v", err)
	}
	if y, err := v.Value([]float64{42}, rng); err != nil || y == y {
		t.Errorf("NaN value: got %v, %v; want NaN passed through for the adapters to detect", y, err)
	}
	y, err := v.ValueSeeded(context.Background(), []float64{1}, 3, 4)
	if want := 1 + rand.New(rand.NewPCG(3, 4)).Float64(); err != nil || y != want {
		t.Errorf("after the failures: got %v, %v; want %v", y, err, want)
	}
	if errs := pool.stop(); len(errs) > 0 {
		t.Fatal(errs)
	}
	if s := pool.served[0]; s.Failed != 2 || s.Measurements != 2 {
		t.Errorf("served %+v, want 2 failed and 2 measured (one of them NaN)", s)
	}
}

var zero float64

// TestMalformedRequestsGetErrorReplies: a worker answers every malformed,
// oversized, wrong-version or unserved request with an error reply and
// keeps serving.
func TestMalformedRequestsGetErrorReplies(t *testing.T) {
	url := startServer(t)
	pool := startWorkers(t, url, 1, WorkerSettings{Subject: "raw", Value: noisyBowl(0), Dim: 2})
	nc := connect(t, url)
	good := appendRequest(nil, &request{kind: kindValue, seed1: 1, seed2: 2, tag: 5, x: []float64{1, 2}})
	huge := append([]byte(nil), good[:requestHeader]...)
	huge[42], huge[43], huge[44], huge[45] = 0xff, 0xff, 0xff, 0xff // n = 2^32 − 1
	wrongVersion := append([]byte{WireVersion + 1}, good[1:]...)
	badKind := append([]byte(nil), good...)
	badKind[1] = 9
	field := append([]byte(nil), good...)
	field[1] = kindField
	threeDim := appendRequest(nil, &request{kind: kindValue, tag: 6, x: []float64{1, 2, 3}})
	cases := map[string]struct {
		msg    []byte
		status byte
	}{
		"empty":         {nil, statusBadRequest},
		"wrong version": {wrongVersion, statusBadRequest},
		"short header":  {good[:20], statusBadRequest},
		"oversized n":   {huge, statusBadRequest},
		"truncated":     {good[:len(good)-3], statusBadRequest},
		"trailing":      {append(append([]byte(nil), good...), 0), statusBadRequest},
		"unknown kind":  {badKind, statusBadRequest},
		"no Field":      {field, statusNotServed},
		"wrong dim":     {threeDim, statusNotServed},
	}
	// request sends msg until the worker is not busy (it may still be busy
	// with the message before).
	request := func(msg []byte) (*nats.Msg, error) {
		for {
			m, err := nc.Request("raw", msg, 5*time.Second)
			if err != nil || len(m.Data) < 2 || m.Data[1] != statusBusy {
				return m, err
			}
			time.Sleep(time.Millisecond)
		}
	}
	for name, c := range cases {
		m, err := request(c.msg)
		if err != nil {
			t.Errorf("%s: %v", name, err)
			continue
		}
		r, err := decodeReply(m.Data, nil)
		if err != nil || r.status != c.status || r.msg == "" {
			t.Errorf("%s: reply %+v, %v; want status %d with a text", name, r, err, c.status)
		}
	}
	// A message without a reply subject is dropped, not answered.
	if err := nc.Publish("raw", good); err != nil {
		t.Fatal(err)
	}
	m, err := request(good)
	var y [1]float64
	if err != nil {
		t.Fatal(err)
	}
	if r, err := decodeReply(m.Data, y[:]); err != nil || r.status != statusOK || r.tag != 5 {
		t.Errorf("good request after the bad ones: %+v, %v", r, err)
	}
	if errs := pool.stop(); len(errs) > 0 {
		t.Fatal(errs)
	}
	if s := pool.served[0]; s.Refused != int64(len(cases))+1 || s.Measurements != 1 {
		t.Errorf("served %+v, want %d refused and 1 measured", s, len(cases)+1)
	}
}

// TestLateAndDuplicateRepliesIgnored: a queue member that answers only
// after the driver's Timeout (with a wrong value), and one that answers
// twice (the second time with a wrong value), change nothing: the late
// request is re-sent, and the gradients equal the local ones bit for bit.
func TestLateAndDuplicateRepliesIgnored(t *testing.T) {
	url := startServer(t)
	// Long enough that the two honest workers answer within it on a loaded
	// machine under -race (300 ms was not, once, in CI).
	const subject, dim, timeout = "rogue", 2, 1500 * time.Millisecond
	sizes := schedule.PowerSizes{Scale: 0.1, Exponent: 0.101}
	kwLocal, _ := oracle.NewKieferWolfowitz(noisyBowl(0), dim, oracle.KieferWolfowitzSettings{Sizes: sizes})
	want := gradients(t, kwLocal, dim, 4)

	// The late member takes two requests and answers each after twice the
	// timeout with the value 1e6.
	late := connect(t, url)
	sub, err := late.QueueSubscribeSync(subject, DefaultQueue)
	if err != nil {
		t.Fatal(err)
	}
	_ = sub.AutoUnsubscribe(2)
	lateDone := make(chan struct{})
	go func() {
		defer close(lateDone)
		for range 2 {
			m, err := sub.NextMsg(10 * time.Second)
			if err != nil {
				return
			}
			var r request
			if _, err := decodeRequest(m.Data, &r, nil); err != nil {
				return
			}
			time.Sleep(2 * timeout)
			_ = m.Respond(appendReply(nil, r.tag, []float64{1e6}))
		}
		_ = sub.Unsubscribe()
	}()
	// The echo member answers correctly, then again with −1e6.
	echo := connect(t, url)
	esub, err := echo.QueueSubscribe(subject, DefaultQueue, func(m *nats.Msg) {
		var r request
		if _, err := decodeRequest(m.Data, &r, nil); err != nil {
			return
		}
		y, _ := noisyBowl(0)(r.x, rand.New(rand.NewPCG(r.seed1, r.seed2)))
		_ = m.Respond(appendReply(nil, r.tag, []float64{y}))
		_ = m.Respond(appendReply(nil, r.tag, []float64{-1e6}))
	})
	if err != nil {
		t.Fatal(err)
	}
	_ = esub.AutoUnsubscribe(3)
	if err := late.Flush(); err != nil {
		t.Fatal(err)
	}
	if err := echo.Flush(); err != nil {
		t.Fatal(err)
	}
	startWorkers(t, url, 2, WorkerSettings{Subject: subject, Value: noisyBowl(0)})
	v, _ := NewValue(connect(t, url), Settings{Subject: subject, Timeout: timeout, Retries: 3})
	kw, _ := oracle.NewKieferWolfowitz(v, dim, oracle.KieferWolfowitzSettings{Sizes: sizes, Workers: 2 * dim})
	if got := gradients(t, kw, dim, 4); !sameBits(got, want) {
		t.Errorf("remote %v\nlocal %v", got, want)
	}
	<-lateDone
	if s := v.Stats(); s.Resent < 1 {
		t.Errorf("stats %+v: the late member's requests should have been re-sent", s)
	}
}

// TestCancelAbandonsInFlight: cancelling a run whose measurements are in
// flight on workers that take 10 s returns within 50 ms, and the driver's
// goroutines are gone within 50 ms too.
func TestCancelAbandonsInFlight(t *testing.T) {
	url := startServer(t)
	release := make(chan struct{})
	slow := oracle.ContextValueFunc(func(ctx context.Context, x []float64, _ *rand.Rand) (float64, error) {
		select {
		case <-release:
		case <-time.After(10 * time.Second):
		}
		return x[0], nil
	})
	startWorkers(t, url, 2, WorkerSettings{Subject: "slow", Value: slow, Slots: 2})
	t.Cleanup(func() { close(release) })
	nc := connect(t, url)
	v, _ := NewValue(nc, Settings{Subject: "slow", Timeout: time.Minute})
	// The connection's first request starts its reply handler, a goroutine
	// that stays: start it before counting.
	warm, _ := NewValue(nc, Settings{Subject: "nobody", Timeout: 10 * time.Millisecond})
	if _, err := warm.ValueSeeded(context.Background(), []float64{1}, 1, 1); !errors.Is(err, ErrNoWorker) {
		t.Fatal(err)
	}
	sp, _ := oracle.NewSPSA(v, 2, oracle.SPSASettings{Sizes: schedule.PowerSizes{Scale: 0.1}, Perturbations: 4, Workers: 8})
	time.Sleep(50 * time.Millisecond)
	before := runtime.NumGoroutine()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() {
		done <- sp.MeasureContext(ctx, 0, make([]float64, 2), []float64{1, 2}, rand.New(rand.NewPCG(1, 1)))
	}()
	// Wait until the four slots are busy and the other requests poll.
	for v.Stats().Busy < 4 {
		time.Sleep(time.Millisecond)
	}
	cancelled := time.Now()
	cancel()
	// 50 ms: the bound for abandoning requests in flight.
	select {
	case err := <-done:
		if !errors.Is(err, context.Canceled) {
			t.Errorf("error %v, want one wrapping context.Canceled", err)
		}
		if d := time.Since(cancelled); d > 50*time.Millisecond {
			t.Errorf("returned %v after the cancellation", d)
		}
	case <-time.After(time.Second):
		t.Fatal("the measurement did not return after the cancellation")
	}
	for time.Since(cancelled) < 50*time.Millisecond && runtime.NumGoroutine() > before {
		time.Sleep(time.Millisecond)
	}
	if n := runtime.NumGoroutine(); n > before {
		t.Errorf("%d goroutines 50 ms after the cancellation, %d before the run", n, before)
	}
}

// TestNoWorkerAndUnanswered: without any worker a request fails with
// ErrNoWorker after Timeout; with a member that swallows requests it fails
// with ErrUnanswered after 1 + Retries attempts.
func TestNoWorkerAndUnanswered(t *testing.T) {
	url := startServer(t)
	v, _ := NewValue(connect(t, url), Settings{Subject: "nobody", Timeout: 150 * time.Millisecond})
	t0 := time.Now()
	if _, err := v.ValueSeeded(context.Background(), []float64{1}, 1, 2); !errors.Is(err, ErrNoWorker) {
		t.Errorf("no worker: %v", err)
	}
	if d := time.Since(t0); d < 150*time.Millisecond || d > 2*time.Second {
		t.Errorf("no worker: gave up after %v, want about the 150 ms timeout", d)
	}
	sink := connect(t, url)
	if _, err := sink.QueueSubscribe("sink", DefaultQueue, func(*nats.Msg) {}); err != nil {
		t.Fatal(err)
	}
	_ = sink.Flush()
	u, _ := NewValue(connect(t, url), Settings{Subject: "sink", Timeout: 100 * time.Millisecond, Retries: 2})
	if _, err := u.ValueSeeded(context.Background(), []float64{1}, 1, 2); !errors.Is(err, ErrUnanswered) {
		t.Errorf("swallowed: %v", err)
	}
	if s := u.Stats(); s.Resent != 2 || s.Answered != 0 {
		t.Errorf("swallowed: stats %+v, want 2 re-sends", s)
	}
}

// TestDrainFinishesInFlight: a worker whose context is cancelled while it
// measures answers that request and then returns.
func TestDrainFinishesInFlight(t *testing.T) {
	url := startServer(t)
	started := make(chan struct{}, 1)
	slow := oracle.ValueFunc(func(x []float64, rng *rand.Rand) (float64, error) {
		started <- struct{}{}
		time.Sleep(200 * time.Millisecond)
		return x[0] + rng.Float64(), nil
	})
	ctx, cancel := context.WithCancel(context.Background())
	type result struct {
		s   Served
		err error
	}
	served := make(chan result, 1)
	wnc := connect(t, url)
	go func() {
		s, err := Serve(ctx, wnc, WorkerSettings{Subject: "drain", Value: slow})
		served <- result{s, err}
	}()
	waitSubscribed(t, wnc, 1)
	v, _ := NewValue(connect(t, url), Settings{Subject: "drain", Timeout: 5 * time.Second, Retries: -1})
	got := make(chan error, 1)
	go func() {
		_, err := v.ValueSeeded(context.Background(), []float64{1}, 1, 2)
		got <- err
	}()
	<-started
	cancel()
	if err := <-got; err != nil {
		t.Errorf("request in flight during the drain: %v", err)
	}
	select {
	case r := <-served:
		if r.err != nil || r.s.Measurements != 1 {
			t.Errorf("Serve returned %+v, %v", r.s, r.err)
		}
	case <-time.After(3 * time.Second):
		t.Fatal("Serve did not return after the drain")
	}
}

// TestSettingsErrors: bad settings are errors wrapping oracle.ErrSettings
// that name the field.
func TestSettingsErrors(t *testing.T) {
	url := startServer(t)
	nc := connect(t, url)
	cases := map[string]error{}
	_, cases["Subject"] = NewValue(nc, Settings{})
	_, cases["wildcards"] = NewValue(nc, Settings{Subject: "a.*"})
	_, cases["empty token"] = NewValue(nc, Settings{Subject: "a..b"})
	_, cases["Timeout"] = NewValue(nc, Settings{Subject: "a", Timeout: -1})
	_, cases["Poll"] = NewValue(nc, Settings{Subject: "a", Poll: -1})
	_, cases["*nats.Conn"] = NewValue(nil, Settings{Subject: "a"})
	_, cases["dimension"] = NewField(nc, 0, Settings{Subject: "a"})
	_, cases["m ="] = NewMean(stepField(0), 1, 0)
	_, cases["nil Field"] = NewMean(nil, 1, 1)
	_, cases["nil Field (typed)"] = NewMean(oracle.FieldFunc(nil), 1, 1)
	var nilField *Field
	_, cases["nil Field (typed pointer)"] = NewMean(nilField, 1, 1)
	_, cases["a Value or a Field"] = Serve(context.Background(), nc, WorkerSettings{Subject: "a"})
	_, cases["Slots"] = Serve(context.Background(), nc, WorkerSettings{Subject: "a", Value: noisyBowl(0), Slots: -1})
	_, cases["Queue"] = Serve(context.Background(), nc, WorkerSettings{Subject: "a", Queue: "q w", Value: noisyBowl(0)})
	for name, err := range cases {
		if !errors.Is(err, oracle.ErrSettings) || !strings.Contains(err.Error(), strings.Fields(name)[0]) {
			t.Errorf("%s: got %v", name, err)
		}
	}
}

// TestDeadlineReachesWorker: the worker's function gets a context whose
// deadline is the attempt's: Timeout, or less when the run's context ends
// sooner.
func TestDeadlineReachesWorker(t *testing.T) {
	url := startServer(t)
	left := oracle.ContextValueFunc(func(ctx context.Context, _ []float64, _ *rand.Rand) (float64, error) {
		d, ok := ctx.Deadline()
		if !ok {
			return 0, errors.New("no deadline")
		}
		return time.Until(d).Seconds(), nil
	})
	startWorkers(t, url, 1, WorkerSettings{Subject: "budget", Value: left})
	v, _ := NewValue(connect(t, url), Settings{Subject: "budget", Timeout: 3 * time.Second})
	got, err := v.ValueSeeded(context.Background(), []float64{1}, 1, 2)
	if err != nil || got <= 2 || got > 3 {
		t.Errorf("time left on the worker: %v s, %v; want just under the 3 s Timeout", got, err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Second)
	defer cancel()
	got, err = v.ValueSeeded(ctx, []float64{1}, 1, 2)
	if err != nil || got <= 0 || got > 1 {
		t.Errorf("time left on the worker: %v s, %v; want under the run's 1 s", got, err)
	}
}

// TestResendAfterTimeoutMayMeetBusyWorkers: a request whose worker vanished
// (here a member that takes it and never answers) is re-sent after
// Timeout; a busy answer to the re-sent attempt must not be taken for "no
// worker at all" because the first attempt already waited Timeout (it was,
// once, in CI: TestWorkerProcessKilled failed with ErrNoWorker).
func TestResendAfterTimeoutMayMeetBusyWorkers(t *testing.T) {
	url := startServer(t)
	const subject, timeout = "resend", 300 * time.Millisecond
	// The swallowing member takes one request and never answers.
	sw := connect(t, url)
	ssub, err := sw.QueueSubscribeSync(subject, DefaultQueue)
	if err != nil {
		t.Fatal(err)
	}
	_ = ssub.AutoUnsubscribe(1)
	if err := sw.Flush(); err != nil {
		t.Fatal(err)
	}
	v, _ := NewValue(connect(t, url), Settings{Subject: subject, Timeout: timeout, Retries: 2})
	done := make(chan error, 1)
	var y float64
	go func() {
		var err error
		y, err = v.ValueContext(context.Background(), []float64{1, 2}, rand.New(rand.NewPCG(1, 2)))
		done <- err
	}()
	if _, err := ssub.NextMsg(5 * time.Second); err != nil {
		t.Fatal(err)
	}
	// Only now the answering member joins: it says "busy" to its first
	// two requests, then measures.
	ans := connect(t, url)
	n := 0
	asub, err := ans.QueueSubscribe(subject, DefaultQueue, func(m *nats.Msg) {
		var r request
		if _, err := decodeRequest(m.Data, &r, nil); err != nil {
			return
		}
		if n++; n <= 2 {
			_ = m.Respond(appendErrorReply(nil, r.tag, statusBusy, "busy"))
			return
		}
		_ = m.Respond(appendReply(nil, r.tag, []float64{42}))
	})
	if err != nil {
		t.Fatal(err)
	}
	defer asub.Unsubscribe()
	if err := ans.Flush(); err != nil {
		t.Fatal(err)
	}
	select {
	case err := <-done:
		if err != nil || y != 42 {
			t.Fatalf("got %v, %v; want 42 after a re-send and two busy answers", y, err)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("no answer")
	}
	if s := v.Stats(); s.Resent != 1 || s.Busy < 2 {
		t.Errorf("stats %+v: want 1 re-sent and at least 2 busy", s)
	}
}
