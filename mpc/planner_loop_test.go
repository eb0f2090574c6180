package mpc

import (
	"math"
	"testing"
)

// loopRun is one closed- or open-loop run on the demo cell.
type loopRun struct {
	maxCorr     float64   // largest |correction| sent, rad
	errAfter    []float64 // largest marker error from the reference, per tick, m
	worstStatus PlanStatus
}

// runDemoLoop runs the demo cell for ticks ticks from cue time t0, the
// plant being the planner's own model at the tick (no mismatch). push
// (m/s, along y) is given to every free node at t0. control false plays
// the cue open loop through the guard.
func runDemoLoop(t testing.TB, s PlannerSettings, t0, push float64, ticks int, control bool) loopRun {
	t.Helper()
	cell, cue := demoCell(t)
	nom, err := SimulateNominal(cell, cue, cue.StartS(), t0+float64(ticks+1)*cell.TickS+1, NominalSettings{})
	if err != nil {
		t.Fatal(err)
	}
	pl, err := NewPlanner(cell, cue, nom, s)
	if err != nil {
		t.Fatal(err)
	}
	pt := newPlant(t, cell, nom, cue, t0)
	for i := range len(pt.x) / 3 {
		if !cell.Figure.Nodes[i].Anchored {
			pt.xPrev[3*i+1] -= push * cell.TickS
		}
	}
	plan := pl.NewPlan()
	ref := make([]float64, 3*len(cell.Markers))
	nominal := make([]float64, cell.NumJoints())
	var run loopRun
	for k := range ticks {
		tS := t0 + float64(k)*cell.TickS
		wish := nominal
		cue.PositionTo(nominal, tS+cell.TickS)
		if control {
			if err := pl.Tick(plan, tS, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
				t.Fatalf("tick %d: %v", k, err)
			}
			wish = plan.Target
			run.worstStatus = max(run.worstStatus, plan.Report.Status)
			for _, c := range plan.Correction {
				run.maxCorr = math.Max(run.maxCorr, math.Abs(c))
			}
		}
		pt.apply(t, wish)
		nom.MarkersTo(ref, tS+cell.TickS)
		var worst float64
		for m, mk := range cell.Markers {
			var d2 float64
			for a := range 3 {
				d := pt.x[3*mk.Node+a] - ref[3*m+a]
				d2 += d * d
			}
			worst = math.Max(worst, math.Sqrt(d2))
		}
		run.errAfter = append(run.errAfter, worst)
	}
	return run
}

// TestPlannerNoPushNoCorrection: on the nominal model with the figure on
// its reference, the planner has nothing to correct: the corrections stay
// at numerical zero (1e-9 rad, far above the 1e-14 rad that rounding in the
// cue times gives, far below any real correction) and the figure stays on
// its reference. This holds with the default h_p of 25 ms against the
// plant's 10 ms tick because the planner tracks offset-free (Planner doc):
// without that, the model's discretisation error made corrections of
// 3.6 mrad and moved markers 7.8 mm off a reference the open-loop plant
// follows exactly (measured when written). Also with h_p equal to the
// tick, where the planner's model is the plant's.
func TestPlannerNoPushNoCorrection(t *testing.T) {
	for _, s := range []PlannerSettings{{}, {HorizonStepS: 0.01}} {
		run := runDemoLoop(t, s, 2.0, 0, 100, true)
		if run.maxCorr > 1e-9 {
			t.Errorf("h_p %g s: largest correction %g rad with no push, want ≤ 1e-9", s.HorizonStepS, run.maxCorr)
		}
		var worst float64
		for _, e := range run.errAfter {
			worst = math.Max(worst, e)
		}
		if worst > 1e-9 {
			t.Errorf("h_p %g s: figure left its reference by %g m with no push", s.HorizonStepS, worst)
		}
	}
}

// TestPlannerPushRecovers: every free node of the demo figure is pushed at
// 0.05 m/s along y at cue time 2 s; on the nominal model (the planner's
// default settings, h_p = 25 ms against the plant's 10 ms tick, so the
// planner's model differs from the plant by its discretisation only) the
// planner brings every marker back within 15 mm of its reference within
// 1.5 s and holds it there, and its summed squared marker error over the
// 2 s is at most 70% of open-loop playback's. Measured when written (2-core
// machine, deterministic): 6.6 mm against open loop's 22 mm, ratio 0.40;
// the bounds leave room for small numerical changes in sim, not for a
// planner that stops acting. With a 0.2 m/s push the ratio was 0.68 (before
// offset-free tracking): the
// arms' acceleration limits (3 rad/s² at the shoulders) bound how fast a
// large swing can be taken out.
//
// The same holds with one knot per step (KnotsPerJoint = HorizonSteps) at
// the default quadratic degree: a regression check for tick targets taken
// off the B-spline itself, which bends between steps when its spans are
// as short as a step; the model never sees that path and the loop went
// unstable (ratio 4.7, measured).
func TestPlannerPushRecovers(t *testing.T) {
	const ticks = 200
	open := runDemoLoop(t, PlannerSettings{}, 2.0, 0.05, ticks, false)
	for _, s := range []PlannerSettings{{}, {KnotsPerJoint: 20}} {
		closed := runDemoLoop(t, s, 2.0, 0.05, ticks, true)
		var sumClosed, sumOpen, lateClosed, lateOpen float64
		for k := range ticks {
			sumClosed += closed.errAfter[k] * closed.errAfter[k]
			sumOpen += open.errAfter[k] * open.errAfter[k]
			if k >= 150 {
				lateClosed = math.Max(lateClosed, closed.errAfter[k])
				lateOpen = math.Max(lateOpen, open.errAfter[k])
			}
		}
		t.Logf("knots %d: largest marker error from 1.5 s to 2 s after the push: closed loop %.4f m, open loop %.4f m", s.KnotsPerJoint, lateClosed, lateOpen)
		t.Logf("knots %d: summed squared error ratio closed/open %.3f; largest correction %.4f rad; worst status %v", s.KnotsPerJoint, sumClosed/sumOpen, closed.maxCorr, closed.worstStatus)
		if lateClosed > 0.015 {
			t.Errorf("knots %d: 1.5 s after the push a marker is still %.4f m from its reference, want ≤ 0.015 m", s.KnotsPerJoint, lateClosed)
		}
		if sumClosed > 0.7*sumOpen {
			t.Errorf("knots %d: closed-loop summed squared error %.4g is more than 70%% of open loop's %.4g", s.KnotsPerJoint, sumClosed, sumOpen)
		}
		if closed.worstStatus == PlanFallback {
			t.Errorf("knots %d: a tick fell back to the warm start", s.KnotsPerJoint)
		}
	}
}
