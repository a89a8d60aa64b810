package sa

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
)

// SnapshotFormat is the format version written by Tuner.Snapshot. Restore
// accepts this version only; a larger one is from a newer release and is
// refused with ErrSnapshotVersion.
const SnapshotFormat = 1

// MaxSnapshotCount is the largest counter (steps, averaged, gain index and
// each report counter) that Restore accepts: 2⁵³, the range in which every
// integer is also exact as a float64 in other JSON readers. A tuner reaches
// it after 9·10¹⁵ reports (104 days at 10⁹ reports a second); its counters
// stop there and its updates are refused (see TunerStats), and a larger
// value in a snapshot is taken as corrupt (a step counter near math.MaxInt
// would overflow on the next updates).
const MaxSnapshotCount = 1 << 53

// Limits behind MaxSnapshotBytes. The longest encoding of a float64 that
// encoding/json writes is 25 bytes ("-0.0000012345678901234567": 17
// significant digits in fixed notation below 10⁻⁵; the exponent form
// "-1.2345678901234567e-308" has 24), so 64 bytes a number leave room for
// the separator and an indented layout. The fixed fields (14 integers of
// at most 20 digits, three booleans and the names) take under 700 bytes,
// and the learned_gain object of a learned gain (8 numbers, 1 integer, 2
// booleans and their names) under 450 more.
const (
	snapshotHeaderBytes = 4096
	snapshotNumberBytes = 64
	snapshotArrays      = 3 // x, average, previous_measurement
)

// MaxSnapshotBytes returns the size of the largest snapshot that Restore
// reads for a tuner of dimension d: a fixed allowance of 4096 bytes for the
// fixed fields plus 3·64 bytes per coordinate (three arrays of d numbers,
// each number at most 25 bytes as encoding/json writes it, plus separators
// and indentation). A snapshot written by Snapshot, indented or not, is far
// below it. Restore refuses a larger input before parsing anything, so the
// work of rejecting a malicious or corrupt snapshot is bounded by the
// tuner's dimension, not by the input.
func MaxSnapshotBytes(d int) int {
	d = max(d, 0)
	const per = snapshotArrays * snapshotNumberBytes
	if d > (math.MaxInt-snapshotHeaderBytes)/per {
		return math.MaxInt
	}
	return snapshotHeaderBytes + per*d
}

// Field names of the snapshot object. Every field is required except
// previous_measurement, which is present exactly when the tuner's gain is
// adaptive and has a previous measurement, and learned_gain, which is
// present exactly when the tuner learns its gain (nil TunerSettings.Gain).
var (
	snapshotFields = []string{
		"format", "dim", "version", "x", "average", "averaged", "steps", "gain_index",
		"previous_measurement", "active", "limited", "frozen", "counts", "learned_gain",
	}
	snapshotCountFields = []string{
		"applied", "stale", "frozen", "not_finite", "future", "failed", "after_close", "overrides", "restores",
	}
)

// snapshot is the JSON form of a tuner's state, as Snapshot writes it.
type snapshot struct {
	Format    int              `json:"format"`
	Dim       int              `json:"dim"`
	Version   uint64           `json:"version"`
	X         []float64        `json:"x"`
	Average   []float64        `json:"average"`
	Averaged  int              `json:"averaged"`
	Steps     int              `json:"steps"`
	GainIndex int              `json:"gain_index"`
	PrevY     []float64        `json:"previous_measurement,omitempty"`
	Active    bool             `json:"active"`
	Limited   bool             `json:"limited"`
	Frozen    bool             `json:"frozen"`
	Counts    snapshotCount    `json:"counts"`
	Learned   *snapshotLearned `json:"learned_gain,omitempty"`
}

type snapshotCount struct {
	Applied    uint64 `json:"applied"`
	Stale      uint64 `json:"stale"`
	Frozen     uint64 `json:"frozen"`
	NotFinite  uint64 `json:"not_finite"`
	Future     uint64 `json:"future"`
	Failed     uint64 `json:"failed"`
	AfterClose uint64 `json:"after_close"`
	Overrides  uint64 `json:"overrides"`
	Restores   uint64 `json:"restores"`
}

// Snapshot returns the whole state of the tuner as JSON: format version,
// dimension, published version (for logs), parameter, Polyak–Ruppert average, step
// counter and gain index (and the last measurement of an adaptive gain),
// the frozen flag and the counters, and for a learned gain (nil
// TunerSettings.Gain) the learner's state: the least-squares sums, the
// largest |Y|, the phase and the slope in use. The error bars' and the
// tracking noise's state are not in it (see Tuner.ErrorBars). Settings are not part of it: they come
// from the code that builds the tuner. A tuner built with the same settings
// and restored from the snapshot continues exactly as this one would.
func (t *Tuner) Snapshot() ([]byte, error) {
	return json.Marshal(t.snapshot())
}

func (t *Tuner) snapshot() snapshot {
	t.mu.Lock()
	defer t.mu.Unlock()
	st := t.c.state()
	s := t.stats
	return snapshot{
		Format: SnapshotFormat, Dim: t.d, Version: t.version,
		X: st.X, Average: st.Average, Averaged: st.NAvg, Steps: st.Steps, GainIndex: st.GainIdx,
		PrevY: st.Prev, Active: st.Active, Limited: st.Limited, Frozen: t.frozen,
		Counts: snapshotCount{
			Applied: s.Applied, Stale: s.Stale, Frozen: s.Frozen, NotFinite: s.NotFinite,
			Future: s.Future, Failed: s.Failed, AfterClose: s.AfterClose,
			Overrides: s.Overrides, Restores: s.Restores,
		},
		Learned: t.learn.snapshot(),
	}
}

// Restore replaces the tuner's state by the one in a snapshot written by
// Snapshot (of this tuner or of another with the same settings, e.g.
// before a restart), including the frozen flag and the counters. The
// restored parameter is published as this tuner's next version (the
// snapshot's version is informational: versions order the reads and
// reports of one process), and reports taken before the restore are
// dropped as stale.
//
// The snapshot is checked completely before anything changes, and every
// error wraps ErrSnapshot (and ErrDimension, ErrOutOfBounds or
// ErrSnapshotVersion where they apply); the tuner is then left exactly as it
// was. Input longer than MaxSnapshotBytes(Dim()) is refused before it is
// parsed. The JSON must be one object with exactly the fields Snapshot
// writes, each once, none null, nothing after it. Restore refuses a
// snapshot that the live tuner could not have reached:
//   - another dimension, or arrays of another length;
//   - a counter below 0 or above MaxSnapshotCount (the version, which is
//     informational, may be any uint64); steps other than the
//     applied count; averaged > max(0, steps − BurnIn); a gain index other
//     than steps for a non-adaptive gain, or above steps for an adaptive
//     one; a previous measurement without an adaptive gain or before any
//     step; a nonzero average with nothing averaged; active without a
//     projection or limited without MaxChange (or either before any step);
//   - a parameter that is not finite, beyond MaxAbs or outside the
//     projection's set (the rule of Override, wrapped in ErrSnapshot);
//   - an average beyond MaxAbs or, for a Box or Ball (convex sets, which
//     hold the mean of their points), outside the set, beyond a relative
//     rounding slack of 10⁻¹²;
//   - a learned_gain object when the gain is set, or none when it is
//     learned; in it, a number that is not finite, a weight outside
//     [0, steps] (or above the forgetting window), negative sums of
//     squares, sxy² > sxx·syy, a negative max_abs_y, a switch step or
//     slope during the warm-up, or after it a slope ≤ 0 or a switch step
//     not below steps.
//
// Restore after Close returns ErrClosed. A panic in the projection (while
// checking the parameter) changes nothing; a panic in the OnUpdate hook
// comes after the restore, which stands.
func (t *Tuner) Restore(data []byte) error {
	s, err := t.decodeSnapshot(data)
	if err != nil {
		return err
	}
	t.mu.Lock()
	defer t.mu.Unlock()
	if t.closed {
		return ErrClosed
	}
	// Under the lock: the caller's projection is never run concurrently
	// with itself by the tuner.
	if err := t.checkSnapshotBounds(s); err != nil {
		return err
	}
	t.c.setState(coreState{
		X: s.X, Average: s.Average, NAvg: s.Averaged, Steps: s.Steps, GainIdx: s.GainIndex,
		Prev: s.PrevY, Active: s.Active, Limited: s.Limited,
	})
	if t.learn != nil {
		t.learn.restore(s.Learned)
		t.bars.ok = t.learn.phase == phaseLearned && t.learn.memory == 0
		if !t.bars.ok && t.learn.memory == 0 {
			t.bars.stop("learned gain: the error bars start when the warm-up ends (the average restarts there)")
		}
	}
	t.bars.restored(s.Averaged)
	if t.track != nil {
		t.track.restart()
	}
	t.version++
	t.barrier = t.version
	t.frozen = s.Frozen
	c := s.Counts
	t.stats = TunerStats{
		Applied: c.Applied, Stale: c.Stale, Frozen: c.Frozen, NotFinite: c.NotFinite,
		Future: c.Future, Failed: c.Failed, AfterClose: c.AfterClose,
		Overrides: c.Overrides, Restores: c.Restores,
	}
	count1(&t.stats.Restores)
	t.publish()
	t.notify(RestoreUpdate)
	return nil
}

func snapErr(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{ErrSnapshot}, args...)...)
}

// readObject reads data as exactly one JSON object and returns its members,
// refusing duplicate names, null values and trailing data.
func readObject(data []byte, what string) (map[string]json.RawMessage, error) {
	dec := json.NewDecoder(bytes.NewReader(data))
	tok, err := dec.Token()
	if err != nil {
		return nil, snapErr("%s is not a JSON object: %v", what, err)
	}
	if d, ok := tok.(json.Delim); !ok || d != '{' {
		return nil, snapErr("%s is not a JSON object", what)
	}
	m := make(map[string]json.RawMessage)
	for dec.More() {
		tok, err := dec.Token()
		if err != nil {
			return nil, snapErr("%s: %v", what, err)
		}
		name, ok := tok.(string)
		if !ok {
			return nil, snapErr("%s: a field name is not a string", what)
		}
		var raw json.RawMessage
		if err := dec.Decode(&raw); err != nil {
			return nil, snapErr("%s: field %q: %v", what, name, err)
		}
		if _, dup := m[name]; dup {
			return nil, snapErr("%s: field %q appears twice", what, name)
		}
		if string(raw) == "null" {
			return nil, snapErr("%s: field %q is null", what, name)
		}
		m[name] = raw
	}
	if _, err := dec.Token(); err != nil { // the closing brace
		return nil, snapErr("%s: %v", what, err)
	}
	if _, err := dec.Token(); !errors.Is(err, io.EOF) {
		return nil, snapErr("trailing data after the %s", what)
	}
	return m, nil
}

// checkFields refuses unknown and missing fields of m; optional names may
// be absent.
func checkFields(m map[string]json.RawMessage, what string, names []string, optional ...string) error {
	for name := range m {
		if !slices.Contains(names, name) {
			return snapErr("%s: unknown field %q", what, name)
		}
	}
	for _, name := range names {
		if _, ok := m[name]; !ok && !slices.Contains(optional, name) {
			return snapErr("%s: field %q is missing", what, name)
		}
	}
	return nil
}

// snapshotCounter decodes a counter in [0, MaxSnapshotCount].
// The message calls the field prefix+name.
func snapshotCounter(m map[string]json.RawMessage, prefix, name string) (uint64, error) {
	var v int64
	if err := json.Unmarshal(m[name], &v); err != nil {
		return 0, snapErr("field %q is not an integer in [0, MaxSnapshotCount = 2⁵³]: %v", prefix+name, err)
	}
	if v < 0 || v > MaxSnapshotCount {
		return 0, snapErr("field %q = %d: must be in [0, MaxSnapshotCount = 2⁵³]", prefix+name, v)
	}
	return uint64(v), nil
}

// numbers decodes an array of d finite numbers; a null entry is refused
// (encoding/json would read it as 0).
func numbers(m map[string]json.RawMessage, name string, d int) ([]float64, error) {
	var p []*float64
	if err := json.Unmarshal(m[name], &p); err != nil {
		return nil, snapErr("field %q is not an array of numbers: %v", name, err)
	}
	if len(p) != d {
		return nil, fmt.Errorf("%w: %w: field %q has %d entries, tuner dimension %d", ErrSnapshot, ErrDimension, name, len(p), d)
	}
	x := make([]float64, d)
	for i, v := range p {
		if v == nil {
			return nil, snapErr("%s[%d] is null", name, i)
		}
		x[i] = *v // encoding/json refuses numbers that overflow a float64
	}
	return x, nil
}

func boolean(m map[string]json.RawMessage, name string) (bool, error) {
	var b bool
	if err := json.Unmarshal(m[name], &b); err != nil {
		return false, snapErr("field %q is not a boolean: %v", name, err)
	}
	return b, nil
}

// decodeSnapshot parses data and checks everything that does not need the
// caller's projection, without touching the tuner. It reads no settings
// that can change, so it needs no lock.
func (t *Tuner) decodeSnapshot(data []byte) (*snapshot, error) {
	d := t.d
	if limit := MaxSnapshotBytes(d); len(data) > limit {
		return nil, snapErr("%d bytes: a snapshot of a tuner of dimension %d has at most MaxSnapshotBytes(%d) = %d", len(data), d, d, limit)
	}
	m, err := readObject(data, "snapshot")
	if err != nil {
		return nil, err
	}
	// The format version first, so that a newer snapshot gets the right
	// error whatever else changed in it.
	raw, ok := m["format"]
	if !ok {
		return nil, snapErr("field \"format\" is missing")
	}
	var format int
	if err := json.Unmarshal(raw, &format); err != nil {
		return nil, snapErr("field \"format\" is not an integer: %v", err)
	}
	if format > SnapshotFormat {
		return nil, fmt.Errorf("%w: %w: format %d, this build reads format %d", ErrSnapshot, ErrSnapshotVersion, format, SnapshotFormat)
	}
	if format != SnapshotFormat {
		return nil, snapErr("format %d: this build reads format %d", format, SnapshotFormat)
	}
	if err := checkFields(m, "snapshot", snapshotFields, "previous_measurement", "learned_gain"); err != nil {
		return nil, err
	}
	s := &snapshot{Format: format}
	var dim int64
	if err := json.Unmarshal(m["dim"], &dim); err != nil {
		return nil, snapErr("field \"dim\" is not an integer: %v", err)
	}
	if dim != int64(d) {
		return nil, fmt.Errorf("%w: %w: snapshot of dimension %d, tuner of dimension %d", ErrSnapshot, ErrDimension, dim, d)
	}
	s.Dim = d
	// The version is informational (Restore publishes the next version of
	// this tuner), so any uint64 is accepted.
	if err := json.Unmarshal(m["version"], &s.Version); err != nil {
		return nil, snapErr("field \"version\" is not an integer in [0, 2⁶⁴): %v", err)
	}
	var n [3]uint64
	for i, name := range []string{"steps", "averaged", "gain_index"} {
		if n[i], err = snapshotCounter(m, "", name); err != nil {
			return nil, err
		}
	}
	s.Steps, s.Averaged, s.GainIndex = int(n[0]), int(n[1]), int(n[2])
	if s.X, err = numbers(m, "x", d); err != nil {
		return nil, err
	}
	if s.Average, err = numbers(m, "average", d); err != nil {
		return nil, err
	}
	if _, ok := m["previous_measurement"]; ok {
		if s.PrevY, err = numbers(m, "previous_measurement", d); err != nil {
			return nil, err
		}
	}
	for _, f := range []struct {
		name string
		dst  *bool
	}{{"active", &s.Active}, {"limited", &s.Limited}, {"frozen", &s.Frozen}} {
		if *f.dst, err = boolean(m, f.name); err != nil {
			return nil, err
		}
	}
	cm, err := readObject(m["counts"], "counts")
	if err != nil {
		return nil, err
	}
	if err := checkFields(cm, "counts", snapshotCountFields); err != nil {
		return nil, err
	}
	c := &s.Counts
	for i, dst := range []*uint64{&c.Applied, &c.Stale, &c.Frozen, &c.NotFinite, &c.Future, &c.Failed, &c.AfterClose, &c.Overrides, &c.Restores} {
		if *dst, err = snapshotCounter(cm, "counts.", snapshotCountFields[i]); err != nil {
			return nil, err
		}
	}
	_, hasLearned := m["learned_gain"]
	switch {
	case hasLearned && t.learn == nil:
		return nil, snapErr("field \"learned_gain\" is present, but the tuner's gain is set (a learned gain needs a nil TunerSettings.Gain)")
	case !hasLearned && t.learn != nil:
		return nil, snapErr("field \"learned_gain\" is missing, and the tuner learns its gain (nil TunerSettings.Gain)")
	case hasLearned:
		if s.Learned, err = decodeLearned(m["learned_gain"], s.Steps, t.learn); err != nil {
			return nil, err
		}
	}
	if err := t.checkSnapshotState(s); err != nil {
		return nil, err
	}
	return s, nil
}

// checkSnapshotState checks the invariants between the fields of s that
// the live tuner keeps (see Restore).
func (t *Tuner) checkSnapshotState(s *snapshot) error {
	set := t.set
	steps := s.Steps
	if uint64(steps) != s.Counts.Applied {
		return snapErr("steps = %d but counts.applied = %d: every applied report is one step", steps, s.Counts.Applied)
	}
	if most := max(0, steps-set.BurnIn); s.Averaged > most {
		return snapErr("averaged = %d exceeds steps − BurnIn = %d − %d", s.Averaged, steps, set.BurnIn)
	}
	adaptive := t.c.adapt != nil
	switch {
	case !adaptive && s.GainIndex != steps:
		return snapErr("gain_index = %d differs from steps = %d, and the gain is not adaptive", s.GainIndex, steps)
	case s.GainIndex > steps:
		return snapErr("gain_index = %d exceeds steps = %d", s.GainIndex, steps)
	case s.PrevY != nil && !adaptive:
		return snapErr("previous_measurement is set, but the tuner's gain is not adaptive")
	case s.PrevY != nil && steps == 0:
		return snapErr("previous_measurement is set before any step")
	case s.Active && (set.Projection == nil || steps == 0):
		return snapErr("active is true, but no projection has acted (projection %v, steps %d)", set.Projection != nil, steps)
	case s.Limited && (set.MaxChange == nil || steps == 0):
		return snapErr("limited is true, but no MaxChange has acted (MaxChange %v, steps %d)", set.MaxChange != nil, steps)
	}
	if s.Averaged == 0 {
		for i, v := range s.Average {
			if v != 0 {
				return snapErr("average[%d] = %v with nothing averaged (the tuner keeps zeros)", i, v)
			}
		}
	}
	return nil
}

// snapshotSlack is the relative rounding slack allowed for the average
// against the bounds: the running mean of points inside a box can leave
// it by a few ulps.
const snapshotSlack = 1e-12

// checkSnapshotBounds checks the parameter and the average of s against the
// bounds; mu is held (the projection is the caller's code).
func (t *Tuner) checkSnapshotBounds(s *snapshot) error {
	set := t.set
	if err := checkInside("x", s.X, set.Projection, set.MaxAbs, ErrNotFinite); err != nil {
		return fmt.Errorf("%w: %w", ErrSnapshot, err)
	}
	if s.Averaged == 0 {
		return nil
	}
	avg := s.Average
	if m := set.MaxAbs; m > 0 {
		for i, v := range avg {
			if math.Abs(v) > m*(1+snapshotSlack) {
				return fmt.Errorf("%w: %w: |average[%d]| = %v exceeds MaxAbs = %v", ErrSnapshot, ErrOutOfBounds, i, math.Abs(v), m)
			}
		}
	}
	switch p := set.Projection.(type) {
	case Box:
		for i, v := range avg {
			lo, hi := p.Lower[i], p.Upper[i]
			slack := 0.0
			for _, b := range [2]float64{lo, hi} {
				if !math.IsInf(b, 0) {
					slack = max(slack, snapshotSlack*math.Abs(b))
				}
			}
			if v < lo-slack || v > hi+slack {
				return fmt.Errorf("%w: %w: average[%d] = %v is outside the box [%v, %v]", ErrSnapshot, ErrOutOfBounds, i, v, lo, hi)
			}
		}
	case Ball:
		if !p.Contains(avg) {
			return fmt.Errorf("%w: %w: the average %v is outside the ball", ErrSnapshot, ErrOutOfBounds, avg)
		}
	}
	return nil
}
