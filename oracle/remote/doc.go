// Package remote takes the measurements of a stochastic approximation run
// on worker processes, on this machine or many others, through a NATS
// server: request–reply on a subject served by a queue group.
//
// # Two sides
//
// The driver side holds a [Value] or a [Field]: an oracle whose every
// measurement is a request to the subject. Hand a Value to
// oracle.NewKieferWolfowitz or oracle.NewSPSA with Workers set to the
// measurements per step (2p for Kiefer–Wolfowitz, 2q for SPSA), and all
// measurements of a step are in flight at once; [Mean] does the same for
// the average of m measurements of a Field at one point.
//
// The worker side is [Serve]: it serves the caller's own oracle.Value or
// oracle.Field on the subject in a queue group, answers each request with
// the measured value or with an error reply (an error, a panic, a
// malformed request), and drains gracefully once its context is done.
// A worker process takes WorkerSettings.Slots measurements at a time; a
// request that reaches a worker whose slots are all busy is answered
// "busy" at once and the driver asks again, so that the queue group (which
// picks a member at random) ends up handing every request to a free slot.
// After a few busy answers in a row a request waits until a reply to its
// driver frees a slot, or a short pause passes.
//
// # Same bits as a local run
//
// A request carries the point and the PCG seed pair of the measurement's
// own random stream, derived from the run's seed exactly as the local
// adapters do (see oracle.SeededValue); the worker recreates the stream as
// rand.New(rand.NewPCG(seed1, seed2)) and calls the same function the
// local run would. The adapters combine the values in the order of the
// measurements, not of the replies, so a run over any number of workers,
// with retries or not, gives the local run's result bit for bit — provided
// the workers run the same code on the same data.
//
// # Faults
//
// Each attempt of a request waits at most [Settings].Timeout (and never
// past the run's context). An attempt that gets no answer in time (a
// worker died, a message was lost) is sent again, to whichever worker the
// queue group picks, up to [Settings].Retries times; replies to an
// abandoned attempt and second replies are dropped by the client's
// request–reply machinery and never reach the run. An error reply is not
// retried: the same seed would fail the same way. Cancelling the run's
// context abandons every request in flight at once.
//
// # Wire format
//
// The messages are a compact binary format of this package, versioned by
// [WireVersion]: see the comment in wire.go. A worker answers a
// malformed, oversized or wrong-version request with an error reply.
//
// # Connection
//
// Both sides take a *nats.Conn that the caller opened with nats.Connect
// and its own options (URL, credentials, TLS, reconnection); this package
// adds none and closes nothing it was given.
package remote
