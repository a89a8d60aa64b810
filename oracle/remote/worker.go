package remote

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"

	"github.com/stochroot/stochroot/oracle"
)

// WorkerSettings configures [Serve]. Subject and at least one of Value and
// Field are required.
type WorkerSettings struct {
	// Subject is the subject the drivers send to (their Settings.Subject).
	Subject string
	// Queue is the queue group; every worker of one pool uses the same.
	// Empty means DefaultQueue.
	Queue string
	// Value serves the requests of a driver's [Value]; nil answers them
	// with an error reply.
	Value oracle.Value
	// Field serves the requests of a driver's [Field] and [Mean]; nil
	// answers them with an error reply.
	Field oracle.Field
	// Dim, if > 0, is the only dimension this worker serves; requests of
	// another dimension get an error reply. 0 serves any.
	Dim int
	// Slots is the number of measurements this process takes at a time,
	// each on a goroutine of its own; 0 means 1. Above 1, Value and Field
	// must be safe for concurrent use. One slot per core (or per licence
	// of the simulator) is the usual choice.
	Slots int
}

// Served counts what [Serve] did.
type Served struct {
	// Measurements is the number of requests answered with a value.
	Measurements int64
	// Failed is the number answered with the error of the caller's
	// function (an error or a panic).
	Failed int64
	// Refused is the number of malformed, oversized, wrong-version or
	// unserved requests answered with an error reply, plus messages
	// without a reply subject, which are dropped.
	Refused int64
}

// drainWait bounds the wait, after the context is done, for the requests
// the server delivered before it saw the worker leave the queue group.
const drainWait = 2 * time.Second

// Serve answers measurement requests on s.Subject in queue group s.Queue
// through nc until ctx is done, then drains: it leaves the queue group,
// finishes and answers the measurements it holds, and returns what it
// served with a nil error. It returns early with an error if the
// connection closes, and at once with an error wrapping
// oracle.ErrSettings if s is invalid.
//
// For a request with seed pair (seed1, seed2) and step k it calls the
// caller's function the way the local adapters would: Value through
// ValueContext when it has one, Field through oracle.MeasureStep, with the
// stream rand.New(rand.NewPCG(seed1, seed2)) and a context that carries
// the requester's time budget but is not cancelled by ctx (a drained
// worker finishes what it holds). An error or a panic of the caller's
// function becomes an error reply, and the worker keeps serving; a NaN or
// ±Inf result is sent as it is, for the driver to detect as it would a
// local one.
func Serve(ctx context.Context, nc *nats.Conn, s WorkerSettings) (Served, error) {
	var out Served
	if nc == nil {
		return out, fmt.Errorf("%w: the *nats.Conn is nil", oracle.ErrSettings)
	}
	if err := checkSubject("Subject", s.Subject); err != nil {
		return out, err
	}
	if s.Queue == "" {
		s.Queue = DefaultQueue
	}
	if err := checkSubject("Queue", s.Queue); err != nil {
		return out, err
	}
	switch {
	case s.Value == nil && s.Field == nil:
		return out, fmt.Errorf("%w: WorkerSettings needs a Value or a Field to serve", oracle.ErrSettings)
	case s.Slots < 0:
		return out, fmt.Errorf("%w: Slots = %d: must be ≥ 0 (0 means 1)", oracle.ErrSettings, s.Slots)
	case s.Dim < 0 || s.Dim > MaxDim:
		return out, fmt.Errorf("%w: Dim = %d: must be 0 (any) to MaxDim (%d)", oracle.ErrSettings, s.Dim, MaxDim)
	}
	slots := max(1, s.Slots)
	var (
		counts [3]atomic.Int64
		wg     sync.WaitGroup
		jobs   = make(chan *nats.Msg) // unbuffered: a send succeeds only to a free slot
	)
	for range slots {
		wg.Add(1)
		go func() {
			defer wg.Done()
			sl := &slot{s: &s, counts: &counts, bg: context.WithoutCancel(ctx)}
			sl.rng = rand.New(&sl.src)
			for m := range jobs {
				if out := sl.handle(m); out != nil {
					_ = m.Respond(out)
				}
			}
		}()
	}
	var busy []byte
	sub, err := nc.QueueSubscribe(s.Subject, s.Queue, func(m *nats.Msg) {
		select {
		case jobs <- m:
			return
		default:
		}
		// Every slot is busy: say so at once, and the driver asks again
		// (the queue group picks a worker anew).
		if m.Reply != "" {
			busy = appendErrorReply(busy[:0], requestTag(m.Data), statusBusy, "every slot of this worker is busy")
			_ = m.Respond(busy)
		} else {
			counts[2].Add(1) // dropped: no reply subject (see Served.Refused)
		}
	})
	if err == nil {
		err = nc.Flush()
	}
	if err != nil {
		close(jobs)
		wg.Wait()
		return out, fmt.Errorf("remote: subscribing to %q: %w", s.Subject, err)
	}
	closed := make(chan struct{})
	sub.SetClosedHandler(func(string) { close(closed) })
	var serr error
	select {
	case <-ctx.Done():
		// Drain: leave the group; requests already delivered are still
		// handled (or answered busy) before the subscription closes.
		if err := sub.Drain(); err != nil {
			_ = sub.Unsubscribe()
		}
		select {
		case <-closed:
		case <-time.After(drainWait):
			_ = sub.Unsubscribe()
		}
	case <-closed:
		serr = fmt.Errorf("remote: serving %q: the subscription closed (connection closed: %v)", s.Subject, nc.IsClosed())
	}
	close(jobs)
	wg.Wait()
	out = Served{Measurements: counts[0].Load(), Failed: counts[1].Load(), Refused: counts[2].Load()}
	return out, serr
}

// slot takes one measurement at a time.
type slot struct {
	s      *WorkerSettings
	counts *[3]atomic.Int64
	bg     context.Context // ctx without its cancellation
	src    rand.PCG
	rng    *rand.Rand
	x, y   []float64
	out    []byte
}

// handle takes the measurement a request asks for and returns the reply,
// or nil for a message without a reply subject.
func (sl *slot) handle(m *nats.Msg) []byte {
	if m.Reply == "" {
		sl.counts[2].Add(1)
		return nil
	}
	var req request
	var err error
	sl.x, err = decodeRequest(m.Data, &req, sl.x)
	status, text := statusOK, ""
	switch {
	case err != nil:
		status, text = statusBadRequest, err.Error()
	case sl.s.Dim > 0 && len(req.x) != sl.s.Dim:
		status, text = statusNotServed, fmt.Sprintf("this worker serves dimension %d, not %d", sl.s.Dim, len(req.x))
	case req.kind == kindValue && sl.s.Value == nil:
		status, text = statusNotServed, "this worker serves no Value"
	case req.kind == kindField && sl.s.Field == nil:
		status, text = statusNotServed, "this worker serves no Field"
	}
	if status != statusOK {
		sl.counts[2].Add(1)
		sl.out = appendErrorReply(sl.out[:0], req.tag, status, text)
		return sl.out
	}
	mctx := sl.bg
	if req.budget > 0 {
		var cancel context.CancelFunc
		mctx, cancel = context.WithTimeout(mctx, time.Duration(req.budget))
		defer cancel()
	}
	sl.src.Seed(req.seed1, req.seed2)
	n := 1
	if req.kind == kindField {
		n = len(req.x)
	}
	if cap(sl.y) < n {
		sl.y = make([]float64, n)
	}
	y := sl.y[:n]
	// A NaN or ±Inf travels as it is: the driver's adapters detect it
	// as they would a local one.
	status, text = sl.measure(mctx, &req, y)
	if status != statusOK {
		sl.counts[1].Add(1)
		sl.out = appendErrorReply(sl.out[:0], req.tag, status, text)
	} else {
		sl.counts[0].Add(1)
		sl.out = appendReply(sl.out[:0], req.tag, y)
	}
	return sl.out
}

// measure calls the caller's function and turns an error or a panic into
// a status and its text.
func (sl *slot) measure(ctx context.Context, req *request, y []float64) (status byte, text string) {
	defer func() {
		if p := recover(); p != nil {
			status, text = statusPanic, fmt.Sprint(p)
		}
	}()
	var err error
	if req.kind == kindValue {
		if cv, ok := sl.s.Value.(oracle.ContextValue); ok {
			y[0], err = cv.ValueContext(ctx, req.x, sl.rng)
		} else {
			y[0], err = sl.s.Value.Value(req.x, sl.rng)
		}
	} else {
		err = oracle.MeasureStep(ctx, sl.s.Field, int(req.step), y, req.x, sl.rng)
	}
	if err != nil {
		var pe *oracle.PanicError
		if errors.As(err, &pe) {
			return statusPanic, fmt.Sprint(pe.Value)
		}
		return statusFailed, err.Error()
	}
	return statusOK, ""
}
