package sampling_test

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/stochroot/stochroot/sampling"
)

// panicText runs f and returns the text of its panic ("" if none).
func panicText(f func()) (msg string) {
	defer func() {
		if p := recover(); p != nil {
			msg = fmt.Sprint(p)
		}
	}()
	f()
	return ""
}

// The constructors are given bad item counts: zero, negative and the
// extremes of int must panic with a message naming n (a programmer error),
// and a count whose order cannot be allocated sensibly (Shuffled keeps n
// ints) must say how many bytes it would need instead of failing in the
// allocator. Counts that need no memory are accepted whatever their size.
func TestConstructorsBadNTable(t *testing.T) {
	ctors := map[string]func(int) sampling.Sampler{
		"NewUniform":    func(n int) sampling.Sampler { return sampling.NewUniform(n) },
		"NewShuffled":   func(n int) sampling.Sampler { return sampling.NewShuffled(n) },
		"NewSequential": func(n int) sampling.Sampler { return sampling.NewSequential(n) },
	}
	for name, ctor := range ctors {
		for _, n := range []int{0, -1, math.MinInt} {
			if msg := panicText(func() { ctor(n) }); !strings.Contains(msg, fmt.Sprintf("n = %d", n)) {
				t.Errorf("%s(%d): panic %q, want one naming n", name, n, msg)
			}
		}
	}
	for _, n := range []int{math.MaxInt, 1 << 40} {
		msg := panicText(func() { sampling.NewShuffled(n) })
		if !strings.Contains(msg, "bytes") || !strings.Contains(msg, fmt.Sprint(n)) {
			t.Errorf("NewShuffled(%d): panic %q, want one naming n and the bytes needed", n, msg)
		}
	}
	rng := rand.New(rand.NewPCG(1, 2))
	for _, s := range []sampling.Sampler{sampling.NewUniform(math.MaxInt), sampling.NewSequential(math.MaxInt)} {
		dst := make([]int, 8)
		s.Fill(dst, rng)
		for _, i := range dst {
			if i < 0 {
				t.Errorf("%T over MaxInt items drew %d", s, i)
			}
		}
		if s.Len() != math.MaxInt || s.Epoch() != 0 {
			t.Errorf("%T: Len %d, Epoch %d", s, s.Len(), s.Epoch())
		}
	}
}

// A typed-nil sampler (a nil *Uniform in a Sampler, say) and a nil rng are
// programmer errors inside the batch loop: they panic, and the message says
// what was nil.
func TestNilSamplerAndRngPanicsSayWhat(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	dst := make([]int, 4)
	nils := map[string]sampling.Sampler{
		"*sampling.Uniform":    (*sampling.Uniform)(nil),
		"*sampling.Shuffled":   (*sampling.Shuffled)(nil),
		"*sampling.Sequential": (*sampling.Sequential)(nil),
	}
	for typ, s := range nils {
		for method, call := range map[string]func(){
			"Fill":  func() { s.Fill(dst, rng) },
			"Len":   func() { s.Len() },
			"Epoch": func() { s.Epoch() },
			"Reset": func() { s.Reset() },
		} {
			msg := panicText(call)
			if !strings.Contains(msg, "nil "+typ) || !strings.Contains(msg, method) {
				t.Errorf("%s.%s on nil: panic %q, want one naming the nil %s and the method", typ, method, msg, typ)
			}
		}
	}
	for name, s := range map[string]sampling.Sampler{
		"Uniform":  sampling.NewUniform(10),
		"Shuffled": sampling.NewShuffled(10),
	} {
		msg := panicText(func() { s.Fill(dst, nil) })
		if !strings.Contains(msg, name+".Fill") || !strings.Contains(msg, "rng is nil") {
			t.Errorf("%s.Fill with a nil rng: panic %q, want one saying the rng is nil", name, msg)
		}
	}
	// Sequential uses no randomness: a nil rng is documented as allowed.
	if msg := panicText(func() { sampling.NewSequential(10).Fill(dst, nil) }); msg != "" {
		t.Errorf("Sequential.Fill with a nil rng panicked: %s", msg)
	}
	// An empty batch draws nothing and needs no rng.
	if msg := panicText(func() { sampling.NewShuffled(10).Fill(nil, nil) }); msg != "" {
		t.Errorf("Shuffled.Fill of an empty batch with a nil rng panicked: %s", msg)
	}
}
