package sa

import (
	"errors"
	"fmt"
	"math"
	"sync"
	"sync/atomic"

	"github.com/stochroot/stochroot/schedule"
)

// DefaultMaxLag is the staleness bound used when TunerSettings.MaxLag is 0.
const DefaultMaxLag = 16

// CurrentOnly, as TunerSettings.MaxLag, applies only reports taken at the
// current version and drops every older one.
const CurrentOnly = -1

// Errors of the push tuner. Restore errors wrap ErrSnapshot (and, for a
// snapshot written by a newer format, ErrSnapshotVersion as well).
var (
	// ErrClosed reports a call that changes a tuner after Close.
	ErrClosed = errors.New("sa: tuner is closed")
	// ErrFutureVersion reports a measurement that claims to be taken at a
	// version the tuner has not published yet: a bug in the caller, which
	// must pass the version returned by Param.
	ErrFutureVersion = errors.New("sa: report for a version not yet published")
	// ErrSnapshot is wrapped by every error of Restore.
	ErrSnapshot = errors.New("sa: unusable snapshot")
	// ErrSnapshotVersion reports a snapshot whose format version this
	// build does not know (written by a newer release).
	ErrSnapshotVersion = errors.New("sa: unknown snapshot format version")
)

// TunerSettings configures a [Tuner]. The zero value of every field except
// Gain is a default stated in the field's comment. NewTuner copies what it
// keeps; later changes to the caller's slices have no effect.
type TunerSettings struct {
	// Gain is the gain sequence a_k. A constant gain (schedule.Constant)
	// tracks a drifting target; a decreasing gain with averaging
	// (schedule.Power, Exponent in (1/2, 1)) converges on a fixed one.
	//
	// # Learned gain (nil Gain)
	//
	// A tuner of dimension 1 may leave Gain nil if it sets MaxChange, the
	// largest move per report the live system tolerates (in the
	// parameter's own units, which its owner knows even when the slope of
	// the response is unknown). The tuner then learns its gain from the
	// reports:
	//
	//   - Warm-up. Each report moves the parameter by a_k·Y_k with
	//     a_k = MaxChange/max|Y| over the reports so far (this one
	//     included), so no move exceeds MaxChange and none is clamped.
	//     Meanwhile the slope s of the field is estimated by least squares
	//     of Y on the parameter each report was taken at (Lai & Robbins
	//     1979, "Adaptive design and stochastic approximation", Ann.
	//     Statist. 7(6): the slope learned from the procedure's own design
	//     points; Venter 1967, "An extension of the Robbins–Monro
	//     procedure", Ann. Math. Statist. 38(1), for learning the slope
	//     during the run). Reports more than 31 versions old count for the
	//     update but not for the slope.
	//   - The warm-up ends once at least LearnedMinReports reports give a
	//     slope ŝ with t = ŝ/SE(ŝ) > LearnedSlopeT. That takes a few dozen
	//     reports when the start is far from the target; from a start near
	//     it (or for a quantile, whose slope, the density at the quantile,
	//     shows only through the parameter's own wobble) it can take
	//     thousands (15 000 requests in examples/timeouttuner), all of them
	//     at the warm-up gain. With Memory = 0 the
	//     gain then decreases, a_k = (1/ŝ)/(j+1)^0.7 (j steps since the
	//     warm-up, ŝ the latest clear estimate), the Polyak–Ruppert average
	//     restarts (so the warm-up is not in it; BurnIn still applies from
	//     step 0), and the average converges on a fixed target with the
	//     optimal variance whatever the error in ŝ (Polyak & Juditsky 1992,
	//     Theorem 2). With Memory = M > 0 the gain stays constant,
	//     a = 1/(ŝ·M): the parameter follows a drifting target with a time
	//     constant of about M reports, and the slope estimate forgets with
	//     a window of 100·M reports.
	//   - After the warm-up too the gain never exceeds the warm-up gain
	//     MaxChange/max|Y|, so no move exceeds MaxChange and none is
	//     clamped (clamped moves would bias the iterate: for P = 0.99 a
	//     miss cut short against hits at full size settles at another
	//     quantile). MaxChange is therefore also the largest gain the tuner
	//     may use: set it to the largest move the system tolerates, not
	//     smaller, or the tuner is slow. One outlying |Y| lowers that bound
	//     for good. The Projection still applies.
	//   - A slope that comes out clearly negative (t < −LearnedSlopeT)
	//     means the sign convention of Y is reversed: the tuner refuses
	//     every later report with ErrSlopeSign and does not move.
	//
	// Tuner.LearnedGain shows the slope, the phase and the gain in use,
	// and the snapshot carries the learner's state. The cautions of a live
	// system hold as for a set gain: bound the parameter with a Box, watch
	// it (OnUpdate, LearnedGain), and keep a manual override (Freeze,
	// Override). A nil Gain is refused for dimension > 1: the gain would
	// need the d×d Jacobian, and reports taken at the system's own
	// parameters move mostly along its slowest directions, so a regression
	// cannot resolve the Jacobian without deliberate perturbations of the
	// live system; set the gain there.
	Gain schedule.Schedule

	// Inference configures the error bars of the Polyak–Ruppert average
	// (Tuner.ErrorBars): Level (0.90, 0.95 or 0.99; 0 means 0.95) and
	// Covariance (CovarianceOff switches them off). Method is ignored: a
	// tuner always uses random scaling (see Tuner.ErrorBars for why).
	Inference Inference

	// Memory applies to a learned gain (nil Gain) only: 0 makes the gain
	// decrease after the warm-up (a fixed target), M > 0 keeps it at
	// 1/(ŝ·M) (a target that drifts; a time constant of about M reports).
	Memory int

	// Projection, if not nil, is applied after every update and bounds the
	// published parameter; use a Box. A live system should always have
	// one. The starting point and overrides must lie inside it.
	Projection Projection

	// MaxChange, if not nil, has one entry per coordinate and bounds every
	// update: |x_{k+1,i} − x_{k,i}| ≤ MaxChange[i], applied before the
	// projection. Entries must be > 0 (math.Inf(1) for no limit on that
	// coordinate). nil means no limit.
	MaxChange []float64

	// MaxLag is the staleness rule: a report taken at version v is applied
	// when the current version c satisfies c − v ≤ MaxLag (and no override
	// or restore happened after v), and dropped otherwise. 0 means
	// DefaultMaxLag; CurrentOnly applies only reports at the current
	// version.
	MaxLag int

	// BurnIn is the number of updates left out of the Polyak–Ruppert
	// average (see Settings.BurnIn). 0 averages from the first update.
	BurnIn int

	// MaxAbs, if > 0, rejects an update that would give |x_i| > MaxAbs
	// (with ErrDiverged; the parameter stays). 0 checks only finiteness.
	MaxAbs float64

	// OnUpdate, if not nil, is called after every change of the published
	// parameter (update, override, restore), in version order, on the
	// goroutine that caused it and while the tuner's update lock is held.
	// It must be quick (count, copy, hand off to a channel with a default
	// case) and must not call methods of the tuner other than Param and
	// Param1. The slices in Update are valid only during the call. Readers
	// of the parameter never wait for it. If it panics, the change it was
	// told about stands, the lock is released and the panic reaches the
	// caller of the method that made the change.
	OnUpdate func(u Update)
}

// resolve validates s for dimension d and returns the copy with defaults
// filled in and the caller's slices copied.
func (s TunerSettings) resolve(d int) (TunerSettings, error) {
	if s.Memory < 0 {
		return s, settingsErr("TunerSettings.Memory = %d: must be ≥ 0", s.Memory)
	}
	if s.Gain == nil {
		if d != 1 {
			return s, settingsErr("TunerSettings.Gain is nil at dimension %d: a learned gain is offered for dimension 1 only (it would need the %d×%d Jacobian, which reports taken at the system's own parameters do not resolve without deliberate perturbations of the live system); set a gain, for example schedule.Constant(0.05)", d, d, d)
		}
		if s.MaxChange == nil {
			return s, settingsErr("TunerSettings.Gain is nil and MaxChange is nil: a learned gain needs MaxChange, the largest move per report the system tolerates, to bound its warm-up")
		}
	} else if s.Memory != 0 {
		return s, settingsErr("TunerSettings.Memory = %d with a Gain set: Memory applies to a learned gain (nil Gain) only", s.Memory)
	}
	if v, ok := s.Gain.(schedule.Validator); ok {
		if err := v.Validate(); err != nil {
			return s, settingsErr("TunerSettings.Gain: %v", err)
		}
	}
	if s.MaxLag < 0 && s.MaxLag != CurrentOnly {
		return s, settingsErr("TunerSettings.MaxLag = %d: must be ≥ 0 or CurrentOnly", s.MaxLag)
	}
	if s.MaxLag == 0 {
		s.MaxLag = DefaultMaxLag
	}
	if s.BurnIn < 0 {
		return s, settingsErr("TunerSettings.BurnIn = %d: must be ≥ 0", s.BurnIn)
	}
	if !(s.MaxAbs >= 0) || math.IsInf(s.MaxAbs, 0) {
		return s, settingsErr("TunerSettings.MaxAbs = %v: must be finite and ≥ 0", s.MaxAbs)
	}
	if s.MaxChange != nil {
		if len(s.MaxChange) != d {
			return s, fmt.Errorf("%w: TunerSettings.MaxChange has %d entries for dimension %d", ErrDimension, len(s.MaxChange), d)
		}
		for i, m := range s.MaxChange {
			if !(m > 0) {
				return s, settingsErr("TunerSettings.MaxChange[%d] = %v: must be > 0 (math.Inf(1) for no limit)", i, m)
			}
		}
		s.MaxChange = append([]float64(nil), s.MaxChange...)
		if s.Gain == nil && math.IsInf(s.MaxChange[0], 1) {
			return s, settingsErr("TunerSettings.Gain is nil and MaxChange[0] = +Inf: a learned gain needs a finite MaxChange to bound its warm-up")
		}
	}
	// The projections of this package are copied (a pointer to one is
	// replaced by a copy of its value), so that the caller's slices do not
	// move the constraint later. A caller's own Projection is kept as given.
	switch p := s.Projection.(type) {
	case *Box:
		if p == nil {
			return s, settingsErr("TunerSettings.Projection is a nil *Box")
		}
		s.Projection = *p
	case *Ball:
		if p == nil {
			return s, settingsErr("TunerSettings.Projection is a nil *Ball")
		}
		s.Projection = *p
	}
	switch p := s.Projection.(type) {
	case Box:
		s.Projection = Box{Lower: append([]float64(nil), p.Lower...), Upper: append([]float64(nil), p.Upper...)}
	case Ball:
		s.Projection = Ball{Center: append([]float64(nil), p.Center...), Radius: p.Radius}
	}
	if v, ok := s.Projection.(validator); ok {
		if err := v.validate(d); err != nil {
			return s, err
		}
	}
	return s, nil
}

// Outcome says what a report did.
type Outcome int

const (
	// Rejected: the report was refused with an error (non-finite or
	// wrong-length measurement, future version, closed tuner, an update
	// the core could not apply). The parameter is unchanged.
	Rejected Outcome = iota
	// Applied: the measurement updated the parameter.
	Applied
	// Stale: dropped under the staleness rule (TunerSettings.MaxLag).
	Stale
	// Frozen: dropped because the tuner is frozen.
	Frozen
)

var outcomeNames = [...]string{Rejected: "rejected", Applied: "applied", Stale: "stale", Frozen: "frozen"}

// String returns the outcome's name.
func (o Outcome) String() string {
	if o >= 0 && int(o) < len(outcomeNames) {
		return outcomeNames[o]
	}
	return "unknown outcome"
}

// UpdateKind says what changed the parameter in an [Update].
type UpdateKind int

const (
	// StepUpdate: a reported measurement was applied.
	StepUpdate UpdateKind = iota + 1
	// OverrideUpdate: Override set the parameter.
	OverrideUpdate
	// RestoreUpdate: Restore replaced the state.
	RestoreUpdate
)

// Update describes one change of the parameter, for
// TunerSettings.OnUpdate.
type Update struct {
	Kind    UpdateKind // what changed the parameter
	Version uint64     // version published by this change
	Step    int        // k of the update (StepUpdate); updates applied so far otherwise
	Gain    float64    // a_k used (StepUpdate)
	Lag     uint64     // current version minus the report's version before the update (StepUpdate)
	X       []float64  // the new parameter; valid only during the call
	Y       []float64  // the measurement (StepUpdate); valid only during the call
	Active  bool       // the projection moved the new parameter
	Limited bool       // MaxChange cut the update
}

// TunerStats counts what a tuner did with the reports it received. Every
// call of Report lands in exactly one of the report counters, so
// Applied+Stale+Frozen+NotFinite+Future+Failed+AfterClose is the number of
// reports sent. Each counter stops at MaxSnapshotCount (2⁵³, 9·10¹⁵ calls),
// and Report refuses updates once Steps reaches it (the update would have
// no gain index that a snapshot can hold), so a tuner's own snapshot always
// restores.
type TunerStats struct {
	Version uint64 // current published version
	Steps   int    // updates applied by the core (k of the next update)

	Applied    uint64 // reports that updated the parameter
	Stale      uint64 // dropped under the staleness rule
	Frozen     uint64 // dropped while frozen
	NotFinite  uint64 // rejected: NaN or ±Inf entry
	Future     uint64 // rejected: version not yet published
	Failed     uint64 // rejected: wrong length, or the core refused the update (ErrDiverged, ErrGain)
	AfterClose uint64 // rejected: tuner closed

	Overrides uint64 // calls of Override that set the parameter
	Restores  uint64 // calls of Restore that replaced the state
}

// count1 adds 1 to a counter of TunerStats unless it has reached
// MaxSnapshotCount, where it stays: a tuner's counters never leave the range
// that Restore accepts.
func count1(c *uint64) {
	if *c < MaxSnapshotCount {
		*c++
	}
}

// Dropped returns Stale + Frozen.
func (s TunerStats) Dropped() uint64 { return s.Stale + s.Frozen }

// Reports returns the number of calls of Report counted.
func (s TunerStats) Reports() uint64 {
	return s.Applied + s.Stale + s.Frozen + s.NotFinite + s.Future + s.Failed + s.AfterClose
}

// ring is the number of published versions kept; a power of two. A reader
// retries only if the tuner publishes ring−1 versions while it copies one.
const (
	ring     = 8
	ringMask = ring - 1
)

// Tuner is a push-style stochastic-approximation tuner for a live system.
// The system reads the current parameter with Param (lock-free, no
// allocation), runs with it, and reports each measurement Y it observed,
// together with the version it read, to Report; the tuner applies the
// update of the shared core,
//
//	x_{k+1} = Π( clamp_{±MaxChange}( x_k − a_k·Y_k ) ),
//
// keeps the Polyak–Ruppert average, and publishes x_{k+1} as the next
// version. Y follows the gradient sign convention: it should be positive
// when the parameter is too high (see QuantileTuner and SetpointTuner for
// the two common cases).
//
// # Versions and staleness
//
// Every change of the parameter publishes a new version (0 is the starting
// point). A measurement taken at version v arrives while the tuner is at
// version c ≥ v. It is applied (with a delay of c − v updates) when
// c − v ≤ MaxLag and no Override or Restore happened after v; otherwise it
// is dropped and counted as Stale. Bounded delays keep the recursion's
// limit: the delayed terms differ from the current ones by at most MaxLag
// gain-sized steps (Kushner & Yin 2003, "Stochastic Approximation and
// Recursive Algorithms and Applications", 2nd ed., Springer, ch. 12 on
// delayed and asynchronous measurements; from memory). A version from the
// future (v > c) is a caller bug and is rejected with ErrFutureVersion.
//
// # Publication
//
// Published values live in a ring of 8 preallocated slots; publication p
// (counted from 0) goes to slot p mod 8. The writer stores the d values
// into their slot (atomically, number by number) and then stores one word
// that holds both the version and the slot number (version·8 + slot). A
// reader loads that word, copies the slot, and loads the word again: if
// the version has grown by less than 7, fewer than 7 publications have
// happened since (each raises the version by at least 1), and the writer
// rewrites a slot only at the 8th publication after it (Go's atomic
// operations are sequentially consistent), so the copy is exactly what
// was published; otherwise the reader starts over. Publishing costs d+1
// atomic stores and no allocation (an atomic pointer to a fresh immutable
// value would allocate once per update, and a reused buffer written
// without atomics would race with a slow reader), readers never block the
// writer or each other, and a reader retries only when the version grows
// by 7 while it copies d numbers.
//
// While reports queue up for the update lock, the tuner publishes once
// per queue rather than once per update: a report that finds others
// waiting leaves the publication to the last of them (every report that
// leaves the lock publishes if nobody is waiting). A reader can then see
// a parameter some updates old — at most as many as there were reports
// in the queue — together with its own version, so the staleness rule
// still measures the true lag; the hook (OnUpdate) still sees every
// update. A lone reporter publishes every update.
//
// # Gain, error bars and tracking noise
//
// A tuner of dimension 1 may learn its gain (nil TunerSettings.Gain; see
// there for the warm-up, the bound on every move and LearnedGain).
// ErrorBars gives an interval for the Polyak–Ruppert average where the
// package's coverage check backs it (a hand-set decreasing gain on a Tuner
// or SetpointTuner), and says why not elsewhere; TrackingNoise gives the
// stationary spread of the parameter under a constant gain.
//
// # Concurrency
//
// All methods are safe for concurrent use. Param and Param1 take no lock.
// Report, Override, Restore, Freeze, Resume, Close, Snapshot, Average,
// Stats, ErrorBars, TrackingNoise and LearnedGain serialise on one mutex: updates are sequential by nature, each
// starting from the last, and the critical section is a few dozen
// nanoseconds for a small dimension.
type Tuner struct {
	d      int
	stride int // distance between slots in vals (cache-line multiple)

	cur  atomic.Uint64   // version·8 + slot of the current publication (see Publication)
	vals []atomic.Uint64 // ring slots of stride numbers: Float64bits of the values

	waiting atomic.Int32 // reports waiting for mu (see Publication)

	mu      sync.Mutex
	pubs    uint64 // number of the last publication, written under mu
	pending bool   // version has not been published yet
	c       *core
	set     TunerSettings
	maxLag  uint64
	ybuf    []float64
	version uint64 // current version (published unless pending), written under mu
	barrier uint64 // reports before this version are stale
	frozen  bool
	closed  bool
	stats   TunerStats
	learn   *learner // learned gain (nil Gain), or nil

	bars      *tunerBars  // error bars of the average
	track     *trackNoise // tracking noise (constant gains), or nil
	trackWhy  string      // why track is nil
	trackSkip int         // reports since the last one track read
}

// NewTuner returns a tuner that starts at x0 (copied) with version 0. It
// returns an error wrapping ErrDimension for an empty x0, ErrSettings for
// invalid settings (naming the field) or a non-finite x0, and
// ErrOutOfBounds when x0 lies outside the projection or beyond MaxAbs: the
// rule for starting points of the pull drivers (RobbinsMonro and the
// others).
func NewTuner(x0 []float64, s TunerSettings) (*Tuner, error) {
	d := len(x0)
	if d == 0 {
		return nil, fmt.Errorf("%w: starting point has dimension 0", ErrDimension)
	}
	rs, err := s.resolve(d)
	if err != nil {
		return nil, err
	}
	if err := checkInside("x0", x0, rs.Projection, rs.MaxAbs, ErrSettings); err != nil {
		return nil, err
	}
	gain := rs.Gain
	var learn *learner
	if gain == nil {
		learn = newLearner(rs.MaxChange[0], rs.Memory)
		gain = learn
	}
	t := &Tuner{
		d:      d,
		stride: (d + 7) &^ 7,
		c:      newCore(x0, gain, rs.BurnIn, rs.Projection, rs.MaxAbs),
		set:    rs,
		ybuf:   make([]float64, d),
		learn:  learn,
		pubs:   ^uint64(0), // the first publication is number 0
	}
	if t.bars, err = newTunerBars(d, rs, learn != nil); err != nil {
		return nil, err
	}
	if learn != nil && rs.Memory == 0 {
		t.bars.refuse(learnedBarsRefused)
	}
	_, constant := rs.Gain.(schedule.Constant)
	switch {
	case constant || (learn != nil && rs.Memory > 0):
		t.track = newTrackNoise(d)
	case learn != nil:
		t.trackWhy = "the learned gain decreases (TunerSettings.Memory = 0): the parameter converges rather than tracks; ErrorBars describe the average"
	default:
		t.trackWhy = "the gain is not constant (schedule.Constant, or a learned gain with Memory > 0): ErrorBars describe the average of a decreasing gain"
	}
	t.c.maxChange = rs.MaxChange
	if rs.MaxLag != CurrentOnly {
		t.maxLag = uint64(rs.MaxLag)
	}
	t.vals = make([]atomic.Uint64, ring*t.stride)
	t.publish()
	return t, nil
}

// publish stores the core's iterate with its version t.version as the
// next publication. Called with mu held (or before the tuner is shared,
// for the first publication, number 0).
func (t *Tuner) publish() {
	v := t.version
	p := t.pubs + 1
	slot := t.vals[int(p&ringMask)*t.stride:][:t.d]
	for j, x := range t.c.x {
		slot[j].Store(math.Float64bits(x))
	}
	t.cur.Store(v<<3 | p&ringMask)
	t.pubs = p
	t.pending = false
	if t.learn != nil {
		t.learn.remember(v, t.c.x[0])
	}
}

// lockReport takes the update lock for Report, counting the report as
// waiting while the lock is busy (see Publication).
func (t *Tuner) lockReport() {
	if t.mu.TryLock() {
		return
	}
	t.waiting.Add(1)
	t.mu.Lock()
	t.waiting.Add(-1)
}

// unlockReport publishes a pending update unless other reports wait for
// the lock (the last of them publishes), and releases the lock.
func (t *Tuner) unlockReport() {
	if t.pending && t.waiting.Load() == 0 {
		t.publish()
	}
	t.mu.Unlock()
}

// The word holds the version in its upper 61 bits: a tuner would need
// 2⁶¹ changes (73 years at 10⁹ a second) to overflow it, and its step
// counter stops at MaxSnapshotCount = 2⁵³ long before.
//
// fresh reports whether a copy of the slot published with the word c,
// made before loading now as the current word, is exactly what was
// published (see Publication).
func fresh(c, now uint64) bool { return now>>3-c>>3 < ring-1 }

// Dim returns the dimension of the parameter.
func (t *Tuner) Dim() int { return t.d }

// Param copies the current parameter into dst and returns its version,
// which the caller passes back to Report with the measurement taken at
// this parameter. It takes no lock and allocates nothing. It panics if
// len(dst) != Dim().
func (t *Tuner) Param(dst []float64) (version uint64) {
	if len(dst) != t.d {
		panic("sa: Tuner.Param: len(dst) differs from the tuner's dimension")
	}
	for {
		c := t.cur.Load()
		slot := t.vals[int(c&ringMask)*t.stride:][:t.d]
		for j := range dst {
			dst[j] = math.Float64frombits(slot[j].Load())
		}
		if fresh(c, t.cur.Load()) {
			return c >> 3
		}
	}
}

// Param1 returns the current parameter of a one-dimensional tuner and its
// version. It takes no lock and allocates nothing. It panics if Dim() != 1.
func (t *Tuner) Param1() (x float64, version uint64) {
	if t.d != 1 {
		panic("sa: Tuner.Param1 on a tuner of dimension other than 1")
	}
	for {
		c := t.cur.Load()
		x = math.Float64frombits(t.vals[int(c&ringMask)*t.stride].Load())
		if fresh(c, t.cur.Load()) {
			return x, c >> 3
		}
	}
}

// Report hands the tuner a measurement y taken while the system ran with
// the parameter of the given version (as returned by Param). y is copied;
// the caller may reuse it at once. Report allocates nothing unless it
// returns an error.
//
// The checks run in this order, and the first that fails decides the
// outcome (and the counter in Stats): closed tuner (Rejected, ErrClosed),
// len(y) != Dim() (Rejected, ErrDimension), a NaN or ±Inf entry (Rejected,
// ErrNotFinite), a version not yet published (Rejected, ErrFutureVersion),
// the staleness rule (Stale, nil), frozen (Frozen, nil), and finally the
// update itself (Applied, nil; or Rejected with the core's *StepError,
// e.g. ErrDiverged). Whenever the outcome is not Applied the parameter is
// unchanged.
//
// Panics in the caller's code pass through Report and never leave the
// tuner locked. A panic in the gain schedule (e.g. a schedule.Func), in
// the projection or in an adaptive gain's Advance comes before anything
// changes: the report is not applied and is counted as Failed. A panic in
// the OnUpdate hook comes after the update: the update stands (published
// and counted as Applied) and the panic reaches the caller.
func (t *Tuner) Report(version uint64, y []float64) (Outcome, error) {
	t.lockReport()
	defer t.unlockReport()
	if t.closed {
		count1(&t.stats.AfterClose)
		return Rejected, ErrClosed
	}
	if len(y) != t.d {
		count1(&t.stats.Failed)
		return Rejected, fmt.Errorf("%w: measurement has length %d, tuner dimension %d", ErrDimension, len(y), t.d)
	}
	for i, v := range y {
		if v-v != 0 { // NaN or ±Inf
			count1(&t.stats.NotFinite)
			return Rejected, fmt.Errorf("%w: Y[%d] = %v (version %d)", ErrNotFinite, i, v, version)
		}
	}
	if version > t.version {
		count1(&t.stats.Future)
		return Rejected, fmt.Errorf("%w: version %d, current %d", ErrFutureVersion, version, t.version)
	}
	lag := t.version - version
	if version < t.barrier || lag > t.maxLag {
		count1(&t.stats.Stale)
		return Stale, nil
	}
	if t.frozen {
		count1(&t.stats.Frozen)
		return Frozen, nil
	}
	k := t.c.steps
	if k >= MaxSnapshotCount {
		count1(&t.stats.Failed)
		return Rejected, &StepError{Step: k, Err: fmt.Errorf("%w: the step counter has reached MaxSnapshotCount = 2⁵³, past which no gain is defined; restore a snapshot with fewer steps or build a new tuner", ErrGain)}
	}
	if l := t.learn; l != nil {
		if err := l.prepare(version, y[0], k); err != nil {
			count1(&t.stats.Failed)
			return Rejected, &StepError{Step: k, Err: err}
		}
	}
	copy(t.ybuf, y)
	bars := t.bars.bm != nil
	nAvg, projected := t.c.nAvg, t.c.projected
	if err := t.step(); err != nil {
		if errors.Is(err, ErrNotFinite) {
			count1(&t.stats.NotFinite)
		} else {
			count1(&t.stats.Failed)
		}
		return Rejected, err
	}
	if bars {
		t.bars.after(t.c, t.c.nAvg != nAvg, t.c.projected != projected)
	}
	if l := t.learn; l != nil {
		l.commit(k)
		if l.pendingSwitch {
			t.warmUpEnded()
		}
	}
	if t.track != nil {
		if t.trackSkip++; t.trackSkip == TrackingStride {
			t.trackSkip = 0
			t.track.add(t.c.x)
		}
	}
	t.version++
	t.pending = true
	if t.waiting.Load() == 0 {
		t.publish() // before the hook, which may call Param
	}
	t.stats.Applied++
	if h := t.set.OnUpdate; h != nil {
		h(Update{
			Kind: StepUpdate, Version: t.version, Step: k, Gain: t.c.lastGain, Lag: lag,
			X: t.c.x, Y: t.ybuf, Active: t.c.active, Limited: t.c.limited,
		})
	}
	return Applied, nil
}

// step applies the update with the measurement in ybuf; mu is held. A
// panic in the caller's code that the core runs (the gain, the projection,
// an adaptive gain's Advance) happens before the core commits anything (see
// core.step), so the report is not applied: it is counted as Failed and
// the panic goes on to Report's caller, which releases the lock on the way.
//
// The count is taken before the step and given back after it returns, so
// that no deferred call is needed on the hot path (a panic skips the give
// back); a counter already at its cap is left alone.
func (t *Tuner) step() error {
	capped := t.stats.Failed >= MaxSnapshotCount
	if !capped {
		t.stats.Failed++
	}
	err := t.c.step(t.ybuf)
	if !capped {
		t.stats.Failed--
	}
	return err
}

// Report1 is Report for a one-dimensional tuner with the measurement y.
func (t *Tuner) Report1(version uint64, y float64) (Outcome, error) {
	b := [1]float64{y}
	return t.Report(version, b[:])
}

// Override sets the parameter to x (copied), publishes it as a new version
// and restarts the Polyak–Ruppert average. Reports taken before the
// override are dropped as stale: they describe another parameter. The step
// counter and the gain index continue; a frozen tuner stays frozen, so
// Freeze followed by Override pins the parameter. x must be finite and
// inside the bounds (ErrNotFinite, ErrOutOfBounds, by the same rule as a
// starting point except that a non-finite value is ErrNotFinite); a wrong
// length is ErrDimension; it is ErrClosed after Close. On error nothing
// changes. A panic in the projection (checking x) changes nothing; a panic
// in the OnUpdate hook comes after the override, which stands.
func (t *Tuner) Override(x []float64) error {
	if len(x) != t.d {
		return fmt.Errorf("%w: override has length %d, tuner dimension %d", ErrDimension, len(x), t.d)
	}
	t.mu.Lock()
	defer t.mu.Unlock()
	if t.closed {
		return ErrClosed
	}
	// Under the lock: the caller's projection is never run concurrently
	// with itself by the tuner.
	if err := checkInside("override", x, t.set.Projection, t.set.MaxAbs, ErrNotFinite); err != nil {
		return err
	}
	t.c.override(x)
	t.bars.averageRestarted()
	if t.track != nil {
		t.track.restart()
		t.trackSkip = 0
	}
	t.version++
	t.barrier = t.version
	t.publish()
	count1(&t.stats.Overrides)
	t.notify(OverrideUpdate)
	return nil
}

// notify calls the hook for a change other than a step; mu is held.
func (t *Tuner) notify(kind UpdateKind) {
	if h := t.set.OnUpdate; h != nil {
		h(Update{Kind: kind, Version: t.version, Step: t.c.steps, X: t.c.x, Active: t.c.active, Limited: t.c.limited})
	}
}

// Freeze stops updates: reports are dropped and counted as Frozen until
// Resume. The parameter stays readable and Override still works.
func (t *Tuner) Freeze() {
	t.mu.Lock()
	defer t.mu.Unlock()
	t.frozen = true
}

// Resume undoes Freeze.
func (t *Tuner) Resume() {
	t.mu.Lock()
	defer t.mu.Unlock()
	t.frozen = false
}

// IsFrozen reports whether the tuner is frozen.
func (t *Tuner) IsFrozen() bool {
	t.mu.Lock()
	defer t.mu.Unlock()
	return t.frozen
}

// Close ends tuning: later calls of Report, Override and Restore return
// ErrClosed. Param, Snapshot, Average and Stats keep working, so the
// system can go on running with the last parameter. Close is idempotent
// and always returns nil.
func (t *Tuner) Close() error {
	t.mu.Lock()
	defer t.mu.Unlock()
	t.closed = true
	return nil
}

// Average copies the Polyak–Ruppert average of the parameter into dst and
// returns how many iterates it holds; with none yet (0 returned) it copies
// the current parameter. It panics if len(dst) != Dim().
func (t *Tuner) Average(dst []float64) int {
	if len(dst) != t.d {
		panic("sa: Tuner.Average: len(dst) differs from the tuner's dimension")
	}
	t.mu.Lock()
	defer t.mu.Unlock()
	if t.c.nAvg == 0 {
		copy(dst, t.c.x)
		return 0
	}
	copy(dst, t.c.avg)
	return t.c.nAvg
}

// Stats returns the tuner's counters.
func (t *Tuner) Stats() TunerStats {
	t.mu.Lock()
	defer t.mu.Unlock()
	s := t.stats
	s.Version = t.version
	s.Steps = t.c.steps
	return s
}
