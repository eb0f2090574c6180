package mpc

import (
	"math"
	"testing"
)

// TestCueAuthorityDemo runs the authority scan over the demo cue and
// checks its shape: windows sorted weakest first, inside the cue, each
// with 0 < MinSingular ≤ MaxSingular and a joint of the cell named. It
// also checks the weakest window's smallest singular value against the
// planner's Gauss-Newton matrix: σ_min² ≤ vᵀ(JᵀJ)v / vᵀv for any v
// (Rayleigh quotient; Golub & Van Loan, Matrix Computations, §8.1), probed
// with every unit knot vector.
func TestCueAuthorityDemo(t *testing.T) {
	cell, cue := demoCell(t)
	nom, err := SimulateNominal(cell, cue, cue.StartS(), cue.EndS(), NominalSettings{})
	if err != nil {
		t.Fatal(err)
	}
	wins, err := CueAuthority(cell, cue, nom, cue.StartS(), cue.EndS(), AuthoritySettings{StrideS: 1})
	if err != nil {
		t.Fatal(err)
	}
	if len(wins) < 5 {
		t.Fatalf("%d windows over a %.1f s cue", len(wins), cue.DurationS())
	}
	names := map[string]bool{}
	for _, n := range cell.JointNames() {
		names[n] = true
	}
	for i, w := range wins {
		if i > 0 && w.MinSingular < wins[i-1].MinSingular {
			t.Errorf("window %d not sorted weakest first", i)
		}
		if w.StartS < cue.StartS()-1e-9 || w.EndS > cue.EndS()+1e-9 {
			t.Errorf("window [%g, %g] outside the cue", w.StartS, w.EndS)
		}
		if !(w.MinSingular > 0) || w.MinSingular > w.MaxSingular {
			t.Errorf("window at %g s: singular values %g, %g", w.StartS, w.MinSingular, w.MaxSingular)
		}
		if !names[w.WeakestJoint] {
			t.Errorf("window at %g s names joint %q", w.StartS, w.WeakestJoint)
		}
	}
	for _, w := range wins[:3] {
		t.Logf("weak window %.2f–%.2f s: σ_min %.3g m/rad (σ_max %.3g, anchor rank %d), weakest joint %s", w.StartS, w.EndS, w.MinSingular, w.MaxSingular, w.AnchorRank, w.WeakestJoint)
	}
	w := wins[0]
	pl, err := NewPlanner(cell, cue, nom, PlannerSettings{})
	if err != nil {
		t.Fatal(err)
	}
	q, qPrev := make([]float64, pl.nq), make([]float64, pl.nq)
	x, xPrev := make([]float64, pl.dim), make([]float64, pl.dim)
	cue.PositionTo(q, w.StartS)
	cue.PositionTo(qPrev, w.StartS-pl.tickS)
	nom.StateTo(x, w.StartS)
	nom.StateTo(xPrev, w.StartS-pl.tickS)
	if err := pl.Prepare(w.StartS, q, qPrev, x, xPrev, nil); err != nil {
		t.Fatal(err)
	}
	for c := range pl.nc {
		var s2 float64
		for k := range pl.steps {
			for r := range pl.nm3 {
				v := pl.lz.jfig.At(k*pl.nm3+r, c) / pl.lz.rowW[k]
				s2 += v * v
			}
		}
		if math.Sqrt(s2) < w.MinSingular*(1-1e-9) {
			t.Errorf("knot %d moves the markers by %g per unit, below σ_min %g", c, math.Sqrt(s2), w.MinSingular)
		}
	}
}
