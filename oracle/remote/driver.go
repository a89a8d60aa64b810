package remote

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"

	"github.com/stochroot/stochroot/oracle"
)

// Defaults of [Settings].
const (
	// DefaultTimeout is the time one attempt of a request waits for its
	// reply when Settings.Timeout is 0.
	DefaultTimeout = 30 * time.Second
	// DefaultRetries is the number of re-sends when Settings.Retries is 0.
	DefaultRetries = 2
	// DefaultPoll is the longest pause between two asks for a free worker
	// when Settings.Poll is 0.
	DefaultPoll = 10 * time.Millisecond
	// DefaultQueue is the queue group of [Serve] when WorkerSettings.Queue
	// is empty.
	DefaultQueue = "stochroot-workers"
)

// Settings configures the driver side, a [Value] or a [Field]. Only Subject
// is required; the zero value of every other field is the default.
type Settings struct {
	// Subject is the NATS subject the workers serve, such as
	// "plant.sim.cost". It must be a literal subject: no spaces, no
	// wildcards, no empty tokens.
	Subject string

	// Timeout is how long one attempt of a request waits for its reply
	// (never longer than the run's context allows); it must cover one
	// measurement plus the trip. 0 means DefaultTimeout. It also bounds
	// the wait for a free worker: a request that finds no worker in the
	// queue group fails with ErrNoWorker once no reply at all has reached
	// this driver for Timeout.
	Timeout time.Duration

	// Retries is how often an attempt that got no answer within Timeout
	// is sent again: 0 means DefaultRetries, a negative value none.
	Retries int

	// Poll is the longest pause between two asks for a free worker when
	// every worker slot is busy; the pause starts at Poll/16 and doubles.
	// A shorter pause hands a freed slot its next request sooner at the
	// cost of more messages while all are busy. 0 means DefaultPoll.
	Poll time.Duration
}

// resolve checks s and returns it with the defaults filled in.
func (s Settings) resolve() (Settings, error) {
	if err := checkSubject("Subject", s.Subject); err != nil {
		return s, err
	}
	switch {
	case s.Timeout < 0:
		return s, fmt.Errorf("%w: Timeout = %v: must be ≥ 0 (0 means %v)", oracle.ErrSettings, s.Timeout, DefaultTimeout)
	case s.Poll < 0:
		return s, fmt.Errorf("%w: Poll = %v: must be ≥ 0 (0 means %v)", oracle.ErrSettings, s.Poll, DefaultPoll)
	}
	if s.Timeout == 0 {
		s.Timeout = DefaultTimeout
	}
	if s.Retries == 0 {
		s.Retries = DefaultRetries
	} else if s.Retries < 0 {
		s.Retries = 0
	}
	if s.Poll == 0 {
		s.Poll = DefaultPoll
	}
	return s, nil
}

// checkSubject refuses a subject (or queue name) that is empty, has
// whitespace, a wildcard or an empty token.
func checkSubject(field, s string) error {
	if s == "" {
		return fmt.Errorf("%w: %s is empty", oracle.ErrSettings, field)
	}
	if strings.ContainsAny(s, " \t\r\n*>") {
		return fmt.Errorf("%w: %s %q: no whitespace or wildcards (* >) allowed", oracle.ErrSettings, field, s)
	}
	for _, tok := range strings.Split(s, ".") {
		if tok == "" {
			return fmt.Errorf("%w: %s %q has an empty token", oracle.ErrSettings, field, s)
		}
	}
	return nil
}

// Stats counts what a driver did. The counts are cumulative over the
// driver's life and safe to read while it is in use.
type Stats struct {
	// Requests is the number of measurements asked for.
	Requests int64
	// Answered is the number of measurements that got a reply (a value or
	// an error reply).
	Answered int64
	// Resent is the number of attempts sent again after Timeout passed
	// without an answer, or after a malformed reply.
	Resent int64
	// Busy is the number of asks that found every worker slot busy (or
	// none at all) and waited before asking again.
	Busy int64
}

// client is the request machinery shared by Value and Field.
type client struct {
	nc   *nats.Conn
	s    Settings
	tags atomic.Uint64
	last atomic.Int64 // time of the last reply, ns since epoch

	requests, answered, resent, busy atomic.Int64

	// waiting holds the requests that found every slot busy; a reply
	// wakes them all, since it means a slot has just come free.
	mu      sync.Mutex
	waiting []chan struct{}
}

// wait enters the queue of requests waiting for a free slot.
func (c *client) wait() chan struct{} {
	ch := make(chan struct{}, 1)
	c.mu.Lock()
	c.waiting = append(c.waiting, ch)
	c.mu.Unlock()
	return ch
}

// leave takes ch out of the queue if it is still there.
func (c *client) leave(ch chan struct{}) {
	c.mu.Lock()
	defer c.mu.Unlock()
	for i, w := range c.waiting {
		if w == ch {
			c.waiting = append(c.waiting[:i], c.waiting[i+1:]...)
			return
		}
	}
}

// replied records a reply and wakes every waiting request: the freed slot
// may be on any worker, and the queue group picks one at random for each
// ask, so all of them asking finds it soonest.
func (c *client) replied() {
	c.last.Store(time.Now().UnixNano())
	c.mu.Lock()
	for i, w := range c.waiting {
		w <- struct{}{}
		c.waiting[i] = nil
	}
	c.waiting = c.waiting[:0]
	c.mu.Unlock()
}

func newClient(nc *nats.Conn, s Settings) (*client, error) {
	if nc == nil {
		return nil, fmt.Errorf("%w: the *nats.Conn is nil", oracle.ErrSettings)
	}
	s, err := s.resolve()
	if err != nil {
		return nil, err
	}
	c := &client{nc: nc, s: s}
	c.tags.Store(rand.Uint64()) // tags only label replies; they never touch results
	return c, nil
}

func (c *client) stats() Stats {
	return Stats{Requests: c.requests.Load(), Answered: c.answered.Load(), Resent: c.resent.Load(), Busy: c.busy.Load()}
}

// call takes one measurement at x with the stream (s1, s2) and writes the
// len(dst) values of the reply into dst.
func (c *client) call(ctx context.Context, kind byte, k int, x []float64, s1, s2 uint64, dst []float64) error {
	if len(x) == 0 || len(x) > MaxDim {
		return fmt.Errorf("%w: a point of dimension %d; the wire carries 1 to MaxDim (%d)", oracle.ErrDimension, len(x), MaxDim)
	}
	if k < 0 {
		k = 0
	}
	c.requests.Add(1)
	req := request{kind: kind, step: int64(k), seed1: s1, seed2: s2, tag: c.tags.Add(1), x: x}
	buf := appendRequest(make([]byte, 0, requestHeader+8*len(x)), &req)
	start := time.Now()
	pause := max(c.s.Poll/16, time.Microsecond)
	sent, quick := 0, 0
	var lastErr error
	for {
		if ctx.Err() != nil {
			return fmt.Errorf("measurement abandoned: %w", context.Cause(ctx))
		}
		budget := c.s.Timeout
		if d, ok := ctx.Deadline(); ok {
			budget = min(budget, time.Until(d))
		}
		setBudget(buf, max(int64(budget), 1))
		actx, cancel := context.WithTimeout(ctx, c.s.Timeout)
		msg, err := c.nc.RequestWithContext(actx, c.s.Subject, buf)
		cancel()
		wait := false
		switch {
		case err == nil:
			r, derr := decodeReply(msg.Data, dst)
			if derr == nil && r.tag != req.tag {
				derr = fmt.Errorf("%w: reply tagged %d to request %d", ErrWire, r.tag, req.tag)
			}
			if derr != nil {
				// Not an answer from a worker of this version: ask again.
				lastErr = derr
				break
			}
			if r.status == statusBusy {
				wait = true
				break
			}
			c.replied()
			c.answered.Add(1)
			return replyError(r)
		case errors.Is(err, nats.ErrNoResponders):
			wait = true
		case ctx.Err() != nil:
			return fmt.Errorf("measurement abandoned: %w", context.Cause(ctx))
		case errors.Is(err, context.DeadlineExceeded):
			lastErr = fmt.Errorf("no reply within %v", c.s.Timeout)
		case errors.Is(err, nats.ErrConnectionClosed), errors.Is(err, nats.ErrBadSubscription),
			errors.Is(err, nats.ErrInvalidConnection), errors.Is(err, nats.ErrBadSubject),
			errors.Is(err, nats.ErrMaxPayload):
			return fmt.Errorf("remote measurement on %q: %w", c.s.Subject, err)
		default:
			// Disconnected, reconnecting, a full buffer: wait a pause and
			// count it as an attempt.
			lastErr = err
			if _, err := pauseFor(ctx, c.s.Poll, nil); err != nil {
				return fmt.Errorf("measurement abandoned: %w", err)
			}
		}
		if wait {
			// Every slot is busy, or no worker is there at all.
			c.busy.Add(1)
			since := start
			if t := time.Unix(0, c.last.Load()); t.After(since) {
				since = t
			}
			if time.Since(since) > c.s.Timeout {
				return fmt.Errorf("%w: %q: no free worker answered within %v", ErrNoWorker, c.s.Subject, c.s.Timeout)
			}
			quick++
			if quick <= quickAsks {
				continue // the queue group may pick a free worker next time
			}
			wake := c.wait()
			woken, err := pauseFor(ctx, pause, wake)
			c.leave(wake)
			if err != nil {
				return fmt.Errorf("measurement abandoned: %w", err)
			}
			if woken {
				quick = 0
			} else {
				pause = min(2*pause, c.s.Poll)
			}
			continue
		}
		sent++
		if sent > c.s.Retries {
			return fmt.Errorf("%w: %q after %d attempts: %w", ErrUnanswered, c.s.Subject, sent, lastErr)
		}
		c.resent.Add(1)
		// The wait for a free worker counts from this attempt: the time
		// the last one waited for a worker that vanished is not a sign
		// that no worker is there.
		start = time.Now()
	}
}

// replyError turns a reply's status into the driver's error.
func replyError(r reply) error {
	switch r.status {
	case statusOK:
		return nil
	case statusPanic:
		return &oracle.PanicError{Value: "on the worker: " + r.msg}
	case statusBadRequest:
		return fmt.Errorf("%w: the worker refused the request: %s", ErrWire, r.msg)
	default:
		return fmt.Errorf("%w: %s", ErrWorker, r.msg)
	}
}

// quickAsks is the number of times a request that found a busy worker is
// sent again at once before it waits for a reply to free a slot.
const quickAsks = 3

// pauseFor waits d, or until wake receives (woken is then true), or until
// ctx is done (its cause is then returned).
func pauseFor(ctx context.Context, d time.Duration, wake <-chan struct{}) (woken bool, err error) {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return false, nil
	case <-wake:
		return true, nil
	case <-ctx.Done():
		return false, context.Cause(ctx)
	}
}

// Value is a noisy value f̃(x) measured by the workers that serve a
// subject: each measurement is one request. It implements
// oracle.SeededValue, so [oracle.KieferWolfowitz] and [oracle.SPSA] send it
// the seed of each measurement's stream and the run gives the local run's
// bits. It is safe for concurrent use; set the adapters' Workers to their
// measurements per step so that a step's requests are in flight together.
type Value struct {
	c *client
}

// NewValue returns a Value that measures through nc on s.Subject. It
// returns an error wrapping oracle.ErrSettings if nc is nil or s is
// invalid. The connection stays the caller's to close.
func NewValue(nc *nats.Conn, s Settings) (*Value, error) {
	c, err := newClient(nc, s)
	if err != nil {
		return nil, err
	}
	return &Value{c: c}, nil
}

// ValueSeeded measures f̃(x) on a worker, which draws from the stream
// rand.New(rand.NewPCG(seed1, seed2)). It returns the worker's value, or
// an error: the worker's own (wrapping ErrWorker, or oracle.ErrPanic for a
// panic), ErrUnanswered, ErrNoWorker, ErrWire, or the cause of ctx.
func (v *Value) ValueSeeded(ctx context.Context, x []float64, seed1, seed2 uint64) (float64, error) {
	var out [1]float64
	err := v.c.call(ctx, kindValue, 0, x, seed1, seed2, out[:])
	return out[0], err
}

// ValueContext draws a seed pair from rng (two Uint64 calls) and calls
// ValueSeeded with it.
func (v *Value) ValueContext(ctx context.Context, x []float64, rng *rand.Rand) (float64, error) {
	s1, s2 := rng.Uint64(), rng.Uint64()
	return v.ValueSeeded(ctx, x, s1, s2)
}

// Value is ValueContext with context.Background().
func (v *Value) Value(x []float64, rng *rand.Rand) (float64, error) {
	return v.ValueContext(context.Background(), x, rng)
}

// Stats returns the driver's counts so far.
func (v *Value) Stats() Stats { return v.c.stats() }

// SeededField is a Field measurement taken from the seed of its random
// stream: the measurement draws from rand.New(rand.NewPCG(seed1, seed2)).
// [Field] implements it, and [Mean] calls it when its Field does.
type SeededField interface {
	MeasureSeeded(ctx context.Context, k int, dst, x []float64, seed1, seed2 uint64) error
}

// Field is a noisy vector field measured by the workers that serve a
// subject: each measurement is one request that carries the step index
// k, and the worker answers with len(x) values. It is safe for concurrent
// use.
type Field struct {
	c   *client
	dim int
}

// NewField returns a Field of dimension dim (1 ≤ dim ≤ MaxDim) that
// measures through nc on s.Subject. It returns an error wrapping
// oracle.ErrSettings if nc is nil, dim is out of range or s is invalid.
func NewField(nc *nats.Conn, dim int, s Settings) (*Field, error) {
	if dim < 1 || dim > MaxDim {
		return nil, fmt.Errorf("%w: dimension %d: must be 1 to MaxDim (%d)", oracle.ErrSettings, dim, MaxDim)
	}
	c, err := newClient(nc, s)
	if err != nil {
		return nil, err
	}
	return &Field{c: c, dim: dim}, nil
}

// MeasureSeeded measures the field at x for step k on a worker, which
// draws from rand.New(rand.NewPCG(seed1, seed2)), and writes the result
// into dst. On error dst is left unchanged; the errors are those of
// [Value.ValueSeeded] and oracle.ErrDimension.
func (f *Field) MeasureSeeded(ctx context.Context, k int, dst, x []float64, seed1, seed2 uint64) error {
	if len(x) != f.dim || len(dst) != f.dim {
		return fmt.Errorf("%w: remote field of dimension %d given x of length %d and dst of length %d", oracle.ErrDimension, f.dim, len(x), len(dst))
	}
	out := make([]float64, f.dim)
	if err := f.c.call(ctx, kindField, k, x, seed1, seed2, out); err != nil {
		return err
	}
	copy(dst, out)
	return nil
}

// MeasureContext draws a seed pair from rng (two Uint64 calls) and calls
// MeasureSeeded with it.
func (f *Field) MeasureContext(ctx context.Context, k int, dst, x []float64, rng *rand.Rand) error {
	s1, s2 := rng.Uint64(), rng.Uint64()
	return f.MeasureSeeded(ctx, k, dst, x, s1, s2)
}

// Measure is MeasureContext with context.Background() and step 0.
func (f *Field) Measure(dst, x []float64, rng *rand.Rand) error {
	return f.MeasureContext(context.Background(), 0, dst, x, rng)
}

// Dim returns the dimension.
func (f *Field) Dim() int { return f.dim }

// Stats returns the driver's counts so far.
func (f *Field) Stats() Stats { return f.c.stats() }

var (
	_ oracle.Value        = (*Value)(nil)
	_ oracle.ContextValue = (*Value)(nil)
	_ oracle.SeededValue  = (*Value)(nil)
	_ oracle.ContextField = (*Field)(nil)
	_ oracle.Field        = (*Field)(nil)
	_ oracle.Dimensioned  = (*Field)(nil)
	_ SeededField         = (*Field)(nil)
)
