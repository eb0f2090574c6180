package mpc

import (
	"math"
	"testing"
)

// TestNominalStartsAtRestAndFollowsTheModel: the nominal starts at the
// figure's static equilibrium (holding the start pose for one step leaves
// it where it is, to 1e-8 m: a hundred times the rest pose's and the step's
// Newton tolerances of 1e-10 m mass-scaled),
// and its samples are the cell model stepped at the tick under the cue
// (re-stepped here independently and compared to 1e-12 m, rounding), with
// MarkersTo interpolating linearly between samples.
func TestNominalStartsAtRestAndFollowsTheModel(t *testing.T) {
	cell, cue := demoCell(t)
	nom, err := SimulateNominal(cell, cue, cue.StartS(), 1.5, NominalSettings{TailS: -1})
	if err != nil {
		t.Fatal(err)
	}
	if got, want := nom.EndS(), 1.5; math.Abs(got-want) > 1e-9 {
		t.Errorf("EndS %g, want %g", got, want)
	}
	model, err := cell.NewModel(cell.TickS)
	if err != nil {
		t.Fatal(err)
	}
	cws := cell.NewWorkspace(model)
	dim, nq := model.Dim(), cell.NumJoints()
	x0 := make([]float64, dim)
	nom.StateTo(x0, cue.StartS())
	q := make([]float64, nq)
	cue.PositionTo(q, cue.StartS())
	held := make([]float64, dim)
	if err := cws.Step(held, x0, x0, q); err != nil {
		t.Fatal(err)
	}
	for i := range held {
		if d := math.Abs(held[i] - x0[i]); d > 1e-8 {
			t.Fatalf("the start state is not at rest: coordinate %d moves %g m in one step", i, d)
		}
	}
	x, xPrev, xNext := append([]float64(nil), x0...), append([]float64(nil), x0...), make([]float64, dim)
	want := make([]float64, dim)
	for k := 1; k <= 100; k++ {
		tS := cue.StartS() + float64(k)*cell.TickS
		cue.PositionTo(q, tS)
		if err := cws.Step(xNext, x, xPrev, q); err != nil {
			t.Fatal(err)
		}
		x, xPrev, xNext = xNext, x, xPrev
		nom.StateTo(want, tS)
		for i := range x {
			if d := math.Abs(x[i] - want[i]); d > 1e-12 {
				t.Fatalf("step %d coordinate %d: nominal %g, model %g", k, i, want[i], x[i])
			}
		}
	}
	// Half-way between two samples the markers are the mean of the two.
	a, b, mid := make([]float64, 3*len(cell.Markers)), make([]float64, 3*len(cell.Markers)), make([]float64, 3*len(cell.Markers))
	nom.MarkersTo(a, 1.0)
	nom.MarkersTo(b, 1.0+cell.TickS)
	nom.MarkersTo(mid, 1.0+cell.TickS/2)
	for i := range mid {
		if d := math.Abs(mid[i] - (a[i]+b[i])/2); d > 1e-12 {
			t.Errorf("marker coordinate %d half-way: %g, want %g", i, mid[i], (a[i]+b[i])/2)
		}
	}
	if n := testing.AllocsPerRun(10, func() { nom.MarkersTo(mid, 0.7) }); n != 0 {
		t.Errorf("MarkersTo allocates %v times", n)
	}
}
