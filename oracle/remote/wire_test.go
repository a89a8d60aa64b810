package remote

import (
	"bytes"
	"errors"
	"math"
	"strings"
	"testing"
)

// TestWireRoundTrip: requests and replies decode to what was encoded, bit
// for bit (NaN payloads and signed zeros included), and the layout has the
// documented sizes.
func TestWireRoundTrip(t *testing.T) {
	x := []float64{1.5, -0.0, math.Inf(-1), math.Float64frombits(0x7ff8000000000123), 1e-310}
	in := request{kind: kindField, step: 17, seed1: 1 << 63, seed2: 42, budget: 5e9, tag: 99, x: x}
	b := appendRequest(nil, &in)
	if len(b) != requestHeader+8*len(x) || b[0] != WireVersion {
		t.Fatalf("request of %d bytes, version %d", len(b), b[0])
	}
	var out request
	if _, err := decodeRequest(b, &out, nil); err != nil {
		t.Fatal(err)
	}
	if out.kind != in.kind || out.step != in.step || out.seed1 != in.seed1 || out.seed2 != in.seed2 ||
		out.budget != in.budget || out.tag != in.tag || !sameBits(out.x, x) {
		t.Errorf("decoded %+v, want %+v", out, in)
	}
	setBudget(b, 7)
	if _, err := decodeRequest(b, &out, nil); err != nil || out.budget != 7 {
		t.Errorf("budget after setBudget: %d, %v", out.budget, err)
	}
	dst := make([]float64, len(x))
	r, err := decodeReply(appendReply(nil, 8, x), dst)
	if err != nil || r.status != statusOK || r.tag != 8 || !sameBits(dst, x) {
		t.Errorf("reply %+v %v %v", r, err, dst)
	}
	long := strings.Repeat("é", MaxMessage) // 2·MaxMessage bytes, cut to MaxMessage
	r, err = decodeReply(appendErrorReply(nil, 9, statusFailed, long), nil)
	if err != nil || r.status != statusFailed || r.tag != 9 || len(r.msg) != MaxMessage {
		t.Errorf("error reply %+v, %v", r, err)
	}
}

// TestWireLimits: lengths beyond MaxDim or MaxMessage are refused from the
// header alone, before anything is allocated.
func TestWireLimits(t *testing.T) {
	b := appendRequest(nil, &request{kind: kindValue, x: []float64{1}})
	b[42], b[43], b[44], b[45] = 0, 0, 1, 0 // n = 65536 = MaxDim: allowed, but the message is short
	if _, err := decodeRequest(b, &request{}, nil); !errors.Is(err, ErrWire) || !strings.Contains(err.Error(), "needs") {
		t.Errorf("short body: %v", err)
	}
	b[42] = 1 // n = MaxDim + 1
	var allocs float64
	allocs = testing.AllocsPerRun(10, func() { _, _ = decodeRequest(b, &request{}, nil) })
	if _, err := decodeRequest(b, &request{}, nil); !errors.Is(err, ErrWire) || !strings.Contains(err.Error(), "MaxDim") {
		t.Errorf("oversized: %v", err)
	}
	// The error text is formatted (a few small allocations); the point
	// of 65537 values (512 KiB) is never made.
	if allocs > 8 {
		t.Errorf("%v allocations refusing an oversized request", allocs)
	}
	rb := appendErrorReply(nil, 1, statusFailed, "x")
	rb[10], rb[11] = 0xff, 0xff
	if _, err := decodeReply(rb, nil); !errors.Is(err, ErrWire) || !strings.Contains(err.Error(), "MaxMessage") {
		t.Errorf("oversized error text: %v", err)
	}
}

// FuzzDecode: the decoders never panic, never accept a message whose
// length does not match its header, and what they accept encodes back to
// the same bytes.
func FuzzDecode(f *testing.F) {
	f.Add(appendRequest(nil, &request{kind: kindValue, seed1: 1, seed2: 2, tag: 3, x: []float64{1, 2}}))
	f.Add(appendRequest(nil, &request{kind: kindField, step: 5, budget: 1e9, x: []float64{math.NaN()}}))
	f.Add(appendReply(nil, 4, []float64{0.5}))
	f.Add(appendErrorReply(nil, 4, statusPanic, "boom"))
	f.Add([]byte{WireVersion})
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, b []byte) {
		var r request
		if _, err := decodeRequest(b, &r, nil); err == nil {
			if !bytes.Equal(appendRequest(nil, &r), b) {
				t.Fatalf("request %x re-encodes differently", b)
			}
		} else if !errors.Is(err, ErrWire) {
			t.Fatalf("request error %v does not wrap ErrWire", err)
		}
		if len(b) >= replyHeader {
			n := int(uint32(b[10]) | uint32(b[11])<<8 | uint32(b[12])<<16 | uint32(b[13])<<24)
			if n <= MaxDim {
				dst := make([]float64, n)
				rep, err := decodeReply(b, dst)
				if err == nil {
					var again []byte
					if rep.status == statusOK {
						again = appendReply(nil, rep.tag, dst)
					} else {
						again = appendErrorReply(nil, rep.tag, rep.status, rep.msg)
					}
					if !bytes.Equal(again, b) {
						t.Fatalf("reply %x re-encodes differently", b)
					}
				} else if !errors.Is(err, ErrWire) {
					t.Fatalf("reply error %v does not wrap ErrWire", err)
				}
			}
		}
		_, _ = decodeReply(b, nil)
	})
}
