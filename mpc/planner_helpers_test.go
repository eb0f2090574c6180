package mpc

import (
	"os"
	"testing"

	"tautline/sim"
)

// demoCell loads the invented demo cell and its cue (testdata/demo).
func demoCell(t testing.TB) (*sim.Cell, *Cue) {
	t.Helper()
	cell, err := sim.LoadCell("../testdata/demo/cell.json", os.ReadFile)
	if err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile("../testdata/demo/cue.csv")
	if err != nil {
		t.Fatal(err)
	}
	cue, err := ParseCue("cue.csv", data, CueJointsOf(cell), CueSettings{TickS: cell.TickS})
	if err != nil {
		t.Fatal(err)
	}
	return cell, cue
}

// plant is the simulated cell used in closed-loop tests: the cell's own
// model stepped at the tick (no mismatch), the guard applied to every
// command as the server applies it.
type plant struct {
	cell        *sim.Cell
	cws         *sim.CellWorkspace
	guard       *Guard
	grep        GuardReport
	x, xPrev    []float64
	q, qPrev    []float64
	xNext, wish []float64
}

func newPlant(t testing.TB, cell *sim.Cell, nom *Nominal, cue JointSchedule, t0 float64) *plant {
	t.Helper()
	model, err := cell.NewModel(cell.TickS)
	if err != nil {
		t.Fatal(err)
	}
	var bounds []JointBounds
	for _, l := range cell.JointLimits() {
		bounds = append(bounds, JointBounds{Name: l.Name, Lower: l.Lower, Upper: l.Upper, MaxVelocity: l.MaxVelocity, MaxAccel: l.MaxAccel})
	}
	g, err := NewGuard(bounds, cell.TickS)
	if err != nil {
		t.Fatal(err)
	}
	dim, nq := model.Dim(), cell.NumJoints()
	p := &plant{cell: cell, cws: cell.NewWorkspace(model), guard: g,
		x: make([]float64, dim), xPrev: make([]float64, dim), xNext: make([]float64, dim),
		q: make([]float64, nq), qPrev: make([]float64, nq), wish: make([]float64, nq)}
	nom.StateTo(p.x, t0)
	nom.StateTo(p.xPrev, t0-cell.TickS)
	cue.PositionTo(p.q, t0)
	cue.PositionTo(p.qPrev, t0-cell.TickS)
	return p
}

// apply sends wish through the guard and steps the figure one tick.
func (p *plant) apply(t testing.TB, wish []float64) {
	t.Helper()
	p.guard.Apply(p.wish, wish, p.q, p.qPrev, &p.grep)
	if err := p.cws.Step(p.xNext, p.x, p.xPrev, p.wish); err != nil {
		t.Fatal(err)
	}
	p.xPrev, p.x, p.xNext = p.x, p.xNext, p.xPrev
	p.qPrev, p.q, p.wish = p.q, p.wish, p.qPrev
}
