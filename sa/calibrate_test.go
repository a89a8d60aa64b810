package sa_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sampling"
	"github.com/stochroot/stochroot/schedule"
)

// TestCalibrationReportedAndCounted: a nil gain gives a Result whose
// Calibration names the method and its source, holds the chosen schedule
// (also in Result.Settings.Gain) and the pilot, and whose pilot counts
// against the budgets: pilot calls + steps = MaxSteps, and the
// measurements include the pilot's. The caller's Settings stay nil-gained.
func TestCalibrationReportedAndCounted(t *testing.T) {
	h := oracle.Scalar(func(x float64, rng *rand.Rand) (float64, error) { return 40*(x-2) + rng.NormFloat64(), nil })
	s := sa.Settings{MaxSteps: 3000, Seed: 9}
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{0}, s)
	if err != nil {
		t.Fatal(err)
	}
	c := r.Calibration
	if c == nil {
		t.Fatal("nil gain: Result.Calibration is nil")
	}
	if s.Gain != nil {
		t.Error("the caller's Settings.Gain was written")
	}
	if c.Gain == nil || r.Settings.Gain != c.Gain {
		t.Errorf("Calibration.Gain %v, Result.Settings.Gain %v: want the same schedule", c.Gain, r.Settings.Gain)
	}
	if c.Method == "" || !strings.Contains(c.Source, "Venter 1967") || c.How == "" || len(c.Pilot) == 0 {
		t.Errorf("Calibration lacks method, source, sentence or pilot: %+v", c)
	}
	if c.PilotCalls == 0 || c.PilotCalls+r.Steps != 3000 || r.Measurements != 3000 || r.Reason != sa.StepLimit {
		t.Errorf("pilot %d calls + %d steps, %d measurements, Reason %v: want 3000 in all and StepLimit", c.PilotCalls, r.Steps, r.Measurements, r.Reason)
	}
	// The slope is 40: the pilot's estimate, within 5 of its own standard
	// errors (the t > 5 rule that accepted it), sets the scale 1/ŝ.
	last := c.Pilot[len(c.Pilot)-1]
	if math.Abs(c.Slope-40) > 5*last.StdErr+1e-9 {
		t.Errorf("pilot slope %v ± %v, true 40", c.Slope, last.StdErr)
	}
	if p, ok := c.Gain.(schedule.Power); !ok || p.Scale != 1/c.Slope {
		t.Errorf("gain %v: want Power with Scale 1/ŝ = %v", c.Gain, 1/c.Slope)
	}
	// A caller's gain: no Calibration.
	r, err = sa.RobbinsMonro(context.Background(), h, []float64{0}, sa.Settings{Gain: schedule.Power{Scale: 0.02, Exponent: 0.7}, MaxSteps: 100})
	if err != nil || r.Calibration != nil {
		t.Errorf("caller's gain: Calibration %+v, err %v; want nil", r.Calibration, err)
	}
	// A measurement budget counts the pilot too.
	r, err = sa.RobbinsMonro(context.Background(), h, []float64{0}, sa.Settings{MaxMeasurements: 1500, Seed: 2})
	if err != nil || r.Measurements != 1500 || r.Calibration.PilotMeasurements+r.Steps != 1500 {
		t.Errorf("MaxMeasurements 1500: %d measurements, pilot %d, steps %d, err %v", r.Measurements, r.Calibration.PilotMeasurements, r.Steps, err)
	}
}

// TestCalibrationPilotErrorAndCancel: an oracle error during the pilot
// fails the run with that error, says it happened in the pilot, and the
// Result still carries the Calibration so far; a cancelled context stops
// the pilot.
func TestCalibrationPilotErrorAndCancel(t *testing.T) {
	bad := errors.New("sensor offline")
	calls := 0
	h := oracle.FieldFunc(func(dst, x []float64, _ *rand.Rand) error {
		calls++
		if calls > 5 {
			return bad
		}
		dst[0] = x[0]
		return nil
	})
	r, err := sa.RobbinsMonro(context.Background(), h, []float64{1}, sa.Settings{MaxSteps: 1000})
	if !errors.Is(err, bad) || !strings.Contains(err.Error(), "calibration pilot") {
		t.Errorf("err = %v: want the oracle's error, naming the pilot", err)
	}
	if r.Calibration == nil || r.Reason != sa.Failed || r.X[0] != 1 {
		t.Errorf("Result after a failed pilot: Calibration %v, Reason %v, X %v", r.Calibration, r.Reason, r.X)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	ctxField := oracle.ContextFieldFunc(func(ctx context.Context, _ int, dst, x []float64, _ *rand.Rand) error {
		if err := ctx.Err(); err != nil {
			return err
		}
		dst[0] = x[0]
		return nil
	})
	if _, err := sa.RobbinsMonro(ctx, ctxField, []float64{1}, sa.Settings{MaxSteps: 1000}); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled context: err = %v, want context.Canceled", err)
	}
}

// TestCalibrationRegressionFromData: MinimizeSum with a nil gain on a
// least-squares model takes the constant step 1/(4R²_m) from the data
// (Bach & Moulines 2013, Theorem 1) with no pilot, and reports R² and L.
func TestCalibrationRegressionFromData(t *testing.T) {
	m := lsModel(t, 3000, 4, 8)
	g, err := oracle.NewMiniBatch(m, sampling.NewUniform(m.Len()), 16, oracle.BatchSettings{Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	defer g.Close()
	r, err := sa.MinimizeSum(context.Background(), g, make([]float64, m.Dim()), sa.Settings{MaxEpochs: 2, Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	c := r.Calibration
	if c == nil || c.PilotCalls != 0 || !strings.Contains(c.Source, "Bach & Moulines 2013") {
		t.Fatalf("Calibration %+v: want the data method without a pilot", c)
	}
	R2, L, _ := m.CurvatureBounds() // 3000 rows: the sample is all of them
	rm := L + (R2-L)/16
	if c.RowNormSquared != R2 || c.Curvature != L || c.Gain != schedule.Constant(1/(4*rm)) {
		t.Errorf("Calibration R² %v, L %v, gain %v; want %v, %v, Constant(%v)", c.RowNormSquared, c.Curvature, c.Gain, R2, L, 1/(4*rm))
	}
	if r.Reason != sa.EpochLimit || r.Epochs != 2 {
		t.Errorf("Reason %v after %v epochs, want EpochLimit after 2", r.Reason, r.Epochs)
	}
}
