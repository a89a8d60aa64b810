package sa

import (
	"errors"
	"fmt"
	"math"
	"testing"

	"github.com/stochroot/stochroot/schedule"
)

// FuzzSettingsResolve feeds Settings.resolve arbitrary numbers, enums and
// sizes (the gain, the budgets, the burn-in, MaxAbs, a Box, Inference,
// Precision and Tracing, the dimension) and checks that it never panics,
// that it returns either an error wrapping ErrSettings or settings that
// satisfy every documented invariant (and resolve to themselves again),
// and that it never writes into the caller's Settings or the structs they
// point to. Run it with
//
//	go test ./sa -run XXX -fuzz FuzzSettingsResolve -fuzztime 60s
func FuzzSettingsResolve(f *testing.F) {
	f.Add(1.0, 0.0, 0.7, uint8(0), 10000, 0, 0, 0, 0.0, 0.0, 0.0, 0, 0.0, 0, 0.0, 0.0, uint8(0), 0, 0, 0.0, 1.0, uint8(0), 2)
	f.Add(1.0, 0.0, 0.7, uint8(1), -1, 100, 5, 2, 10.0, 0.9, 0.6, int(CovarianceFull), 3.0, 10, 0.1, 0.0, uint8(3), 1, 1024, -1.0, 1.0, uint8(1), 3)
	f.Add(0.5, 2.0, 1.0, uint8(2), 0, 0, 0, 0, 0.0, 0.0, 0.0, int(CovarianceFull), 0.0, 0, 0.0, 0.0, uint8(2), 1, 1<<40, 0.0, 0.0, uint8(0), 100000)
	f.Add(1.0, 0.0, 0.7, uint8(0), 50, 0, 0, 50, 0.0, 0.95, 0.0, int(CovarianceDiagonal), 0.0, 0, 0.0, 0.0, uint8(0), 0, 0, 0.0, 0.0, uint8(0), 1<<40)
	f.Add(math.NaN(), math.Inf(1), -1.0, uint8(1), math.MinInt, -1, -1, -1, math.NaN(), math.Inf(-1), math.NaN(), 99, math.Inf(1), 1, math.NaN(), -1.0, uint8(3), -1, 1, math.Inf(1), math.NaN(), uint8(1), -1)

	f.Fuzz(func(t *testing.T,
		gScale, gOffset, gExp float64, gKind uint8,
		maxSteps, maxMeas, maxEpochs, burnIn int, maxAbs float64,
		level, batchExp float64, cov int, batchScale float64, minBatches int,
		precAbs, precRel float64, flags uint8, traceEvery, traceMax int,
		lo, hi float64, boxOn uint8, d int,
	) {
		s := Settings{
			MaxSteps: maxSteps, MaxMeasurements: maxMeas, MaxEpochs: maxEpochs, BurnIn: burnIn, MaxAbs: maxAbs,
			Inference: Inference{Level: level, Covariance: CovarianceMode(cov), BatchExponent: batchExp, BatchScale: batchScale, MinBatches: minBatches},
			Seed:      uint64(maxSteps) ^ uint64(d),
		}
		switch gKind % 4 {
		case 0:
			s.Gain = schedule.Power{Scale: gScale, Offset: gOffset, Exponent: gExp}
		case 1:
			s.Gain = schedule.Kesten{Base: schedule.Power{Scale: gScale, Offset: gOffset, Exponent: gExp}}
		case 2:
			s.Gain = schedule.Constant(gScale)
		case 3: // nil gain: the run calibrates its own (resolve accepts it)
		}
		if flags&1 != 0 {
			s.Precision = &Precision{Absolute: precAbs, Relative: precRel}
		}
		if flags&2 != 0 {
			s.Trace = &Tracing{Every: traceEvery, Max: traceMax}
		}
		if boxOn%2 == 1 && d >= 0 && d <= 8 {
			b := Box{Lower: make([]float64, d), Upper: make([]float64, d)}
			for i := range d {
				b.Lower[i], b.Upper[i] = lo, hi
			}
			s.Projection = b
		}
		before := describe(s)

		r, err := s.resolve(d)

		if after := describe(s); after != before {
			t.Fatalf("resolve wrote into the caller's settings:\nbefore %s\nafter  %s", before, after)
		}
		if err != nil {
			if !errors.Is(err, ErrSettings) {
				t.Fatalf("error %v does not wrap ErrSettings", err)
			}
			return
		}
		if msg := invalidResolved(r, s, d); msg != "" {
			t.Fatalf("resolve(%d) accepted %s and returned settings with %s", d, before, msg)
		}
		if s.Precision != nil && r.Precision == s.Precision || s.Trace != nil && r.Trace == s.Trace {
			t.Fatalf("the resolved settings share the caller's Precision or Tracing")
		}
		// Resolving the resolved settings changes nothing.
		again, err := r.resolve(d)
		if err != nil {
			t.Fatalf("the resolved settings do not resolve again: %v", err)
		}
		if describe(again) != describe(r) {
			t.Fatalf("resolve is not idempotent:\nonce  %s\ntwice %s", describe(r), describe(again))
		}
	})
}

// describe prints s with what its pointers point to (fmt prints NaN as
// NaN, so equal texts mean equal fields).
func describe(s Settings) string {
	p, tr := "nil", "nil"
	if s.Precision != nil {
		p = fmt.Sprintf("%+v", *s.Precision)
	}
	if s.Trace != nil {
		tr = fmt.Sprintf("%+v", *s.Trace)
	}
	c := s
	c.Precision, c.Trace = nil, nil
	return fmt.Sprintf("%+v precision=%s trace=%s", c, p, tr)
}

// invalidResolved returns what is wrong with the resolved settings r of
// the caller's s at dimension d, or "".
func invalidResolved(r, s Settings, d int) string {
	finite := func(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
	in := r.Inference
	switch {
	case r.Gain == nil && s.Gain != nil:
		return "a nil gain"
	case !(r.MaxSteps > 0 || r.MaxSteps == NoLimit):
		return fmt.Sprintf("MaxSteps = %d", r.MaxSteps)
	case s.MaxSteps == 0 && (s.MaxMeasurements > 0 || s.MaxEpochs > 0) && r.MaxSteps != NoLimit:
		return "MaxSteps 0 with a measurement or epoch budget not resolved to NoLimit (the caller's budget binds)"
	case s.MaxSteps == 0 && s.MaxMeasurements == 0 && s.MaxEpochs == 0 && r.MaxSteps != DefaultMaxSteps:
		return "MaxSteps 0 not resolved to the default"
	case r.MaxMeasurements < 0 || r.MaxEpochs < 0 || r.BurnIn < 0:
		return "a negative budget or burn-in"
	case !(r.MaxAbs >= 0) || !finite(r.MaxAbs):
		return fmt.Sprintf("MaxAbs = %v", r.MaxAbs)
	case in.Covariance != CovarianceFull && in.Covariance != CovarianceDiagonal && in.Covariance != CovarianceOff:
		return fmt.Sprintf("Covariance = %d", in.Covariance)
	case s.Inference.Covariance == CovarianceAuto && (in.Covariance == CovarianceFull) != (d <= MaxFullCovariance):
		return fmt.Sprintf("CovarianceAuto resolved to %d at dimension %d", in.Covariance, d)
	case !(in.Level > 0 && in.Level < 1):
		return fmt.Sprintf("Level = %v", in.Level)
	case !(in.BatchExponent > 0 && in.BatchExponent < 1):
		return fmt.Sprintf("BatchExponent = %v", in.BatchExponent)
	case !(in.BatchScale > 0) || !finite(in.BatchScale):
		return fmt.Sprintf("BatchScale = %v", in.BatchScale)
	case in.MinBatches < 2:
		return fmt.Sprintf("MinBatches = %d", in.MinBatches)
	case in.on() && batchMeansBytes(d, in.Covariance == CovarianceFull) > MaxBufferBytes:
		return fmt.Sprintf("error bars needing %d bytes", batchMeansBytes(d, in.Covariance == CovarianceFull))
	}
	if p := r.Precision; p != nil {
		if !in.on() || !(p.Absolute >= 0) || !(p.Relative >= 0) || !finite(p.Absolute) || !finite(p.Relative) || p.Absolute == 0 && p.Relative == 0 {
			return fmt.Sprintf("Precision %+v with inference %v", *p, in.on())
		}
	}
	if tr := r.Trace; tr != nil {
		if tr.Every < 1 || tr.Max < 2 || traceBytes(tr.Max, d) > MaxBufferBytes {
			return fmt.Sprintf("Tracing %+v (%d bytes)", *tr, traceBytes(tr.Max, d))
		}
	}
	return ""
}
