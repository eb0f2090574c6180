package mpc_test

import (
	"fmt"
	"math"
	"os"

	"tautline/mpc"
	"tautline/sim"
)

// One tick of the planner on the demo cell, the two phases of the
// real-time iteration: Prepare before the observation, Feedback after it.
// The figure is exactly on its nominal motion, so there is nothing to
// correct.
func ExamplePlanner() {
	cell, err := sim.LoadCell("../testdata/demo/cell.json", os.ReadFile)
	if err != nil {
		panic(err)
	}
	data, err := os.ReadFile("../testdata/demo/cue.csv")
	if err != nil {
		panic(err)
	}
	cue, err := mpc.ParseCue("cue.csv", data, mpc.CueJointsOf(cell), mpc.CueSettings{TickS: cell.TickS})
	if err != nil {
		panic(err)
	}
	nom, err := mpc.SimulateNominal(cell, cue, cue.StartS(), 3, mpc.NominalSettings{})
	if err != nil {
		panic(err)
	}
	pl, err := mpc.NewPlanner(cell, cue, nom, mpc.PlannerSettings{})
	if err != nil {
		panic(err)
	}
	plan := pl.NewPlan()

	t := 2.0 // cue time of this tick, s
	q, qPrev := make([]float64, cell.NumJoints()), make([]float64, cell.NumJoints())
	cue.PositionTo(q, t) // the commands sent for t and t − Δt
	cue.PositionTo(qPrev, t-cell.TickS)
	model, _ := cell.NewModel(cell.TickS)
	x, xPrev := make([]float64, model.Dim()), make([]float64, model.Dim())
	nom.StateTo(x, t) // the estimator's prediction and, below, its estimate
	nom.StateTo(xPrev, t-cell.TickS)

	if err := pl.Prepare(t, q, qPrev, x, xPrev, nil); err != nil {
		panic(err)
	}
	if err := pl.Feedback(plan, x, xPrev); err != nil {
		panic(err)
	}
	var largest float64
	for _, c := range plan.Correction {
		largest = math.Max(largest, math.Abs(c))
	}
	fmt.Printf("target for %.2f s, status %v, %d iteration, correction below 1e-9 rad: %v\n",
		plan.TimeS, plan.Report.Status, plan.Report.Iterations, largest < 1e-9)
	// Output:
	// target for 2.01 s, status ok, 1 iteration, correction below 1e-9 rad: true
}
