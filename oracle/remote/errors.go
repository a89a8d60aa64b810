package remote

import "errors"

// Errors of the remote measurements. Test for them with errors.Is; settings
// errors wrap oracle.ErrSettings.
var (
	// ErrWire reports a message that does not follow the wire format: a
	// wrong version byte, a length beyond MaxDim or MaxMessage, a message
	// shorter or longer than its header announces.
	ErrWire = errors.New("remote: malformed message")
	// ErrWorker wraps the error a worker's function returned (the reply's
	// text follows it), or a request the worker could not serve.
	ErrWorker = errors.New("remote: the worker's measurement failed")
	// ErrUnanswered reports a request that got no answer after Retries
	// re-sends, each waiting Timeout.
	ErrUnanswered = errors.New("remote: no answer")
	// ErrNoWorker reports a request that found no worker in the queue
	// group while no reply at all reached the driver for Timeout.
	ErrNoWorker = errors.New("remote: no worker is serving the subject")
)
