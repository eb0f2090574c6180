package mpc

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// referenceOnly hides a Nominal's states, so the planner tracks its
// markers as given (as with a reference file).
type referenceOnly struct{ nom *Nominal }

func (r referenceOnly) MarkersTo(dst []float64, tS float64) { r.nom.MarkersTo(dst, tS) }

// shiftedReference is a reference moved by −offset.
type shiftedReference struct {
	nom    *Nominal
	offset []float64
}

func (r shiftedReference) MarkersTo(dst []float64, tS float64) {
	r.nom.MarkersTo(dst, tS)
	for i, v := range r.offset {
		dst[i] -= v
	}
}

// TestPlannerMarkerOffsetIsAShiftedReference: by its definition a marker
// offset d turns the tracking residual p(x) − r into p(x) + d − r, which is
// tracking the reference r − d. So a planner given d must plan bit for bit
// what a planner following the shifted reference plans (the same
// subtraction, in the same order), tick after tick on the demo cell while
// the plant follows the plans; and the plans must differ from those of a
// planner without the offset, or the check would say nothing. Clearing the
// offset (nil) must give back the plain planner's plan exactly.
func TestPlannerMarkerOffsetIsAShiftedReference(t *testing.T) {
	cell, cue := demoCell(t)
	const t0, ticks = 2.0, 20
	nom, err := SimulateNominal(cell, cue, cue.StartS(), t0+1, NominalSettings{})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 2002))
	offset := make([]float64, 3*len(cell.Markers))
	for i := range offset {
		offset[i] = 0.02 * (2*rng.Float64() - 1)
	}
	newPl := func(ref MarkerReference) *Planner {
		pl, err := NewPlanner(cell, cue, ref, PlannerSettings{})
		if err != nil {
			t.Fatal(err)
		}
		return pl
	}
	withOffset := newPl(referenceOnly{nom})
	withOffset.SetMarkerOffset(offset)
	shifted := newPl(shiftedReference{nom, offset})
	plain := newPl(referenceOnly{nom})
	cleared := newPl(referenceOnly{nom})
	cleared.SetMarkerOffset(offset)
	cleared.SetMarkerOffset(nil)
	pt := newPlant(t, cell, nom, cue, t0)
	plans := map[*Planner]*Plan{}
	for _, pl := range []*Planner{withOffset, shifted, plain, cleared} {
		plans[pl] = pl.NewPlan()
	}
	var largestDiff float64
	for k := range ticks {
		tS := t0 + float64(k)*cell.TickS
		for pl, plan := range plans {
			if err := pl.Tick(plan, tS, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
				t.Fatalf("tick %d: %v", k, err)
			}
		}
		if !slices.Equal(plans[withOffset].Target, plans[shifted].Target) || !slices.Equal(plans[withOffset].Preview, plans[shifted].Preview) {
			t.Fatalf("tick %d: the plan with the offset differs from the plan for the shifted reference", k)
		}
		if !slices.Equal(plans[plain].Target, plans[cleared].Target) {
			t.Fatalf("tick %d: a cleared offset still changes the plan", k)
		}
		for j, v := range plans[withOffset].Target {
			largestDiff = math.Max(largestDiff, math.Abs(v-plans[plain].Target[j]))
		}
		pt.apply(t, plans[withOffset].Target)
	}
	t.Logf("largest target difference from the plain planner: %.4f rad", largestDiff)
	if largestDiff < 1e-4 {
		t.Errorf("a 2 cm marker offset moved the targets by only %g rad", largestDiff)
	}
}

// TestPlannerMarkerOffsetAllocatesNothing: setting the offset every tick
// and planning allocates nothing after the first call (testing.AllocsPerRun).
func TestPlannerMarkerOffsetAllocatesNothing(t *testing.T) {
	cell, cue := demoCell(t)
	const t0 = 2.0
	nom, err := SimulateNominal(cell, cue, cue.StartS(), t0+1, NominalSettings{})
	if err != nil {
		t.Fatal(err)
	}
	pl, err := NewPlanner(cell, cue, nom, PlannerSettings{})
	if err != nil {
		t.Fatal(err)
	}
	pt := newPlant(t, cell, nom, cue, t0)
	plan := pl.NewPlan()
	offset := make([]float64, 3*len(cell.Markers))
	tS := t0
	tick := func() {
		offset[0] += 1e-4
		pl.SetMarkerOffset(offset)
		if err := pl.Tick(plan, tS, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
			t.Fatal(err)
		}
		tS += cell.TickS
	}
	tick()
	if a := testing.AllocsPerRun(10, tick); a != 0 {
		t.Errorf("SetMarkerOffset + Tick allocates %v times per tick, want 0", a)
	}
}
