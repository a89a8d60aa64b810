package remote

import (
	"encoding/binary"
	"fmt"
	"math"
)

// The wire format, little-endian throughout. A request is
//
//	version u8 | kind u8 | step i64 | seed1 u64 | seed2 u64 | budget i64 | tag u64 | n u32 | x: n × f64
//
// where kind is 1 for a [Value] and 2 for a [Field] measurement, step is
// the step index k of the run, (seed1, seed2) the PCG seed of the
// measurement's stream, budget the time in nanoseconds the requester will
// wait for this attempt (0: no limit) and tag a number the reply echoes.
// A reply is
//
//	version u8 | status u8 | tag u64 | n u32 | payload
//
// with payload n × f64 (the measured values) when status is 0, and n bytes
// of UTF-8 text (what went wrong) otherwise. Lengths are checked against
// [MaxDim] and [MaxMessage] before anything is allocated, and a message
// must have exactly the length its header announces.
const (
	// WireVersion is the version byte of every message this package writes
	// and the only one it reads.
	WireVersion = 1

	// MaxDim is the largest point (and the longest reply vector) a message
	// may carry: 65536 values, 512 KiB, within the 1 MiB default payload
	// limit of a NATS server.
	MaxDim = 1 << 16

	// MaxMessage is the longest error text a reply carries, in bytes;
	// a worker cuts longer texts.
	MaxMessage = 1024
)

const (
	kindValue byte = 1
	kindField byte = 2

	requestHeader = 1 + 1 + 8 + 8 + 8 + 8 + 8 + 4
	replyHeader   = 1 + 1 + 8 + 4
)

// Reply status codes.
const (
	statusOK         byte = 0
	statusFailed     byte = 1 // the caller's function returned an error or a non-finite value
	statusPanic      byte = 2 // the caller's function panicked
	statusBadRequest byte = 3 // malformed, oversized or wrong-version request
	statusNotServed  byte = 4 // the worker serves no function of that kind, or of that dimension
	statusBusy       byte = 5 // every slot of the worker is busy: ask again
)

// requestTag returns the tag of an encoded request, or 0 if b is too short
// to hold one.
func requestTag(b []byte) uint64 {
	if len(b) < requestHeader {
		return 0
	}
	return binary.LittleEndian.Uint64(b[34:])
}

// errWire is wrapped by every decoding error; the exported sentinel is
// ErrWire.
var errWire = ErrWire

// request is a decoded request. x aliases the buffer given to the decoder.
type request struct {
	kind         byte
	step         int64
	seed1, seed2 uint64
	budget       int64
	tag          uint64
	x            []float64
}

// appendRequest appends the encoding of r to b.
func appendRequest(b []byte, r *request) []byte {
	b = append(b, WireVersion, r.kind)
	b = binary.LittleEndian.AppendUint64(b, uint64(r.step))
	b = binary.LittleEndian.AppendUint64(b, r.seed1)
	b = binary.LittleEndian.AppendUint64(b, r.seed2)
	b = binary.LittleEndian.AppendUint64(b, uint64(r.budget))
	b = binary.LittleEndian.AppendUint64(b, r.tag)
	b = binary.LittleEndian.AppendUint32(b, uint32(len(r.x)))
	for _, v := range r.x {
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
	}
	return b
}

// setBudget overwrites the budget field of an encoded request.
func setBudget(b []byte, budget int64) {
	binary.LittleEndian.PutUint64(b[1+1+8+8+8:], uint64(budget))
}

// decodeRequest decodes b into r, reusing buf for r.x when it is large
// enough. It checks the version, the kind, the announced length against
// MaxDim and the message length before it allocates.
func decodeRequest(b []byte, r *request, buf []float64) ([]float64, error) {
	if err := checkHeader(b, "request", "worker", requestHeader); err != nil {
		return buf, err
	}
	r.kind = b[1]
	if r.kind != kindValue && r.kind != kindField {
		return buf, fmt.Errorf("%w: unknown request kind %d", errWire, r.kind)
	}
	le := binary.LittleEndian
	r.step = int64(le.Uint64(b[2:]))
	r.seed1 = le.Uint64(b[10:])
	r.seed2 = le.Uint64(b[18:])
	r.budget = int64(le.Uint64(b[26:]))
	r.tag = le.Uint64(b[34:])
	n := le.Uint32(b[42:])
	switch {
	case r.step < 0:
		return buf, fmt.Errorf("%w: negative step index %d", errWire, r.step)
	case r.budget < 0:
		return buf, fmt.Errorf("%w: negative time budget %d ns", errWire, r.budget)
	case n == 0:
		return buf, fmt.Errorf("%w: request with an empty point", errWire)
	case n > MaxDim:
		return buf, fmt.Errorf("%w: point of dimension %d exceeds MaxDim (%d)", errWire, n, MaxDim)
	case len(b) != requestHeader+8*int(n):
		return buf, fmt.Errorf("%w: request of %d bytes; a point of dimension %d needs %d", errWire, len(b), n, requestHeader+8*int(n))
	}
	if cap(buf) < int(n) {
		buf = make([]float64, n)
	}
	r.x = buf[:n]
	for i := range r.x {
		r.x[i] = math.Float64frombits(le.Uint64(b[requestHeader+8*i:]))
	}
	return buf, nil
}

// appendReply appends a reply with the values vals (status OK).
func appendReply(b []byte, tag uint64, vals []float64) []byte {
	b = append(b, WireVersion, statusOK)
	b = binary.LittleEndian.AppendUint64(b, tag)
	b = binary.LittleEndian.AppendUint32(b, uint32(len(vals)))
	for _, v := range vals {
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
	}
	return b
}

// appendErrorReply appends a reply with a non-OK status and the text msg,
// cut to MaxMessage bytes.
func appendErrorReply(b []byte, tag uint64, status byte, msg string) []byte {
	if len(msg) > MaxMessage {
		msg = msg[:MaxMessage]
	}
	b = append(b, WireVersion, status)
	b = binary.LittleEndian.AppendUint64(b, tag)
	b = binary.LittleEndian.AppendUint32(b, uint32(len(msg)))
	return append(b, msg...)
}

// reply is a decoded reply: on status OK the values went into the
// destination given to decodeReply; otherwise msg holds the text.
type reply struct {
	status byte
	tag    uint64
	msg    string
}

// decodeReply decodes b; on status OK it writes the values into dst, whose
// length must be the announced one. It checks the version, the status, the
// announced length against MaxDim or MaxMessage and the message length
// before it allocates (only an error text is allocated).
func decodeReply(b []byte, dst []float64) (reply, error) {
	var r reply
	if err := checkHeader(b, "reply", "driver", replyHeader); err != nil {
		return r, err
	}
	le := binary.LittleEndian
	r.status = b[1]
	r.tag = le.Uint64(b[2:])
	n := le.Uint32(b[10:])
	if r.status == statusOK {
		switch {
		case n > MaxDim:
			return r, fmt.Errorf("%w: reply of dimension %d exceeds MaxDim (%d)", errWire, n, MaxDim)
		case int(n) != len(dst):
			return r, fmt.Errorf("%w: reply of dimension %d, expected %d", errWire, n, len(dst))
		case len(b) != replyHeader+8*int(n):
			return r, fmt.Errorf("%w: reply of %d bytes; %d values need %d", errWire, len(b), n, replyHeader+8*int(n))
		}
		for i := range dst {
			dst[i] = math.Float64frombits(le.Uint64(b[replyHeader+8*i:]))
		}
		return r, nil
	}
	switch {
	case r.status > statusBusy:
		return r, fmt.Errorf("%w: unknown reply status %d", errWire, r.status)
	case n > MaxMessage:
		return r, fmt.Errorf("%w: error text of %d bytes exceeds MaxMessage (%d)", errWire, n, MaxMessage)
	case len(b) != replyHeader+int(n):
		return r, fmt.Errorf("%w: reply of %d bytes; an error text of %d bytes needs %d", errWire, len(b), n, replyHeader+int(n))
	}
	r.msg = string(b[replyHeader:])
	return r, nil
}

// checkHeader checks that message b (a "request" or a "reply", read by
// the "worker" or the "driver") is not empty, has this package's wire
// version and holds at least the header's bytes.
func checkHeader(b []byte, what, reader string, header int) error {
	switch {
	case len(b) < 1:
		return fmt.Errorf("%w: empty %s", errWire, what)
	case b[0] != WireVersion:
		return fmt.Errorf("%w: %s of wire version %d, this %s reads version %d", errWire, what, b[0], reader, WireVersion)
	case len(b) < header:
		return fmt.Errorf("%w: %s of %d bytes is shorter than the %d-byte header", errWire, what, len(b), header)
	}
	return nil
}
