package sa

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
)

// SnapshotFormat is the format version written by Tuner.Snapshot. Restore
// accepts this version only; a larger one is from a newer release and is
// refused with ErrSnapshotVersion.
const SnapshotFormat = 1

// snapshot is the JSON form of a tuner's state. Pointer fields are
// required: a snapshot without them is refused rather than read as zeros.
type snapshot struct {
	Format    *int           `json:"format"`
	Dim       *int           `json:"dim"`
	Version   *uint64        `json:"version"`
	X         []float64      `json:"x"`
	Average   []float64      `json:"average"`
	Averaged  *int           `json:"averaged"`
	Steps     *int           `json:"steps"`
	GainIndex *int           `json:"gain_index"`
	PrevY     []float64      `json:"previous_measurement,omitempty"`
	Active    *bool          `json:"active"`
	Limited   *bool          `json:"limited"`
	Frozen    *bool          `json:"frozen"`
	Counts    *snapshotCount `json:"counts"`
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
// the frozen flag and the counters. Settings are not part of it: they come
// from the code that builds the tuner. A tuner built with the same settings
// and restored from the snapshot continues exactly as this one would.
func (t *Tuner) Snapshot() ([]byte, error) {
	t.mu.Lock()
	st := t.c.state()
	format, dim := SnapshotFormat, t.d
	version, frozen := t.version, t.frozen
	s := t.stats
	t.mu.Unlock()
	return json.Marshal(snapshot{
		Format: &format, Dim: &dim, Version: &version,
		X: st.X, Average: st.Average, Averaged: &st.NAvg, Steps: &st.Steps, GainIndex: &st.GainIdx,
		PrevY: st.Prev, Active: &st.Active, Limited: &st.Limited, Frozen: &frozen,
		Counts: &snapshotCount{
			Applied: s.Applied, Stale: s.Stale, Frozen: s.Frozen, NotFinite: s.NotFinite,
			Future: s.Future, Failed: s.Failed, AfterClose: s.AfterClose,
			Overrides: s.Overrides, Restores: s.Restores,
		},
	})
}

// Restore replaces the tuner's state by the one in a snapshot written by
// Snapshot (of this tuner or of another with the same settings, e.g.
// before a restart), including the frozen flag and the counters. The
// restored parameter is published as this tuner's next version (the
// snapshot's version is informational: versions order the reads and
// reports of one process), and reports taken before the restore are
// dropped as stale.
//
// The snapshot is checked completely before anything changes: malformed or
// truncated JSON, unknown or missing fields, trailing data, another
// dimension, non-finite values, inconsistent counters or a parameter
// outside the bounds give an error wrapping ErrSnapshot (and ErrDimension
// or ErrSnapshotVersion where they apply), and the tuner is left exactly
// as it was. Restore after Close returns ErrClosed.
func (t *Tuner) Restore(data []byte) error {
	st, s, err := t.decodeSnapshot(data)
	if err != nil {
		return err
	}
	t.mu.Lock()
	defer t.mu.Unlock()
	if t.closed {
		return ErrClosed
	}
	t.c.setState(st)
	t.version++
	t.barrier = t.version
	t.frozen = *s.Frozen
	c := s.Counts
	t.stats = TunerStats{
		Applied: c.Applied, Stale: c.Stale, Frozen: c.Frozen, NotFinite: c.NotFinite,
		Future: c.Future, Failed: c.Failed, AfterClose: c.AfterClose,
		Overrides: c.Overrides, Restores: c.Restores + 1,
	}
	t.publish()
	t.notify(RestoreUpdate)
	return nil
}

func snapErr(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{ErrSnapshot}, args...)...)
}

// decodeSnapshot parses and validates data against the tuner's dimension
// and settings without touching the tuner.
func (t *Tuner) decodeSnapshot(data []byte) (coreState, *snapshot, error) {
	// The format version first, leniently, so that a newer snapshot gets
	// the right error whatever else changed in it.
	var head struct {
		Format *json.RawMessage `json:"format"`
	}
	if err := json.Unmarshal(data, &head); err != nil {
		return coreState{}, nil, snapErr("not a JSON object: %v", err)
	}
	if head.Format == nil {
		return coreState{}, nil, snapErr("no \"format\" field")
	}
	var format int
	if err := json.Unmarshal(*head.Format, &format); err != nil {
		return coreState{}, nil, snapErr("\"format\" is not an integer: %v", err)
	}
	if format > SnapshotFormat {
		return coreState{}, nil, fmt.Errorf("%w: %w: format %d, this build reads format %d", ErrSnapshot, ErrSnapshotVersion, format, SnapshotFormat)
	}
	if format != SnapshotFormat {
		return coreState{}, nil, snapErr("format %d: this build reads format %d", format, SnapshotFormat)
	}

	var s snapshot
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&s); err != nil {
		return coreState{}, nil, snapErr("%v", err)
	}
	if _, err := dec.Token(); !errors.Is(err, io.EOF) {
		return coreState{}, nil, snapErr("trailing data after the snapshot")
	}
	for _, f := range [...]struct {
		name    string
		missing bool
	}{
		{"dim", s.Dim == nil}, {"version", s.Version == nil}, {"x", s.X == nil}, {"average", s.Average == nil},
		{"averaged", s.Averaged == nil}, {"steps", s.Steps == nil}, {"gain_index", s.GainIndex == nil},
		{"active", s.Active == nil}, {"limited", s.Limited == nil}, {"frozen", s.Frozen == nil},
		{"counts", s.Counts == nil},
	} {
		if f.missing {
			return coreState{}, nil, snapErr("field %q is missing", f.name)
		}
	}
	d := t.d
	if *s.Dim != d {
		return coreState{}, nil, fmt.Errorf("%w: %w: snapshot of dimension %d, tuner of dimension %d", ErrSnapshot, ErrDimension, *s.Dim, d)
	}
	if len(s.X) != d || len(s.Average) != d || (s.PrevY != nil && len(s.PrevY) != d) {
		return coreState{}, nil, fmt.Errorf("%w: %w: x, average and previous_measurement must have %d entries (have %d, %d, %d)",
			ErrSnapshot, ErrDimension, d, len(s.X), len(s.Average), len(s.PrevY))
	}
	for _, v := range [][]float64{s.X, s.Average, s.PrevY} {
		for _, f := range v {
			if math.IsNaN(f) || math.IsInf(f, 0) {
				return coreState{}, nil, snapErr("non-finite value %v", f)
			}
		}
	}
	steps, nAvg, gi := *s.Steps, *s.Averaged, *s.GainIndex
	if steps < 0 || nAvg < 0 || gi < 0 || nAvg > steps || gi > steps {
		return coreState{}, nil, snapErr("inconsistent counters: steps %d, averaged %d, gain_index %d (need 0 ≤ averaged, gain_index ≤ steps)", steps, nAvg, gi)
	}
	if err := checkPoint(s.X, t.set); err != nil {
		return coreState{}, nil, snapErr("parameter: %w", err)
	}
	return coreState{
		X: s.X, Average: s.Average, NAvg: nAvg, Steps: steps, GainIdx: gi,
		Prev: s.PrevY, Active: *s.Active, Limited: *s.Limited,
	}, &s, nil
}
