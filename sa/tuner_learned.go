package sa

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
)

// ErrSlopeSign reports that a tuner with a learned gain (nil
// TunerSettings.Gain) found the measurements falling as the parameter
// rises, clearly (t < −LearnedSlopeT): the sign convention of Y is reversed
// (for a SetpointTuner, the Direction is wrong), and every update would
// move the parameter away from the target. The tuner refuses further
// reports with this error (the parameter stays where it is) until Restore;
// fix the convention and build a new tuner.
var ErrSlopeSign = errors.New("sa: the measurements fall as the parameter rises: the sign convention of Y (or the Direction) is reversed")

// Constants of the learned gain (nil TunerSettings.Gain; see
// TunerSettings.Gain).
const (
	// LearnedMinReports is the number of reports the slope estimate needs
	// before the warm-up may end.
	LearnedMinReports = 32
	// LearnedSlopeT is the t-statistic the least-squares slope must reach
	// to end the warm-up (with ≥ 30 degrees of freedom a slope of pure
	// noise passes t > 5 with probability below 10⁻⁵; Student t table,
	// common practice).
	LearnedSlopeT = 5.0
	// learnedExponent is α of the decreasing learned gain
	// (1/ŝ)/(j+1)^α: in (1/2, 1), where Polyak–Ruppert averaging attains
	// the optimal asymptotic variance whatever the scale (Polyak &
	// Juditsky 1992, Theorem 2); 0.7 is common practice.
	learnedExponent = 0.7
	// learnedHistory is the number of recent published parameters kept
	// to pair a report with the parameter it was taken at (a power of two).
	learnedHistory = 32
	// learnedWindowMemories: in tracking mode (TunerSettings.Memory > 0)
	// the slope estimate forgets with a window of this many memories.
	learnedWindowMemories = 100
)

// Phases of the learned gain.
const (
	phaseWarmUp  = 0
	phaseLearned = 1
)

// learner is the state of a learned gain: the least-squares regression of
// the measurements Y on the parameter x they were taken at (Lai & Robbins
// 1979, "Adaptive design and stochastic approximation", Ann. Statist.
// 7(6): the slope of the field estimated from the procedure's own design
// points; Venter 1967, Ann. Math. Statist. 38(1), for the idea of
// learning the slope during the run), kept as weighted co-moments about the
// running means (West 1979, "Updating mean and variance estimates: an
// improved method", Comm. ACM 22(9)). It is used for d = 1 only and is
// written under the tuner's lock.
type learner struct {
	// Regression state (in the snapshot).
	w, mx, my     float64 // total weight, weighted means of x and y
	sxx, sxy, syy float64 // co-moments about the means
	ymax          float64 // largest |Y| seen
	phase         int
	switchStep    int     // core step at which the warm-up ended
	slope         float64 // slope in use after the warm-up (last clear estimate)
	wrongSign     bool    // the slope came out clearly negative
	maxChange     float64 // TunerSettings.MaxChange[0]
	memory        int     // TunerSettings.Memory
	forget        float64 // weight kept per report (1: no forgetting)
	hist          [learnedHistory]float64
	histOK        [learnedHistory]uint64 // version+1 stored in hist slot (0 = empty)
	pending       float64                // the gain for the step being applied
	pendingUse    bool                   // the report pairs with a known parameter
	pendingX      float64
	pendingY      float64
	pendingYmax   float64
	pendingSwitch bool
	pendingSlope  float64
}

func newLearner(maxChange float64, memory int) *learner {
	l := &learner{maxChange: maxChange, memory: memory, forget: 1}
	if memory > 0 {
		l.forget = 1 - 1/float64(learnedWindowMemories*memory)
	}
	return l
}

// Gain makes the learner a schedule.Schedule for the core: it returns the
// gain prepared for the step being applied (k is ignored).
func (l *learner) Gain(int) float64 { return l.pending }

// remember records the parameter published as version v.
func (l *learner) remember(v uint64, x float64) {
	i := v & (learnedHistory - 1)
	l.hist[i] = x
	l.histOK[i] = v + 1
}

// at returns the parameter published as version v, if still kept.
func (l *learner) at(v uint64) (float64, bool) {
	i := v & (learnedHistory - 1)
	if l.histOK[i] != v+1 {
		return 0, false
	}
	return l.hist[i], true
}

// estimate returns the slope and its standard error from the co-moments
// with the report (x, y) added when use is set.
func (l *learner) estimate(use bool, x, y float64) (slope, se, n float64) {
	w, sxx, sxy, syy := l.w, l.sxx, l.sxy, l.syy
	if use {
		w, _, _, sxx, sxy, syy = l.add(x, y)
	}
	if !(sxx > 0) || w < 3 {
		return 0, math.Inf(1), w
	}
	slope = sxy / sxx
	res := math.Max(syy-slope*sxy, 0) / (w - 2)
	return slope, math.Sqrt(res / sxx), w
}

// add returns the co-moments with (x, y) added after forgetting.
func (l *learner) add(x, y float64) (w, mx, my, sxx, sxy, syy float64) {
	f := l.forget
	w, sxx, sxy, syy = l.w*f, l.sxx*f, l.sxy*f, l.syy*f
	w++
	dx, dy := x-l.mx, y-l.my
	mx = l.mx + dx/w
	my = l.my + dy/w
	sxx += dx * (x - mx)
	sxy += dx * (y - my)
	syy += dy * (y - my)
	return w, mx, my, sxx, sxy, syy
}

// prepare computes the gain for the report y taken at version v, at core
// step k, without committing anything (commit does that after the core
// applied the step). It returns ErrSlopeSign when the slope has come out
// clearly negative.
func (l *learner) prepare(v uint64, y float64, k int) error {
	if l.wrongSign {
		return ErrSlopeSign
	}
	x, use := l.at(v)
	l.pendingUse, l.pendingX, l.pendingY = use, x, y
	l.pendingYmax = math.Max(l.ymax, math.Abs(y))
	l.pendingSwitch = false
	slope, se, n := l.estimate(use, x, y)
	t := slope / se
	l.pendingSlope = l.slope
	if n >= LearnedMinReports && t < -LearnedSlopeT {
		l.wrongSign = true
		return fmt.Errorf("%w: least-squares slope %.3g (t = %.3g) from %.0f reports", ErrSlopeSign, slope, t, n)
	}
	sure := n >= LearnedMinReports && t > LearnedSlopeT
	if sure {
		l.pendingSlope = slope
	}
	// The warm-up gain moves the parameter by at most MaxChange: |a·Y| ≤
	// MaxChange for every Y seen so far, this one included.
	warm := 0.0
	if l.pendingYmax > 0 {
		warm = l.maxChange / l.pendingYmax
	}
	phase := l.phase
	if phase == phaseWarmUp && sure {
		l.pendingSwitch = true
		phase = phaseLearned
	}
	switch {
	case phase == phaseWarmUp:
		l.pending = warm
	case l.memory > 0:
		l.pending = 1 / (l.pendingSlope * float64(l.memory))
	default:
		j := 0
		if !l.pendingSwitch {
			j = k - l.switchStep
		}
		l.pending = 1 / (l.pendingSlope * math.Pow(float64(j+1), learnedExponent))
	}
	// The gain never exceeds the warm-up gain, so no move exceeds
	// MaxChange and none is clamped: clamped moves bias the iterate (for a
	// quantile with P = 0.99 a miss clamped to MaxChange against hits at
	// full size puts the equilibrium at another quantile), and a slope
	// estimate near 0 cannot give a step that overflows.
	l.pending = min(l.pending, warm)
	return nil
}

// commit folds the prepared report in after the core applied step k.
func (l *learner) commit(k int) {
	if l.pendingUse {
		l.w, l.mx, l.my, l.sxx, l.sxy, l.syy = l.add(l.pendingX, l.pendingY)
	}
	l.ymax = l.pendingYmax
	l.slope = l.pendingSlope
	if l.pendingSwitch {
		l.phase = phaseLearned
		l.switchStep = k
	}
}

// LearnedGain describes the learned gain of a tuner built with a nil
// TunerSettings.Gain (see TunerSettings.Gain).
type LearnedGain struct {
	// WarmUp reports that the slope is not yet clear and the tuner still
	// moves with the warm-up gain MaxChange/max|Y|.
	WarmUp bool
	// Slope is the least-squares slope of Y on the parameter from the
	// reports so far, StdErr its standard error and Reports the (weighted)
	// number of reports behind it.
	Slope, StdErr, Reports float64
	// InUse is the slope the gain is built from after the warm-up (the
	// last estimate that stood clear of its noise).
	InUse float64
	// Gain is the gain of the last applied update.
	Gain float64
	// SwitchStep is the step at which the warm-up ended (0 during it).
	SwitchStep int
	// WrongSign reports that the slope came out clearly negative
	// (ErrSlopeSign).
	WrongSign bool
}

// LearnedGain returns the state of the learned gain, and ok = false when
// the tuner's gain was set by the caller.
func (t *Tuner) LearnedGain() (g LearnedGain, ok bool) {
	t.mu.Lock()
	defer t.mu.Unlock()
	l := t.learn
	if l == nil {
		return g, false
	}
	slope, se, n := l.estimate(false, 0, 0)
	return LearnedGain{
		WarmUp: l.phase == phaseWarmUp, Slope: slope, StdErr: se, Reports: n, InUse: l.slope,
		Gain: t.c.lastGain, SwitchStep: l.switchStep, WrongSign: l.wrongSign,
	}, true
}

// warmUpEnded is called after the step that ended a learned warm-up; mu
// is held. With a decreasing gain the Polyak–Ruppert average and its
// error bars start again from the next iterate (the projection flags of
// the step just applied are kept); with a constant one (Memory > 0) the
// tracking noise starts again, the gain having changed.
func (t *Tuner) warmUpEnded() {
	if t.learn.memory > 0 {
		t.track.restart()
		return
	}
	active, limited := t.c.active, t.c.limited
	t.c.override(t.c.x)
	t.c.active, t.c.limited = active, limited
	t.bars.ok = true
	t.bars.restart()
}

// snapshotLearned is the JSON form of a learned gain's state (the
// learned_gain field of a snapshot). The history of recent parameters is
// not in it: Restore makes every earlier report stale.
type snapshotLearned struct {
	Weight     float64 `json:"weight"`
	MeanX      float64 `json:"mean_x"`
	MeanY      float64 `json:"mean_y"`
	Sxx        float64 `json:"sxx"`
	Sxy        float64 `json:"sxy"`
	Syy        float64 `json:"syy"`
	MaxAbsY    float64 `json:"max_abs_y"`
	WarmUp     bool    `json:"warm_up"`
	SwitchStep int     `json:"switch_step"`
	Slope      float64 `json:"slope"`
	WrongSign  bool    `json:"wrong_sign"`
}

var learnedFields = []string{"weight", "mean_x", "mean_y", "sxx", "sxy", "syy", "max_abs_y", "warm_up", "switch_step", "slope", "wrong_sign"}

func (l *learner) snapshot() *snapshotLearned {
	if l == nil {
		return nil
	}
	return &snapshotLearned{
		Weight: l.w, MeanX: l.mx, MeanY: l.my, Sxx: l.sxx, Sxy: l.sxy, Syy: l.syy, MaxAbsY: l.ymax,
		WarmUp: l.phase == phaseWarmUp, SwitchStep: l.switchStep, Slope: l.slope, WrongSign: l.wrongSign,
	}
}

// restore replaces the learner's state by s (checked by decodeLearned).
func (l *learner) restore(s *snapshotLearned) {
	l.w, l.mx, l.my, l.sxx, l.sxy, l.syy, l.ymax = s.Weight, s.MeanX, s.MeanY, s.Sxx, s.Sxy, s.Syy, s.MaxAbsY
	l.phase = phaseLearned
	if s.WarmUp {
		l.phase = phaseWarmUp
	}
	l.switchStep, l.slope, l.wrongSign = s.SwitchStep, s.Slope, s.WrongSign
	clear(l.histOK[:])
}

// decodeLearned reads the learned_gain object and checks what the live
// learner keeps: finite numbers; weight in [0, steps] (and at most the
// forgetting window's 1/(1 − forget) when it forgets); sxx, syy ≥ 0 and
// sxy² ≤ sxx·syy (Cauchy–Schwarz, with a relative rounding slack of
// 10⁻⁹); max_abs_y ≥ 0; during the warm-up a switch step and slope of 0;
// after it a slope > 0 and 0 ≤ switch_step < steps.
func decodeLearned(raw []byte, steps int, l *learner) (*snapshotLearned, error) {
	m, err := readObject(raw, "learned_gain")
	if err != nil {
		return nil, err
	}
	if err := checkFields(m, "learned_gain", learnedFields); err != nil {
		return nil, err
	}
	s := &snapshotLearned{}
	for i, dst := range []*float64{&s.Weight, &s.MeanX, &s.MeanY, &s.Sxx, &s.Sxy, &s.Syy, &s.MaxAbsY, &s.Slope} {
		name := [...]string{"weight", "mean_x", "mean_y", "sxx", "sxy", "syy", "max_abs_y", "slope"}[i]
		var p *float64
		if err := json.Unmarshal(m[name], &p); err != nil || p == nil {
			return nil, snapErr("field \"learned_gain.%s\" is not a number: %v", name, err)
		}
		*dst = *p
	}
	if s.WarmUp, err = boolean(m, "warm_up"); err != nil {
		return nil, err
	}
	if s.WrongSign, err = boolean(m, "wrong_sign"); err != nil {
		return nil, err
	}
	sw, err := snapshotCounter(m, "learned_gain.", "switch_step")
	if err != nil {
		return nil, err
	}
	s.SwitchStep = int(sw)
	most := float64(steps)
	if l.forget < 1 {
		most = math.Min(most, 1/(1-l.forget))
	}
	switch {
	case !(s.Weight >= 0 && s.Weight <= most*(1+1e-9)):
		return nil, snapErr("learned_gain.weight = %v: must lie in [0, %v] (steps, or the forgetting window)", s.Weight, most)
	case !(s.Sxx >= 0) || !(s.Syy >= 0) || math.IsInf(s.Sxx, 0) || math.IsInf(s.Syy, 0) || math.IsInf(s.Sxy, 0) || math.IsNaN(s.Sxy):
		return nil, snapErr("learned_gain: sxx = %v, syy = %v, sxy = %v: sums of squares must be finite and ≥ 0", s.Sxx, s.Syy, s.Sxy)
	case s.Sxy*s.Sxy > s.Sxx*s.Syy*(1+1e-9):
		return nil, snapErr("learned_gain: sxy² = %v exceeds sxx·syy = %v (impossible for co-moments)", s.Sxy*s.Sxy, s.Sxx*s.Syy)
	case math.IsInf(s.MeanX, 0) || math.IsInf(s.MeanY, 0):
		return nil, snapErr("learned_gain: mean_x = %v, mean_y = %v: must be finite", s.MeanX, s.MeanY)
	case !(s.MaxAbsY >= 0) || math.IsInf(s.MaxAbsY, 0):
		return nil, snapErr("learned_gain.max_abs_y = %v: must be finite and ≥ 0", s.MaxAbsY)
	case s.WarmUp && (s.SwitchStep != 0 || s.Slope != 0):
		return nil, snapErr("learned_gain: warm_up with switch_step = %d and slope = %v (both stay 0 during the warm-up)", s.SwitchStep, s.Slope)
	case !s.WarmUp && !(s.Slope > 0 && !math.IsInf(s.Slope, 0)):
		return nil, snapErr("learned_gain.slope = %v after the warm-up: must be finite and > 0", s.Slope)
	case !s.WarmUp && s.SwitchStep >= steps:
		return nil, snapErr("learned_gain.switch_step = %d: the warm-up ended at a step, so it must be below steps = %d", s.SwitchStep, steps)
	}
	return s, nil
}
