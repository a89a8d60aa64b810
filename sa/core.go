package sa

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"

	"gonum.org/v1/gonum/floats"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/schedule"
)

// core is the one update of the library,
//
//	x_{k+1} = Π( x_k − a_k·Y_k ),
//
// with the Polyak–Ruppert average of the iterates after a burn-in. Every
// driver (pull drivers that call an oracle, the push tuner that is handed
// measurements) owns one core and feeds it measurements through step; no
// other code applies the recursion.
//
// The core owns its buffers; step allocates nothing.
type core struct {
	x, next []float64 // current iterate and scratch for the next one
	avg     []float64 // running mean of the averaged iterates
	avgNext []float64 // scratch: the next avg (stepRankOne swaps them), or next − avg
	nAvg    int       // number of iterates in avg
	burnIn  int       // iterates x_1..x_burnIn are not averaged

	steps   int // updates applied so far (k of the next step)
	gainIdx int // index n passed to Gain; equals steps unless adaptive
	gain    schedule.Schedule
	pow     powerGains // incremental evaluation of a schedule.Power gain
	usePow  bool
	adapt   schedule.Adaptive // non-nil for adaptive schedules
	prev    []float64         // previous measurement, adaptive only
	hasPrev bool

	proj   Projection
	member Membership // proj's membership test, if it has one
	// active: x was put where it is by the projection, and no step has
	// moved it since (see Result.Active); projected counts the steps in
	// which the projection moved the iterate.
	active    bool
	projected int
	maxAbs    float64 // > 0: |x_i| above it is divergence

	// maxChange, if not nil, bounds every update coordinate-wise before the
	// projection: |x_{k+1,i} − x_{k,i}| ≤ maxChange[i] (a trust region of
	// the step). limited reports that the bound cut the last update.
	maxChange []float64
	limited   bool

	// saved is a copy of x taken before each measurement of a pull run, so
	// that an oracle that writes into x (against the contract) can be
	// detected and undone after a failed step (see measure, restore).
	saved []float64
	// trusted is set when the oracle is one of this module's, which leave
	// x alone (leavesXAlone): measure then takes no copy.
	trusted bool

	// Inference and tracing, switched on by configure; nil when off.
	configured bool
	infWhy     string      // why inf is nil, for the error bars' Why
	plan       barsPlan    // what the driver knows about the noise (see barsPlan)
	inf        *batchMeans // batch-means error bars of avg
	prec       *Precision  // stop once the error bars are this tight
	trace      *Trace      // every-k-th-step record
	perCall    int         // measurements per step, for the trace
	lastGain   float64     // a_k of the last applied update
	lastNorm   float64     // ‖Y_k‖ of the last update (tracing only)

	// The short path of step (stepShort), decided once by newCore.
	// constGain: the gain is a valid schedule.Constant, whose value is
	// constA. short: no adaptive gain, fewer than vectorKernelMin
	// coordinates, and no projection or a Box of the right length, whose
	// bounds are boxLo and boxHi (nil without a projection).
	constGain    bool
	constA       float64
	short        bool
	boxLo, boxHi []float64
}

// vectorKernelMin is the dimension from which step uses gonum's vector
// kernels; below it a plain loop has less fixed cost.
const vectorKernelMin = 64

// newCore copies x0 and prepares a core. The arguments must already be
// validated.
func newCore(x0 []float64, gain schedule.Schedule, burnIn int, proj Projection, maxAbs float64) *core {
	d := len(x0)
	buf := make([]float64, 5*d)
	c := &core{
		x: buf[:d:d], next: buf[d : 2*d : 2*d], avg: buf[2*d : 3*d : 3*d], saved: buf[3*d : 4*d : 4*d], avgNext: buf[4*d:],
		burnIn: burnIn, gain: gain, proj: proj, maxAbs: maxAbs,
	}
	copy(c.x, x0)
	c.member, _ = proj.(Membership)
	if p, ok := gain.(schedule.Power); ok {
		c.pow, c.usePow = newPowerGains(p), true
	}
	if a, ok := gain.(schedule.Adaptive); ok {
		c.adapt = a
		c.prev = make([]float64, d)
	}
	if g, ok := gain.(schedule.Constant); ok {
		if a := float64(g); a >= 0 && !math.IsInf(a, 1) {
			c.constGain, c.constA = true, a
		}
	}
	c.short = c.adapt == nil && d < vectorKernelMin
	switch p := proj.(type) {
	case nil:
	case Box:
		if len(p.Lower) == d && len(p.Upper) == d && p.validate(d) == nil {
			c.boxLo, c.boxHi = p.Lower, p.Upper
		} else {
			c.short = false // Project panics, or Contains may fail: stepGeneral
		}
	default:
		c.short = false
	}
	return c
}

// step applies one update with measurement y (len(y) == len(x), checked by
// the callers). On error nothing changes: the iterate, the average, the
// counters and the gain index stay as they were; the same holds when the
// caller's gain, projection or adaptive Advance panics, since all of them
// run before the commit.
func (c *core) step(y []float64) error {
	var a float64
	if c.constGain {
		a = c.constA // valid: checked by newCore
	} else {
		a = c.gainOf(c.gainIdx)
		if !(a >= 0) || math.IsInf(a, 1) {
			return &StepError{Step: c.steps, Err: fmt.Errorf("%w: a_%d = %v", ErrGain, c.gainIdx, a)}
		}
	}
	if c.short && c.trace == nil && c.stepShort(y, a) {
		return nil
	}
	return c.stepGeneral(y, a)
}

// stepShort is step for a short vector (below vectorKernelMin coordinates)
// with no adaptive gain and no trace, no projection or a Box, and the
// valid gain a: the same operations on every coordinate as stepGeneral
// (x − a·y, the finiteness check, the MaxChange clamp, the Box's clamp,
// MaxAbs; the Box's membership check holds by construction) in one pass,
// then the same commit. It reports false, having changed nothing but
// scratch, at the first coordinate where stepGeneral would fail; the
// caller then runs stepGeneral, which returns the error.
// TestStepShortMatchesGeneral checks the two bit for bit.
func (c *core) stepShort(y []float64, a float64) bool {
	x := c.x
	d := len(x)
	next := c.next[:d]
	y = y[:d]
	// The averaging weight, 1/n as in average, is divided out before the
	// loop, so that the division runs alongside it.
	avgHere := c.inf == nil && c.steps >= c.burnIn
	var w float64
	if avgHere {
		w = 1 / float64(c.nAvg+1)
	}
	limited, active := false, false
	if m, lo, hi := c.maxChange, c.boxLo, c.boxHi; m != nil && lo != nil && c.maxAbs == 0 {
		// A step limit and a Box (a tuner's settings): shortAny without
		// the tests of what is set.
		// |dv| > m holds exactly when dv > m or dv < −m does (for m < 0
		// both hold for every dv but NaN), so one comparison guards the
		// clamp, which then decides as clampChange does. The finiteness
		// of the kept values is summed (v − v is +0 for a finite v, NaN
		// otherwise) and tested once after the loop.
		m, lo, hi = m[:d], lo[:d], hi[:d]
		bad := 0.0
		for i, xi := range x {
			v := xi - a*y[i]
			if dv := v - xi; math.Abs(dv) > m[i] { // clampChange
				if v-v != 0 {
					return false
				}
				if dv > m[i] {
					v = xi + m[i]
				} else {
					v = xi - m[i]
				}
				limited = true
			}
			if v < lo[i] { // Box.Project
				if v-v != 0 {
					return false
				}
				v, active = lo[i], true
			} else if v > hi[i] {
				if v-v != 0 {
					return false
				}
				v, active = hi[i], true
			}
			bad += v - v
			next[i] = v
		}
		if bad != 0 {
			return false
		}
	} else {
		var ok bool
		if ok, limited, active = c.shortAny(next, x, y, a); !ok {
			return false
		}
	}
	// commit, with advance = true (no adaptive gain) and no trace.
	c.x, c.next = next, x
	switch {
	case active:
		c.projected++
	case c.active && slices.Equal(next, x):
		active = true
	}
	c.active = active
	c.limited = limited
	c.lastGain = a
	c.gainIdx++
	c.steps++
	if avgHere { // average, inlined
		c.nAvg++
		avg := c.avg[:d]
		for i, v := range next {
			avg[i] += (v - avg[i]) * w
		}
	} else if c.steps > c.burnIn {
		c.average(next, x, a, active)
	}
	return true
}

// shortAny is the loop of stepShort for any of its settings: it writes
// next = Π_Box(clamp_{±MaxChange}(x − a·y)) (either step left out when it
// is not set) and reports whether stepGeneral would accept the step (ok),
// and whether the clamp (limited) and the projection (active) moved a
// coordinate. stepGeneral fails if x − a·y has a NaN or ±Inf entry: the
// check sits where a value is replaced (the clamp and the projection,
// rare) and once at the end, where v is either as computed or a clamp of
// a finite value (which may overflow: then ok is false as well, and
// stepGeneral decides). A Box's projection of a finite value passes its
// Contains (newCore checked Lower ≤ Upper).
func (c *core) shortAny(next, x, y []float64, a float64) (ok, limited, active bool) {
	d := len(x)
	m := c.maxChange
	if m != nil {
		m = m[:d]
	}
	lo, hi := c.boxLo, c.boxHi
	box := lo != nil
	if box {
		lo, hi = lo[:d], hi[:d]
	}
	maxAbs := c.maxAbs
	for i, yi := range y {
		xi := x[i]
		v := xi - a*yi
		if m != nil {
			if dv := v - xi; dv > m[i] {
				if v-v != 0 {
					return false, false, false
				}
				v, limited = xi+m[i], true
			} else if dv < -m[i] {
				if v-v != 0 {
					return false, false, false
				}
				v, limited = xi-m[i], true
			}
		}
		if box {
			if v < lo[i] {
				if v-v != 0 {
					return false, false, false
				}
				v, active = lo[i], true
			} else if v > hi[i] {
				if v-v != 0 {
					return false, false, false
				}
				v, active = hi[i], true
			}
		}
		if v-v != 0 {
			return false, false, false
		}
		if maxAbs > 0 && math.Abs(v) > maxAbs {
			return false, false, false
		}
		next[i] = v
	}
	return true, limited, active
}

// stepGeneral is step after the gain a (valid) has been evaluated.
func (c *core) stepGeneral(y []float64, a float64) error {
	x, next := c.x, c.next[:len(c.x)]
	y = y[:len(x)]
	// next = x − a·y, and a finiteness check of next. Long vectors
	// use gonum's kernels instead (x + (−a)·y is the same value: negation
	// is exact; the sum of next is finite when every entry is, and only
	// when it is not, or the sum itself overflows, are the entries
	// examined one by one).
	bad := false
	if len(x) < vectorKernelMin {
		for i, yi := range y {
			v := x[i] - a*yi
			next[i] = v
			// v − v is NaN exactly when v is ±Inf or NaN; a branch, not an
			// accumulator, so that no chain of dependent adds forms.
			if v-v != 0 {
				bad = true
			}
		}
	} else {
		floats.AddScaledTo(next, x, -a, y)
		s := floats.Sum(next)
		bad = s-s != 0
	}
	if bad { // checked before any limit: an infinite step must still fail
		if err := c.notFinite(y, next, a); err != nil {
			return err
		}
	}
	limited := false
	if c.maxChange != nil {
		limited = clampChange(next, x, c.maxChange)
	}
	active := false
	if c.proj != nil {
		active = c.proj.Project(next)
		if err := c.checkProjected(next); err != nil {
			return &StepError{Step: c.steps, Err: err}
		}
	}
	if c.maxAbs > 0 {
		for i, v := range next {
			if math.Abs(v) > c.maxAbs {
				return &StepError{Step: c.steps, Err: fmt.Errorf("%w: |x[%d]| = %v exceeds MaxAbs = %v", ErrDiverged, i, math.Abs(v), c.maxAbs)}
			}
		}
	}
	// Ask an adaptive gain about the index before anything is committed:
	// Advance is the caller's code and may panic, and the step must then
	// leave the core as it was.
	advance := c.adapt == nil
	if c.adapt != nil {
		var prev []float64
		if c.hasPrev {
			prev = c.prev
		}
		advance = c.adapt.Advance(y, prev)
	}
	c.commit(next, a, y, active, limited, advance)
	return nil
}

// notFinite returns the error of a step whose update next = x − a·y has a
// non-finite entry: ErrNotFinite naming the first non-finite entry of y,
// or else ErrDiverged (the update overflows). It returns nil when every
// entry of next is finite.
func (c *core) notFinite(y, next []float64, a float64) error {
	for i, yi := range y {
		if math.IsNaN(yi) || math.IsInf(yi, 0) {
			return &StepError{Step: c.steps, Err: fmt.Errorf("%w: Y[%d] = %v", ErrNotFinite, i, yi)}
		}
	}
	for _, v := range next {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return &StepError{Step: c.steps, Err: fmt.Errorf("%w: x − a·Y overflows (a = %v)", ErrDiverged, a)}
		}
	}
	return nil
}

// fusable reports whether a step does nothing with its measurement Y but
// form x − a·Y, check it for finiteness and commit it: no adaptive gain,
// projection, step limit, MaxAbs or trace. Then a finite-sum oracle may
// fuse its measurement with the update (descend).
func (c *core) fusable() bool {
	return c.adapt == nil && c.proj == nil && c.maxChange == nil && c.maxAbs == 0 && c.trace == nil
}

// descend is measure followed by step for a fusable core and a MiniBatch,
// with the same draws and the same iterate, average and error bars bit for
// bit, and the same errors (a measurement error returned as merr, a step
// error as serr). When the MiniBatch hands out the gradient of its one
// sample in factored form (oracle.MiniBatch.MeasureRankOne), the gradient
// is never written out: stepRankOne applies it. y is scratch of length d.
func (c *core) descend(g *oracle.MiniBatch, y []float64, rng *rand.Rand) (merr, serr error) {
	ro, ok, err := g.MeasureRankOne(y, c.x, rng)
	if err != nil {
		return err, nil
	}
	if !ok {
		return nil, c.step(y)
	}
	a := c.gainOf(c.gainIdx)
	if !(a >= 0) || math.IsInf(a, 1) {
		expandRankOne(y, c.x, &ro)
		return nil, c.step(y) // which reports the gain
	}
	if len(y) >= vectorKernelMin {
		return nil, c.stepRankOneLong(&ro, a, y)
	}
	return nil, c.stepRankOne(&ro, a, y)
}

// stepRankOne is step for a fusable core with the measurement Y in
// factored form g (see oracle.RankOne) and a valid gain a, below
// vectorKernelMin coordinates: the same operations in the same order, in
// one pass over x that writes next = x − a·Y, checks it for finiteness
// and, when inference is off and the iterate is averaged, also writes the
// new average into the spare buffer (committed by swapping, so that a
// failed step leaves the average as it was). y is scratch: it receives Y
// only when the step fails, to say why.
func (c *core) stepRankOne(g *oracle.RankOne, a float64, y []float64) error {
	x := c.x
	d := len(x)
	next := c.next[:d]
	fuseAvg := c.inf == nil && c.steps+1 > c.burnIn
	var avg, avgNext []float64
	var w float64
	if fuseAvg {
		avg, avgNext = c.avg[:d], c.avgNext[:d]
		w = 1 / float64(c.nAvg+1)
	}
	if !rankOneUpdate(next, x, g, a, avgNext, avg, w) {
		expandRankOne(y, x, g)
		if err := c.notFinite(y, next, a); err != nil {
			return err
		}
	}
	if fuseAvg {
		c.avg, c.avgNext = avgNext, avg
		c.nAvg++ // counted here, not by advance
	}
	c.advance(next, x, a, fuseAvg)
	return nil
}

// stepRankOneLong is stepRankOne from vectorKernelMin coordinates: Y is
// written out into y and applied by gonum's kernels, which process two
// values per instruction, with the operations of step.
func (c *core) stepRankOneLong(g *oracle.RankOne, a float64, y []float64) error {
	x := c.x
	next := c.next[:len(x)]
	expandRankOne(y, x, g)
	floats.AddScaledTo(next, x, -a, y)
	if s := floats.Sum(next); s-s != 0 {
		if err := c.notFinite(y, next, a); err != nil {
			return err
		}
	}
	c.advance(next, x, a, false)
	return nil
}

// advance is commit for the rank-one steps, whose core has no projection,
// step limit, adaptive gain or trace (TestFusedMatchesPull checks that the
// two leave the core alike): next becomes the iterate (x was the previous
// one) and, unless averaged says the caller has already done so, it is
// added to the average.
func (c *core) advance(next, x []float64, a float64, averaged bool) {
	c.x, c.next = next, x
	c.active, c.limited = false, false
	c.lastGain = a
	c.gainIdx++
	c.steps++
	if !averaged && c.steps > c.burnIn {
		c.average(next, x, a, false)
	}
}

// rankOneUpdate writes next = x − a·Y for Y in factored form g, each
// coordinate rounded as step rounds x_j − a·Y_j with Y_j rounded as
// oracle.RankOne states, and, when avg is not nil, avgNext = avg +
// (next − avg)·w (the averaging of commit). It reports whether every entry
// of next is finite.
func rankOneUpdate(next, x []float64, g *oracle.RankOne, a float64, avgNext, avg []float64, w float64) bool {
	s, row, pen := g.Scale, g.Row, g.Penalty
	bad := false
	off := 0
	if g.Intercept {
		v := x[0] - a*(0+s)
		next[0] = v
		bad = v-v != 0 // NaN exactly when v is ±Inf or NaN
		if avg != nil {
			avgNext[0] = avg[0] + (v-avg[0])*w
		}
		off = 1
	}
	xb, nb := x[off:], next[off:]
	xb, nb = xb[:len(row)], nb[:len(row)]
	switch {
	case avg == nil && pen == 0:
		for j, r := range row {
			v := xb[j] - a*(0+s*r)
			nb[j] = v
			if v-v != 0 { // a branch, not an accumulator: no chain of dependent adds
				bad = true
			}
		}
	case avg == nil:
		for j, r := range row {
			v := xb[j] - a*((0+s*r)+pen*xb[j])
			nb[j] = v
			if v-v != 0 {
				bad = true
			}
		}
	case pen == 0:
		ab, anb := avg[off:], avgNext[off:]
		ab, anb = ab[:len(row)], anb[:len(row)]
		for j, r := range row {
			v := xb[j] - a*(0+s*r)
			nb[j] = v
			if v-v != 0 {
				bad = true
			}
			m := ab[j]
			anb[j] = m + (v-m)*w
		}
	default:
		ab, anb := avg[off:], avgNext[off:]
		ab, anb = ab[:len(row)], anb[:len(row)]
		for j, r := range row {
			v := xb[j] - a*((0+s*r)+pen*xb[j])
			nb[j] = v
			if v-v != 0 {
				bad = true
			}
			m := ab[j]
			anb[j] = m + (v-m)*w
		}
	}
	return !bad
}

// expandRankOne writes the measurement Y of g at x into y (see
// oracle.RankOne), as Measure writes it: into zeros, the row scaled by
// gonum's axpy kernel, then the penalty.
func expandRankOne(y, x []float64, g *oracle.RankOne) {
	clear(y)
	off := 0
	if g.Intercept {
		y[0] += g.Scale
		off = 1
	}
	floats.AddScaled(y[off:], g.Scale, g.Row)
	if g.Penalty != 0 {
		floats.AddScaled(y[off:], g.Penalty, x[off:])
	}
}

// commit makes next (= x − a·y, checked, limited and projected) the
// iterate and updates the counters, the average, the error bars and the
// trace; y is the measurement (read only for an adaptive gain and the
// trace). It cannot fail.
func (c *core) commit(next []float64, a float64, y []float64, active, limited, advance bool) {
	x := c.x
	c.x, c.next = next, x
	switch {
	case active:
		c.projected++
	case c.active && slices.Equal(next, x):
		// A step that did not move the iterate (a zero measurement, or an
		// SPSA perturbation orthogonal to the gradient) leaves it on the
		// boundary where the projection put it.
		active = true
	}
	c.active = active
	c.limited = limited
	c.lastGain = a
	if advance {
		c.gainIdx++
	}
	if c.adapt != nil {
		copy(c.prev, y)
		c.hasPrev = true
	}
	c.steps++
	if c.steps > c.burnIn {
		c.average(next, x, a, active)
	}
	if c.trace != nil {
		c.lastNorm = floats.Norm(y, 2)
		if c.trace.due(c.steps) {
			c.trace.record(c)
		}
	}
}

// average adds the new iterate next (x is the previous one, a the gain of
// the step, active whether the projection put next where it is) to the
// Polyak–Ruppert average and, with inference on, to the batch sums of the
// error bars.
func (c *core) average(next, x []float64, a float64, active bool) {
	c.nAvg++
	w := 1 / float64(c.nAvg)
	avg := c.avg[:len(next)]
	if b := c.inf; b != nil {
		// The batch sums and the slope sums of the noise memory
		// (batchMeans.noteSlope) ride in the averaging loop: one pass.
		b.gain = a
		sum, ref, sq := b.sum[:len(next)], b.ref[:len(next)], b.sq[:len(next)]
		if a > 0 {
			inv := 1 / a
			s0, s1, prev := b.s0[:len(next)], b.s1[:len(next)], x[:len(next)]
			for i, v := range next {
				avg[i] += (v - avg[i]) * w
				y := (v - prev[i]) * inv
				s0[i] += y
				s1[i] += y * (prev[i] - ref[i])
				dv := v - ref[i]
				sum[i] += dv
				sq[i] += dv * dv
			}
		} else {
			for i, v := range next {
				avg[i] += (v - avg[i]) * w
				dv := v - ref[i]
				sum[i] += dv
				sq[i] += dv * dv
			}
		}
		if active {
			b.projected++
		}
		b.tick(avg)
	} else if len(next) >= vectorKernelMin {
		// avg + (next − avg)·w by gonum's kernels, the same
		// operations: next + (−1)·avg = next − avg exactly, and
		// avg + w·t = avg + t·w.
		t := c.avgNext[:len(next)]
		floats.AddScaledTo(t, next, -1, avg)
		floats.AddScaled(avg, w, t)
	} else {
		for i, v := range next {
			avg[i] += (v - avg[i]) * w
		}
	}
}

// configure switches on the inference, the precision stop and the trace
// that the resolved settings s ask for; perCall is the number of
// measurements one step uses. It allocates every buffer they need, so that
// step still allocates nothing. Only the first call has an effect: the
// pull loop calls it, and a driver that configures its core earlier (a
// push tuner) keeps its configuration.
func (c *core) configure(s Settings, perCall int) {
	if c.configured {
		return
	}
	c.configured = true
	c.perCall = max(perCall, 1)
	d := len(c.x)
	// Nothing will be averaged when the burn-in covers the whole step
	// budget; then the error bars (O(d²) memory) are not set up at all.
	nothingAveraged := s.MaxSteps != NoLimit && s.BurnIn >= s.MaxSteps
	switch {
	case !s.Inference.on():
		c.infWhy = "inference is off (Inference.Covariance = CovarianceOff)"
	case c.plan.refuse != "":
		c.infWhy = c.plan.refuse
	case nothingAveraged:
		c.infWhy = fmt.Sprintf("nothing is averaged: the burn-in (Settings.BurnIn = %d) covers the whole step budget (Settings.MaxSteps = %d)", s.BurnIn, s.MaxSteps)
	default:
		c.inf = newBatchMeans(d, s.Inference) // with its random-scaling sums when that is the method
		c.prec = s.Precision
	}
	if s.Trace != nil {
		c.trace = newTrace(d, *s.Trace, s.Inference.Level)
	}
}

// precise reports whether a batch closed on the last step and the error
// bars now meet the precision stop. It costs O(1) on the other steps.
func (c *core) precise() bool {
	b := c.inf
	if c.prec == nil || b == nil || !b.closed {
		return false
	}
	return c.preciseBars()
}

// fill copies the core's state into r.
func (c *core) fill(r *Result) {
	r.X = append(r.X[:0], c.x...)
	if c.nAvg > 0 {
		r.Average = append(r.Average[:0], c.avg...)
	} else {
		r.Average = nil
	}
	r.Averaged = c.nAvg
	r.Steps = c.steps
	r.Active = c.active
	switch {
	case c.inf != nil && c.inf.rs != nil && c.nAvg > 0:
		r.ErrorBars = c.inf.rs.errorBars(c.avg, c.inf.level, c.inf)
	case c.inf != nil && c.nAvg > 0:
		r.ErrorBars = c.inf.errorBars(c.avg, c.nAvg)
	case c.inf != nil:
		r.ErrorBars = ErrorBars{Level: c.inf.level, Assumes: batchMeansAssumes, Why: "no iterate has been averaged yet"}
	case c.infWhy != "":
		r.ErrorBars = ErrorBars{Why: c.infWhy, Deterministic: c.plan.deterministic}
	default:
		r.ErrorBars = ErrorBars{Why: "inference is off (Inference.Covariance = CovarianceOff)"}
	}
	if c.trace != nil {
		r.Trace = c.trace.snapshot(c)
	}
	r.Projected = c.projected
}

// measure takes the measurement y at the current iterate for step k with
// oracle.MeasureStep, after saving a copy of the iterate (see restore). It
// allocates nothing.
func (c *core) measure(ctx context.Context, h oracle.Field, y []float64, rng *rand.Rand) error {
	if !c.trusted {
		copy(c.saved, c.x)
	}
	return oracle.MeasureStep(ctx, h, c.steps, y, c.x, rng)
}

// leavesXAlone reports whether h is one of this module's oracles, which
// never write into the point they are given, so that the copy of x that
// guards against a caller's oracle doing so can be skipped (a d-length
// pass per step).
func leavesXAlone(h oracle.Field) bool {
	switch h.(type) {
	case *oracle.MiniBatch, *oracle.KieferWolfowitz, *oracle.SPSA:
		return true
	}
	return false
}

// restore is called after a measurement or a step failed. If the oracle
// wrote into x (which the contract forbids), it puts back the iterate saved
// by measure, so that the Result holds the last accepted iterate, and, when
// what the oracle wrote is not finite, returns the error that says so
// (wrapping ErrNotFinite), which is the cause of the failure. It returns nil
// when x is as it was.
func (c *core) restore() error {
	if c.trusted {
		return nil
	}
	x, saved := c.x, c.saved[:len(c.x)]
	modified := false
	for i, v := range x {
		if v != saved[i] { // saved is finite: NaN compares unequal
			modified = true
			break
		}
	}
	if !modified {
		return nil
	}
	var err error
	for i, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			err = &StepError{Step: c.steps, Err: fmt.Errorf("%w: the oracle modified x: it wrote x[%d] = %v into the point it was given (an oracle must not write to x)", ErrNotFinite, i, v)}
			break
		}
	}
	copy(x, saved)
	return err
}

// clampChange moves next[i] to within ±m[i] of x[i] and reports whether any
// coordinate moved.
func clampChange(next, x, m []float64) bool {
	limited := false
	m = m[:len(next)]
	x = x[:len(next)]
	for i, v := range next {
		if d := v - x[i]; d > m[i] {
			next[i], limited = x[i]+m[i], true
		} else if d < -m[i] {
			next[i], limited = x[i]-m[i], true
		}
	}
	return limited
}

// override replaces the iterate by x (already validated by the caller) and
// restarts the Polyak–Ruppert average, whose earlier iterates no longer
// describe where the iteration is. The step counter and the gain index are
// kept; the previous measurement of an adaptive gain is forgotten.
func (c *core) override(x []float64) {
	copy(c.x, x)
	clear(c.avg)
	c.nAvg = 0
	c.hasPrev = false
	c.active, c.limited = false, false
}

// coreState is the whole mutable state of a core: with the same gain,
// burn-in, projection and limits, a core restored from it continues exactly
// as the original would have. Slices are copies owned by the state.
type coreState struct {
	X       []float64
	Average []float64 // length d; meaningful when NAvg > 0
	NAvg    int
	Steps   int
	GainIdx int
	Prev    []float64 // previous measurement of an adaptive gain, or nil
	Active  bool
	Limited bool
}

// state returns a copy of the core's state.
func (c *core) state() coreState {
	s := coreState{
		X:       append([]float64(nil), c.x...),
		Average: append([]float64(nil), c.avg[:len(c.x)]...),
		NAvg:    c.nAvg,
		Steps:   c.steps,
		GainIdx: c.gainIdx,
		Active:  c.active,
		Limited: c.limited,
	}
	if c.adapt != nil && c.hasPrev {
		s.Prev = append([]float64(nil), c.prev...)
	}
	return s
}

// setState replaces the core's state by s, which the caller has validated
// (lengths equal to the dimension, finite values, counters ≥ 0, NAvg ≤
// Steps). It allocates nothing.
func (c *core) setState(s coreState) {
	copy(c.x, s.X)
	copy(c.avg, s.Average)
	c.nAvg = s.NAvg
	c.steps = s.Steps
	c.gainIdx = s.GainIdx
	c.hasPrev = false
	if c.adapt != nil && s.Prev != nil {
		copy(c.prev, s.Prev)
		c.hasPrev = true
	}
	c.active, c.limited = s.Active, s.Limited
}

// checkProjected detects a projection that returned a non-finite point or,
// when it can test membership, a point outside its own set.
func (c *core) checkProjected(x []float64) error {
	nan := 0.0
	for _, v := range x {
		nan += v * 0
	}
	if nan != 0 {
		for i, v := range x {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("%w: Π(x)[%d] = %v is not finite", ErrProjection, i, v)
			}
		}
	}
	if c.member != nil && !c.member.Contains(x) {
		return fmt.Errorf("%w: Π(x) is outside the projection's own set (Contains reports false)", ErrProjection)
	}
	return nil
}
