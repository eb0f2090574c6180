package mpc

import (
	"testing"
)

// benchSetup returns a planner on the demo cell, warmed up over 20 ticks of
// closed loop from cue time 1 s, and the plant state there.
func benchSetup(b *testing.B, s PlannerSettings) (*Planner, *plant, *Plan, float64) {
	cell, cue := demoCell(b)
	nom, err := SimulateNominal(cell, cue, cue.StartS(), 3, NominalSettings{})
	if err != nil {
		b.Fatal(err)
	}
	pl, err := NewPlanner(cell, cue, nom, s)
	if err != nil {
		b.Fatal(err)
	}
	ts := 1.0
	pt := newPlant(b, cell, nom, cue, ts)
	plan := pl.NewPlan()
	for range 20 {
		if err := pl.Tick(plan, ts, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
			b.Fatal(err)
		}
		pt.apply(b, plan.Target)
		ts += cell.TickS
	}
	return pl, pt, plan, ts
}

// BenchmarkPlannerDemoTick is one whole tick (prepare + feedback) on the
// demo cell, repeated at the same tick time and state.
func BenchmarkPlannerDemoTick(b *testing.B) {
	pl, pt, plan, ts := benchSetup(b, PlannerSettings{})
	b.ReportAllocs()
	b.ResetTimer()
	for range b.N {
		if err := pl.Tick(plan, ts, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkPlannerDemoPrepare is the prepare phase alone.
func BenchmarkPlannerDemoPrepare(b *testing.B) {
	pl, pt, _, ts := benchSetup(b, PlannerSettings{})
	b.ReportAllocs()
	b.ResetTimer()
	for range b.N {
		if err := pl.Prepare(ts, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkPlannerDemoFeedback is the feedback phase alone
// (observation → command), after one prepare.
func BenchmarkPlannerDemoFeedback(b *testing.B) {
	pl, pt, plan, ts := benchSetup(b, PlannerSettings{})
	if err := pl.Prepare(ts, pt.q, pt.qPrev, pt.x, pt.xPrev, nil); err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for range b.N {
		pl.st.prep = true
		if err := pl.Feedback(plan, pt.x, pt.xPrev); err != nil {
			b.Fatal(err)
		}
	}
}
