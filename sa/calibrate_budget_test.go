package sa_test

import (
	"context"
	"slices"
	"strings"
	"testing"

	"github.com/stochroot/stochroot/oracle"
	"github.com/stochroot/stochroot/sa"
	"github.com/stochroot/stochroot/sampling"
)

// TestBudgetTheCallerSetBinds: a run given only a measurement budget or
// only an epoch budget runs to that budget, not to DefaultMaxSteps (the
// rule documented on Settings.MaxSteps). Before the rule, both stopped at
// 10 000 steps with Reason StepLimit.
func TestBudgetTheCallerSetBinds(t *testing.T) {
	ctx := context.Background()
	r, err := sa.RobbinsMonro(ctx, linear(2), []float64{0, 0}, sa.Settings{Gain: gain, MaxMeasurements: 25000, Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	if r.Reason != sa.MeasurementLimit || r.Measurements != 25000 || r.Steps != 25000 {
		t.Errorf("only MaxMeasurements = 25000: Reason %v after %d measurements, %d steps; want MeasurementLimit after 25000", r.Reason, r.Measurements, r.Steps)
	}
	if r.Settings.MaxSteps != sa.NoLimit {
		t.Errorf("resolved MaxSteps = %d, want NoLimit", r.Settings.MaxSteps)
	}

	const n = 20000
	m := lsModel(t, n, 3, 4)
	g, err := oracle.NewMiniBatch(m, sampling.NewShuffled(n), 1, oracle.BatchSettings{Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	defer g.Close()
	r, err = sa.MinimizeSum(ctx, g, make([]float64, m.Dim()), sa.Settings{Gain: gain, MaxEpochs: 3, Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	if r.Reason != sa.EpochLimit || r.Epochs != 3 {
		t.Errorf("only MaxEpochs = 3: Reason %v after %.2f epochs; want EpochLimit after 3", r.Reason, r.Epochs)
	}

	// Both budgets set: the first reached ends the run.
	r, err = sa.RobbinsMonro(ctx, linear(1), []float64{0}, sa.Settings{Gain: gain, MaxSteps: 300, MaxMeasurements: 25000})
	if err != nil {
		t.Fatal(err)
	}
	if r.Reason != sa.StepLimit || r.Steps != 300 {
		t.Errorf("MaxSteps 300 and MaxMeasurements 25000: Reason %v after %d steps; want StepLimit after 300", r.Reason, r.Steps)
	}
	// No budget at all: the default step budget.
	r, err = sa.RobbinsMonro(ctx, linear(1), []float64{0}, sa.Settings{Gain: gain})
	if err != nil {
		t.Fatal(err)
	}
	if r.Reason != sa.StepLimit || r.Steps != sa.DefaultMaxSteps {
		t.Errorf("no budget: Reason %v after %d steps; want StepLimit after DefaultMaxSteps", r.Reason, r.Steps)
	}
}

// TestBurnInBeyondTheRunSaysNotAveraged: a burn-in that covers every step
// taken leaves nothing to average; the Result must say that its estimate
// is the last iterate, and why. An averaged run says nothing.
func TestBurnInBeyondTheRunSaysNotAveraged(t *testing.T) {
	ctx := context.Background()
	r, err := sa.RobbinsMonro(ctx, linear(1), []float64{0}, sa.Settings{Gain: gain, MaxSteps: 100, BurnIn: 200})
	if err != nil {
		t.Fatal(err)
	}
	if r.Average != nil || !slices.Equal(r.Estimate(), r.X) {
		t.Fatalf("BurnIn 200 > 100 steps: Average %v, Estimate %v, X %v", r.Average, r.Estimate(), r.X)
	}
	if !strings.Contains(r.NotAveraged, "BurnIn = 200") || !strings.Contains(r.NotAveraged, "last iterate") {
		t.Errorf("NotAveraged = %q: want it to name BurnIn = 200 and say the estimate is the last iterate", r.NotAveraged)
	}
	// Through a Solver too.
	sv, err := sa.NewSolver(linear(1), []float64{0}, sa.Settings{Gain: gain, BurnIn: 5})
	if err != nil {
		t.Fatal(err)
	}
	if err := sv.Step(); err != nil {
		t.Fatal(err)
	}
	if res := sv.Result(); res.NotAveraged == "" {
		t.Errorf("Solver after 1 step with BurnIn 5: NotAveraged is empty")
	}
	r, err = sa.RobbinsMonro(ctx, linear(1), []float64{0}, sa.Settings{Gain: gain, MaxSteps: 100, BurnIn: 50})
	if err != nil {
		t.Fatal(err)
	}
	if r.NotAveraged != "" || r.Average == nil {
		t.Errorf("averaged run: NotAveraged = %q, Average %v", r.NotAveraged, r.Average)
	}
}
