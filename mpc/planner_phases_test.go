package mpc

import (
	"errors"
	"math"
	"testing"
)

// TestPlannerFeedbackShiftIsFirstOrder checks the real-time iteration's
// feedback: the residuals Feedback predicts for an observed state that
// differs from the prepared prediction by ε·d agree with a true rollout
// from the observed state to O(ε²) (Taylor; the shift uses the forward
// sensitivity dX/dx0 of the stored rollout). Halving ε must cut the
// error by about 4 (between 3 and 5 allows for rounding).
func TestPlannerFeedbackShiftIsFirstOrder(t *testing.T) {
	pl := preparedDemo(t, PlannerSettings{}, 4.0, 0.002)
	x0 := append([]float64(nil), pl.st.x0...)
	xm1 := append([]float64(nil), pl.st.xm1...)
	errAt := func(eps float64) float64 {
		x := append([]float64(nil), x0...)
		xPrev := make([]float64, len(x))
		for i := range x {
			if i%3 == 1 && i >= 3 {
				x[i] += eps
			}
		}
		// x(t−Δt) such that the model's x(t−h_p) is unchanged.
		r := pl.tickS / pl.hp
		for i := range x {
			xPrev[i] = x[i] - r*(x[i]-xm1[i])
		}
		pl.backState(pl.fb.xm1, x, xPrev)
		d0 := pl.fb.dx0.RawMatrix().Data
		dm1 := pl.fb.dxm1.RawMatrix().Data
		for i := range d0 {
			d0[i] = x[i] - x0[i]
			dm1[i] = pl.fb.xm1[i] - xm1[i]
		}
		if err := pl.evaluate(pl.st.c); err != nil { // rollout from the prediction
			t.Fatal(err)
		}
		pl.roll.Tangent(pl.fb.dX, pl.fb.dx0, pl.fb.dxm1, nil)
		pl.shiftedResiduals()
		predicted := append([]float64(nil), pl.fb.rShift...)
		copy(pl.st.x0, x)
		copy(pl.st.xm1, pl.fb.xm1)
		if err := pl.evaluate(pl.st.c); err != nil {
			t.Fatal(err)
		}
		copy(pl.st.x0, x0)
		copy(pl.st.xm1, xm1)
		var e float64
		for i, v := range predicted {
			e = math.Max(e, math.Abs(v-pl.lz.rfig[i]))
		}
		return e
	}
	e1, e2 := errAt(2e-3), errAt(1e-3)
	t.Logf("largest residual error of the feedback prediction: %g at ε = 2 mm, %g at 1 mm", e1, e2)
	if !(e2 > 0) || !(e1/e2 >= 3 && e1/e2 <= 5) {
		ratio := e1 / e2
		t.Errorf("feedback prediction error %g at ε and %g at ε/2: ratio %g, want about 4", e1, e2, ratio)
	}
}

// TestPlannerBudgetAndFallback: a budget that says no stops the prepare
// iterations (status PlanBudget, one iteration: the feedback QP); Feedback
// without Prepare returns ErrPlannerNotPrepared with the warm start as the
// plan.
func TestPlannerBudgetAndFallback(t *testing.T) {
	cell, cue := demoCell(t)
	nom, err := SimulateNominal(cell, cue, cue.StartS(), 3, NominalSettings{})
	if err != nil {
		t.Fatal(err)
	}
	pl, err := NewPlanner(cell, cue, nom, PlannerSettings{MaxIterations: 5})
	if err != nil {
		t.Fatal(err)
	}
	pt := newPlant(t, cell, nom, cue, 2)
	for i := 1; i < len(pt.x)/3; i++ {
		pt.x[3*i+1] += 0.005
	}
	plan := pl.NewPlan()
	asked := 0
	no := func() bool { asked++; return false }
	if err := pl.Tick(plan, 2, pt.q, pt.qPrev, pt.x, pt.xPrev, no); err != nil {
		t.Fatal(err)
	}
	if asked != 1 || plan.Report.Status != PlanBudget || plan.Report.Iterations != 1 {
		t.Errorf("budget asked %d times, status %v, %d iterations; want 1, budget, 1", asked, plan.Report.Status, plan.Report.Iterations)
	}
	yes := func() bool { return true }
	if err := pl.Tick(plan, 2+cell.TickS, pt.q, pt.qPrev, pt.x, pt.xPrev, yes); err != nil {
		t.Fatal(err)
	}
	if plan.Report.Iterations < 2 || !(plan.Report.PrepareCostAfter <= plan.Report.PrepareCostBefore) {
		t.Errorf("with budget: %d iterations, prepare cost %g → %g", plan.Report.Iterations, plan.Report.PrepareCostBefore, plan.Report.PrepareCostAfter)
	}
	err = pl.Feedback(plan, pt.x, pt.xPrev)
	if !errors.Is(err, ErrPlannerNotPrepared) || plan.Report.Status != PlanFallback {
		t.Errorf("feedback without prepare: error %v, status %v", err, plan.Report.Status)
	}
	for _, v := range plan.Target {
		if math.IsNaN(v) {
			t.Fatal("fallback plan has NaN targets")
		}
	}
}

// TestPlannerSettingsResolve: zero fields take the cell's planner block,
// then the documented defaults; explicit fields win; bad values are errors.
func TestPlannerSettingsResolve(t *testing.T) {
	cell, _ := demoCell(t)
	got, err := PlannerSettings{}.resolve(cell)
	if err != nil {
		t.Fatal(err)
	}
	if got.HorizonSteps != cell.Planner.HorizonSteps || got.HorizonStepS != cell.Planner.HorizonStepS {
		t.Errorf("cell block not used: %d steps of %g s", got.HorizonSteps, got.HorizonStepS)
	}
	if got.TrackingWeight != DefaultTrackingWeight || got.KnotsPerJoint != DefaultKnotsPerJoint || got.MaxIterations != DefaultMaxIterations {
		t.Errorf("defaults not used: %+v", got)
	}
	got, err = PlannerSettings{HorizonSteps: 7, NominalWeight: 3}.resolve(cell)
	if err != nil || got.HorizonSteps != 7 || got.NominalWeight != 3 {
		t.Errorf("explicit fields lost: %+v, %v", got, err)
	}
	for _, bad := range []PlannerSettings{
		{HorizonStepS: 0.001}, // shorter than the tick
		{KnotsPerJoint: 50},   // more knots than steps
		{TrackingWeight: -1},  // negative weight
		{MaxDeviation: math.NaN()},
	} {
		if _, err := bad.resolve(cell); err == nil {
			t.Errorf("%+v accepted", bad)
		}
	}
}

// TestPlannerPredictToMatchesPlant: after a tick, PredictTo's first-order
// prediction of the next state (h_p = tick, no mismatch) agrees with the
// plant's actual next state to second order in the step: within 1% of how
// far the figure moved in that tick (a loose bound; the linearisation
// error is (dc)², tiny next to the motion).
func TestPlannerPredictToMatchesPlant(t *testing.T) {
	cell, cue := demoCell(t)
	nom, err := SimulateNominal(cell, cue, cue.StartS(), 3, NominalSettings{})
	if err != nil {
		t.Fatal(err)
	}
	pl, err := NewPlanner(cell, cue, nom, PlannerSettings{HorizonStepS: cell.TickS})
	if err != nil {
		t.Fatal(err)
	}
	pt := newPlant(t, cell, nom, cue, 2)
	for i := 1; i < len(pt.x)/3; i++ {
		pt.xPrev[3*i+1] -= 0.0005
	}
	plan := pl.NewPlan()
	if err := pl.Tick(plan, 2, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
		t.Fatal(err)
	}
	pred, predPrev := make([]float64, len(pt.x)), make([]float64, len(pt.x))
	pl.PredictTo(pred, predPrev, pt.x)
	before := append([]float64(nil), pt.x...)
	pt.apply(t, plan.Target)
	if pt.grep.Any != 0 {
		t.Fatalf("the guard acted (%v); the check needs the plan applied as sent", pt.grep.Any)
	}
	var moved, miss float64
	for i := range pred {
		moved = math.Max(moved, math.Abs(pt.x[i]-before[i]))
		miss = math.Max(miss, math.Abs(pt.x[i]-pred[i]))
		if predPrev[i] != before[i] {
			t.Fatalf("predicted previous state differs from the observed one at %d", i)
		}
	}
	t.Logf("moved %g m in the tick, prediction missed by %g m", moved, miss)
	if !(moved > 0) || miss > 0.01*moved {
		t.Errorf("prediction missed by %g m; the figure moved %g m", miss, moved)
	}
}
