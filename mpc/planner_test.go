package mpc

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
)

// preparedDemo returns a demo-cell planner prepared at cue time tS with the
// figure on its nominal state, except that every free node is displaced by
// pushM along y (a push already under way), so the tracking residuals are
// not zero.
func preparedDemo(t *testing.T, s PlannerSettings, tS, pushM float64) *Planner {
	t.Helper()
	cell, cue := demoCell(t)
	nom, err := SimulateNominal(cell, cue, cue.StartS(), tS+1, NominalSettings{})
	if err != nil {
		t.Fatal(err)
	}
	pl, err := NewPlanner(cell, cue, nom, s)
	if err != nil {
		t.Fatal(err)
	}
	pt := newPlant(t, cell, nom, cue, tS)
	for i := 1; i < len(pt.x)/3; i++ {
		pt.x[3*i+1] += pushM
		pt.xPrev[3*i+1] += pushM / 2
	}
	if err := pl.Prepare(tS, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
		t.Fatal(err)
	}
	return pl
}

// residualsAt evaluates the stacked residual vector [rfig; rlin] at knots c.
func residualsAt(t *testing.T, pl *Planner, dst, c []float64) {
	if err := pl.evaluate(c); err != nil {
		t.Fatal(err)
	}
	copy(dst, pl.lz.rfig)
	copy(dst[len(pl.lz.rfig):], pl.lz.rlin)
}

// TestPlannerJacobianMatchesFiniteDifferences checks the Gauss-Newton
// Jacobian (forward sensitivities through the rollout and the constant
// linear terms) against central differences of the true residuals
// (gonum diff/fd). Tolerance: the central difference's truncation error is
// O(h²·r”') with h = 1e-6 rad and the rollout is converged to 1e-10 m, so
// entries agree to about 1e-6 of the largest entry.
func TestPlannerJacobianMatchesFiniteDifferences(t *testing.T) {
	pl := preparedDemo(t, PlannerSettings{HorizonSteps: 8}, 4.0, 0.01)
	nr := len(pl.lz.rfig) + len(pl.lz.rlin)
	c0 := append([]float64(nil), pl.st.c...)
	want := mat.NewDense(nr, pl.nc, nil)
	fd.Jacobian(want, func(y, x []float64) { residualsAt(t, pl, y, x) }, c0,
		&fd.JacobianSettings{Formula: fd.Central, Step: 1e-6})
	if err := pl.evaluate(c0); err != nil {
		t.Fatal(err)
	}
	if err := pl.linearise(); err != nil {
		t.Fatal(err)
	}
	got := mat.NewDense(nr, pl.nc, nil)
	got.Slice(0, len(pl.lz.rfig), 0, pl.nc).(*mat.Dense).Copy(pl.lz.jfig)
	got.Slice(len(pl.lz.rfig), nr, 0, pl.nc).(*mat.Dense).Copy(pl.lz.lin)
	scale := mat.Norm(want, math.Inf(1))
	var diff mat.Dense
	diff.Sub(got, want)
	if e := mat.Norm(&diff, math.Inf(1)); e > 1e-6*scale {
		t.Errorf("Jacobian differs from finite differences by %g (scale %g)", e, scale)
	}
}

// TestPlannerStepEqualsLeastSquares checks that with no active constraint
// one Gauss-Newton step is the dense linear least-squares solution of
// min ‖J·dc + r‖² + μ‖dc‖², computed by gonum mat (QR of the stacked
// matrix [J; √μ·I]): the normal equations the planner solves and the QR
// solution agree to 1e-9 relative (issue 4 §4; a standard result, e.g.
// Nocedal & Wright, Numerical Optimization, §10.3).
func TestPlannerStepEqualsLeastSquares(t *testing.T) {
	pl := preparedDemo(t, PlannerSettings{HorizonStepS: 0.01}, 4.0, 1e-4)
	if err := pl.solveQP(pl.lz.g); err != nil {
		t.Fatal(err)
	}
	if pl.qp.lastActive != 0 {
		t.Fatal("the step hits a constraint; this check needs an unconstrained step")
	}
	nf, nl, nc := len(pl.lz.rfig), len(pl.lz.rlin), pl.nc
	a := mat.NewDense(nf+nl+nc, nc, nil)
	a.Slice(0, nf, 0, nc).(*mat.Dense).Copy(pl.lz.jfig)
	a.Slice(nf, nf+nl, 0, nc).(*mat.Dense).Copy(pl.lz.lin)
	for i := range nc {
		a.Set(nf+nl+i, i, math.Sqrt(pl.set.Regularisation))
	}
	b := mat.NewVecDense(nf+nl+nc, nil)
	for i, v := range pl.lz.rfig {
		b.SetVec(i, -v)
	}
	for i, v := range pl.lz.rlin {
		b.SetVec(nf+i, -v)
	}
	var want mat.VecDense
	if err := want.SolveVec(a, b); err != nil {
		t.Fatal(err)
	}
	if floats.Norm(pl.lz.dc, 2) == 0 {
		t.Fatal("zero step: the check would be empty")
	}
	diff := make([]float64, nc)
	floats.SubTo(diff, pl.lz.dc, want.RawVector().Data)
	if rel := floats.Norm(diff, 2) / floats.Norm(want.RawVector().Data, 2); rel > 1e-9 {
		t.Errorf("Gauss-Newton step differs from the least-squares solution by %g relative", rel)
	}
}

// TestPlannerTickAllocatesNothing: after the first tick, a whole tick
// (prepare with iterations and line search, feedback) allocates nothing
// (DESIGN §3, the hot path works in buffers sized once).
func TestPlannerTickAllocatesNothing(t *testing.T) {
	cell, cue := demoCell(t)
	nom, err := SimulateNominal(cell, cue, cue.StartS(), 3, NominalSettings{})
	if err != nil {
		t.Fatal(err)
	}
	pl, err := NewPlanner(cell, cue, nom, PlannerSettings{MaxIterations: 3})
	if err != nil {
		t.Fatal(err)
	}
	pt := newPlant(t, cell, nom, cue, 2)
	for i := 1; i < len(pt.x)/3; i++ {
		pt.xPrev[3*i+1] -= 0.001
	}
	plan := pl.NewPlan()
	tS := 2.0
	x2 := append([]float64(nil), pt.x...)
	budget := func() bool { return true }
	tick := func() {
		if err := pl.Prepare(tS, pt.q, pt.qPrev, pt.x, pt.xPrev, budget); err != nil {
			t.Fatal(err)
		}
		x2[5] += 1e-6
		if err := pl.Feedback(plan, x2, pt.xPrev); err != nil {
			t.Fatal(err)
		}
		tS += cell.TickS
	}
	tick()
	if n := testing.AllocsPerRun(20, tick); n != 0 {
		t.Errorf("a tick allocates %v times, want 0", n)
	}
	if plan.Report.Iterations < 2 {
		t.Errorf("only %d iterations: the check did not exercise the prepare iterations", plan.Report.Iterations)
	}
}
