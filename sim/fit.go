package sim

import (
	"errors"
	"fmt"
	"sort"

	"gonum.org/v1/gonum/mat"
)

// FitRun is one recorded run for a fit: the joints the arms really had at
// every tick and the markers the tracker saw. The figure is taken to be at
// rest at tick 0 (a capture starts with the arms holding still); state k
// of the simulation is the figure after k steps, step k driven by the
// anchors of JointsQ's tick k.
type FitRun struct {
	// JointsQ holds Ticks()+1 joint vectors, tick k at
	// [k·NumJoints:(k+1)·NumJoints], rad or m.
	JointsQ []float64
	// Sightings are the observed markers, any order.
	Sightings []FitSighting
}

// FitSighting is one marker seen at one tick, in the tracker frame.
type FitSighting struct {
	Tick   int // the state it shows, 0 … Ticks
	Marker int // index in Cell.Markers
	PosM   [3]float64
}

// Ticks is the number of steps of the run.
func (r *FitRun) Ticks(nJoints int) int { return len(r.JointsQ)/nJoints - 1 }

// FitProblem is the least-squares problem of a fit: the residuals are the
// simulated markers minus the observed ones, in the tracker frame, m, for
// every sighting of every run, three per sighting in run and sighting
// order. The simulation of a run starts at the rest pose at tick 0's
// joints and steps the figure through the measured joints of every tick
// with the cell's time step.
type FitProblem struct {
	Cell   *Cell // the nominal cell: starting values, and the base of scales
	Params []FitParam
	Runs   []FitRun
	// Settings are the figure model's settings; a zero StepS means the
	// cell's tick period.
	Settings ModelSettings
}

// NumResiduals is 3 × the number of sightings.
func (p *FitProblem) NumResiduals() int {
	n := 0
	for i := range p.Runs {
		n += 3 * len(p.Runs[i].Sightings)
	}
	return n
}

// Check reports the first malformed run (joint vector lengths, sighting
// ticks or markers out of range).
func (p *FitProblem) Check() error {
	nq := p.Cell.NumJoints()
	for i := range p.Runs {
		r := &p.Runs[i]
		if nq == 0 || len(r.JointsQ)%nq != 0 || len(r.JointsQ) < 2*nq {
			return fmt.Errorf("fit run %d: %d joint values are not at least two ticks of %d joints", i, len(r.JointsQ), nq)
		}
		ticks := r.Ticks(nq)
		for j, s := range r.Sightings {
			if s.Tick < 0 || s.Tick > ticks || s.Marker < 0 || s.Marker >= len(p.Cell.Markers) {
				return fmt.Errorf("fit run %d sighting %d: tick %d or marker %d out of range (%d ticks, %d markers)", i, j, s.Tick, s.Marker, ticks, len(p.Cell.Markers))
			}
		}
	}
	if len(p.Params) == 0 {
		return errors.New("fit: no parameters")
	}
	return nil
}

// Residuals writes into r (length NumResiduals) the residuals at parameter
// values theta and, when jac is not nil (NumResiduals × len(Params)), their
// Jacobian. Derivatives come from forward sensitivity through every step
// (the implicit function theorem on each step, as Rollout.ParamTangent),
// starting from the derivative of the rest pose at tick 0: the rest pose
// x* is a fixed point of the step, x* = Φ(x*, x*; θ), so
// (I − ∂Φ/∂x_t − ∂Φ/∂x_{t−1})·dx*/dθ = ∂Φ/∂θ. A model the step cannot
// solve at theta is returned as an error.
func (p *FitProblem) Residuals(r []float64, jac *mat.Dense, theta []float64) error {
	if len(r) != p.NumResiduals() || len(theta) != len(p.Params) {
		panic("sim: FitProblem.Residuals: wrong length")
	}
	if jac != nil {
		if rr, cc := jac.Dims(); rr != len(r) || cc != len(theta) {
			panic("sim: FitProblem.Residuals: Jacobian of the wrong shape")
		}
	}
	cell := WithFitValues(p.Cell, p.Params, theta)
	s := p.Settings
	if s.StepS == 0 {
		s.StepS = p.Cell.TickS
	}
	m, err := NewModel(cell.Figure, cell.StringLinks(), s)
	if err != nil {
		return err
	}
	row := 0
	for i := range p.Runs {
		n := 3 * len(p.Runs[i].Sightings)
		var jr *mat.Dense
		if jac != nil {
			jr = jac.Slice(row, row+n, 0, len(theta)).(*mat.Dense)
		}
		if err := p.runResiduals(r[row:row+n], jr, m, cell, &p.Runs[i]); err != nil {
			return fmt.Errorf("fit run %d: %w", i, err)
		}
		row += n
	}
	return nil
}

// runResiduals is Residuals for one run (r, jac its rows).
func (p *FitProblem) runResiduals(r []float64, jac *mat.Dense, m *Model, cell *Cell, run *FitRun) error {
	nq, n := cell.NumJoints(), m.Dim()
	na := 3 * cell.NumAnchors()
	ticks := run.Ticks(nq)
	cws := cell.NewWorkspace(nil)
	anchors := make([]float64, (ticks+1)*na)
	for k := 0; k <= ticks; k++ {
		cws.AnchorsTo(anchors[k*na:(k+1)*na], run.JointsQ[k*nq:(k+1)*nq])
	}
	ws := m.NewWorkspace()
	x0 := make([]float64, n)
	if err := m.RestPose(ws, x0, anchors[:na]); err != nil {
		return err
	}
	ro := m.NewRollout(ticks)
	if err := ro.Run(x0, x0, anchors[na:]); err != nil {
		return err
	}
	// Sightings by tick.
	order := make([]int, len(run.Sightings))
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return run.Sightings[order[a]].Tick < run.Sightings[order[b]].Tick })
	toTracker := cell.TrackerToWorld.Inverse()
	put := func(k int, x []float64, dx *mat.Dense, next int) int {
		for ; next < len(order) && run.Sightings[order[next]].Tick == k; next++ {
			si := order[next]
			s := run.Sightings[si]
			node := cell.Markers[s.Marker].Node
			pt := toTracker.Apply([3]float64{x[3*node], x[3*node+1], x[3*node+2]})
			for a := range 3 {
				r[3*si+a] = pt[a] - s.PosM[a]
			}
			if jac == nil {
				continue
			}
			for j, fp := range p.Params {
				for a := range 3 {
					var v float64
					if fp.Kind == FitTrackerOffset {
						v = -toTracker.R[3*a+fp.Index]
					} else {
						for c := range 3 {
							v += toTracker.R[3*a+c] * dx.At(3*node+c, j)
						}
					}
					jac.Set(3*si+a, j, v)
				}
			}
		}
		return next
	}
	if jac == nil {
		next := 0
		for k := 0; k <= ticks; k++ {
			x := x0
			if k > 0 {
				x = ro.State(k)
			}
			next = put(k, x, nil, next)
		}
		return nil
	}
	np := len(p.Params)
	dx0 := mat.NewDense(n, np, nil)
	if err := p.restTangent(dx0, m, ws, x0, anchors[:na]); err != nil {
		return err
	}
	next := put(0, x0, dx0, 0)
	// dX ring: state k−2, k−1, k.
	ring := [3]*mat.Dense{mat.NewDense(n, np, nil), mat.NewDense(n, np, nil), mat.NewDense(n, np, nil)}
	nf := 3 * len(m.order)
	rhs := make([]float64, nf*np)
	scratch := make([]float64, nf)
	in := stepInputs{y: make([]float64, n), frames: make([]float64, 4*len(m.rods))}
	for s := range ticks {
		cur, prev := denseRows(dx0, n, np, "dx0"), denseRows(dx0, n, np, "dx0")
		if s >= 1 {
			cur = denseRows(ring[(s-1)%3], n, np, "dX")
		}
		if s >= 2 {
			prev = denseRows(ring[(s-2)%3], n, np, "dX")
		}
		out := ring[s%3]
		m.tangentRHS(&ro.derivs[s], rhs, np, cur, prev, rows{})
		xc, xp := ro.slot(s), ro.slot(s-1)
		for i := range in.y {
			in.y[i] = 2*xc[i] - xp[i]
		}
		in.xc = xc
		in.anchors = anchors[(s+1)*na : (s+2)*na]
		m.setFrames(&in)
		for j, fp := range p.Params {
			m.fitParamGrad(rhs[j:], np, ro.slot(s+1), &in, fp, p.Cell, scratch)
		}
		ro.derivs[s].chol.solve(rhs, np)
		m.scatterNeg(denseRows(out, n, np, "dX"), rhs, np)
		next = put(s+1, ro.slot(s+1), out, next)
	}
	return nil
}

// restTangent writes dx*/dθ of the rest pose x0 at anchors a into dst
// (Dim × len(Params)); ws is scratch.
func (p *FitProblem) restTangent(dst *mat.Dense, m *Model, ws *Workspace, x0, a []float64) error {
	n, np := m.Dim(), len(p.Params)
	xs := make([]float64, n)
	if err := m.Step(ws, xs, x0, x0, a); err != nil {
		return fmt.Errorf("rest pose step: %w", err)
	}
	sc, sp := mat.NewDense(n, n, nil), mat.NewDense(n, n, nil)
	ws.SensitivityMatrices(sc, sp, nil)
	nf := 3 * len(m.order)
	scratch := make([]float64, nf)
	rhs := make([]float64, nf)
	sTheta := mat.NewDense(n, np, nil)
	col := make([]float64, n)
	for j, fp := range p.Params {
		clear(rhs)
		m.fitParamGrad(rhs, 1, ws.x, &ws.in, fp, p.Cell, scratch)
		ws.d.chol.solve(rhs, 1)
		m.scatterNeg(rows{col, 1}, rhs, 1)
		sTheta.SetCol(j, col)
	}
	// I − Sc − Sp.
	sc.Add(sc, sp)
	sc.Scale(-1, sc)
	for i := range n {
		sc.Set(i, i, sc.At(i, i)+1)
	}
	var lu mat.LU
	lu.Factorize(sc)
	if err := lu.SolveTo(dst, false, sTheta); err != nil {
		return fmt.Errorf("rest pose sensitivity: %w", err)
	}
	return nil
}
