package mpc

import (
	"math"
	"testing"
	"time"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/optimize"
)

// smallProblem is a small horizon problem on the demo cell: 10 steps of
// 10 ms, 2 knots per joint (24 variables), the figure pushed 1 mm along y
// at cue time 4 s. Two acceleration constraints are active at the
// solution.
type smallInputs struct {
	tS                 float64
	q, qPrev, x, xPrev []float64
}

func smallProblem(t testing.TB) *Planner {
	cell, cue := demoCell(t)
	nom, err := SimulateNominal(cell, cue, cue.StartS(), 5, NominalSettings{})
	if err != nil {
		t.Fatal(err)
	}
	pl, err := NewPlanner(cell, cue, nom, PlannerSettings{HorizonSteps: 10, HorizonStepS: 0.01, KnotsPerJoint: 2, MaxIterations: 30, StepTolerance: 1e-12})
	if err != nil {
		t.Fatal(err)
	}
	pt := newPlant(t, cell, nom, cue, 4)
	for i := 1; i < len(pt.x)/3; i++ {
		pt.x[3*i+1] += 0.001
		pt.xPrev[3*i+1] += 0.0005
	}
	if err := pl.Prepare(4, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
		t.Fatal(err)
	}
	smallLast = smallInputs{4, pt.q, pt.qPrev, pt.x, pt.xPrev}
	return pl
}

// smallLast holds the inputs of the last smallProblem's Prepare.
var smallLast smallInputs

// gaussNewtonSolve runs the planner's Gauss-Newton iterations to
// convergence on the prepared problem (Prepare did up to MaxIterations−1
// with line search; Feedback with the predicted state takes the last QP
// step) and returns the true cost of the result and the knots.
func gaussNewtonSolve(t testing.TB, pl *Planner) (float64, []float64) {
	plan := pl.NewPlan()
	x0 := append([]float64(nil), pl.st.x0...)
	// Feedback takes the state one tick back; rebuild it from x(t−h_p).
	xPrev := make([]float64, len(x0))
	r := pl.tickS / pl.hp
	for i := range xPrev {
		xPrev[i] = x0[i] - r*(x0[i]-pl.st.xm1[i])
	}
	if err := pl.Feedback(plan, x0, xPrev); err != nil {
		t.Fatal(err)
	}
	c := append([]float64(nil), pl.st.c...)
	if err := pl.evaluate(c); err != nil {
		t.Fatal(err)
	}
	return pl.lz.cost, c
}

// penaltyCost is the planner's true cost plus a quadratic penalty ρ·v² on
// every constraint violation v (the constraints the QP enforces), for an
// unconstrained optimiser.
func penaltyCost(t testing.TB, pl *Planner, c []float64) float64 {
	if err := pl.evaluate(c); err != nil {
		return math.Inf(1)
	}
	const rho = 1e6
	f := pl.lz.cost
	for _, r := range pl.qp.cons.rows {
		cd := &pl.qp.cons.cand[r]
		v := pl.candidateValue(r, c)
		if v < cd.lo {
			f += rho * (cd.lo - v) * (cd.lo - v)
		} else if v > cd.hi {
			f += rho * (v - cd.hi) * (v - cd.hi)
		}
	}
	for _, v := range c {
		if e := math.Abs(v) - pl.set.MaxDeviation; e > 0 {
			f += rho * e * e
		}
	}
	return f
}

// optimizeSolve minimises the same cost with gonum optimize's BFGS and
// central finite-difference gradients from gonum diff/fd.
func optimizeSolve(t testing.TB, pl *Planner, c0 []float64) (float64, []float64) {
	prob := optimize.Problem{
		Func: func(c []float64) float64 { return penaltyCost(t, pl, c) },
		Grad: func(grad, c []float64) {
			fd.Gradient(grad, func(c []float64) float64 { return penaltyCost(t, pl, c) }, c,
				&fd.Settings{Formula: fd.Central, Step: 1e-6})
		},
	}
	res, err := optimize.Minimize(prob, c0, &optimize.Settings{GradientThreshold: 1e-10, MajorIterations: 500}, &optimize.BFGS{})
	if err != nil && res == nil {
		t.Fatal(err)
	}
	return res.F, res.X
}

// TestPlannerCostNoWorseThanOptimize: on a small horizon problem the
// planner's converged cost is no worse than a general-purpose quasi-Newton
// method's (gonum optimize BFGS, finite-difference gradients, constraints
// by penalty) to 1e-6 relative (issue 4 §4; DESIGN §9). The tolerance is
// the finite-difference gradient's accuracy: BFGS stops where the
// gradient error (≈1e-10 here) hides further decrease.
func TestPlannerCostNoWorseThanOptimize(t *testing.T) {
	pl := smallProblem(t)
	start := append([]float64(nil), pl.st.c...)
	gn, _ := gaussNewtonSolve(t, pl)
	if pl.qp.lastActive != 0 {
		t.Logf("%d constraints active at the Gauss-Newton solution", pl.qp.lastActive)
	}
	bfgs, _ := optimizeSolve(t, pl, start)
	t.Logf("Gauss-Newton cost %.12g, BFGS cost %.12g", gn, bfgs)
	if gn > bfgs*(1+1e-6) {
		t.Errorf("Gauss-Newton cost %.12g is worse than BFGS's %.12g", gn, bfgs)
	}
}

// BenchmarkPlannerVersusOptimize solves the same small horizon problem with
// the planner's Gauss-Newton iterations (Prepare with up to 30 iterations,
// then Feedback) and with gonum optimize's BFGS (finite-difference
// gradients, constraints by penalty) from the same zero start, and reports
// both costs and the time ratio (DESIGN §8).
func BenchmarkPlannerVersusOptimize(b *testing.B) {
	var gnTime, bfgsTime time.Duration
	var gnCost, bfgsCost float64
	for range b.N {
		pl := smallProblem(b)
		start := make([]float64, pl.nc)
		in := smallLast
		pl.st.have = false // the same cold start as BFGS
		t0 := time.Now()
		if err := pl.Prepare(in.tS, in.q, in.qPrev, in.x, in.xPrev, nil); err != nil {
			b.Fatal(err)
		}
		gnCost, _ = gaussNewtonSolve(b, pl)
		gnTime += time.Since(t0)
		t0 = time.Now()
		bfgsCost, _ = optimizeSolve(b, pl, start)
		bfgsTime += time.Since(t0)
	}
	b.ReportMetric(gnCost, "gn-cost")
	b.ReportMetric(bfgsCost, "bfgs-cost")
	b.ReportMetric(float64(gnTime.Microseconds())/float64(b.N), "gn-µs")
	b.ReportMetric(float64(bfgsTime.Microseconds())/float64(b.N), "bfgs-µs")
	b.ReportMetric(float64(bfgsTime)/float64(gnTime), "speed-ratio")
}
