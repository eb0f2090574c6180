package mpc

import (
	"fmt"
	"math"

	"tautline/sim"
)

// NominalSettings configures SimulateNominal. The zero value means the
// documented defaults.
type NominalSettings struct {
	// StepS is the simulation step. 0: the cell's tick, so a plant stepped
	// at the tick from the same rest pose reproduces the nominal exactly.
	StepS float64
	// TailS is simulated after the cue's end, with the arms holding the
	// last pose, so the reference settles as the figure would. 0: 2 s;
	// negative: none.
	TailS float64
}

// Nominal is the cue simulated on the cell's figure model from the settled
// rest pose at the cue's start: the reference when no reference file is
// given. It keeps every simulated state and the markers, sampled at
// StepS; between samples values are interpolated linearly in time, and
// held before the first and after the last sample. It is immutable after
// SimulateNominal; evaluation allocates nothing.
type Nominal struct {
	startS, stepS float64
	dim, nm3      int
	samples       int
	states        []float64 // samples × dim
	markers       []float64 // samples × nm3
}

// SimulateNominal simulates sched from startS to endS (plus the tail) on a
// model of cell's figure. The figure starts at rest, at the static
// equilibrium with the arms at sched's pose at startS.
func SimulateNominal(cell *sim.Cell, sched JointSchedule, startS, endS float64, s NominalSettings) (*Nominal, error) {
	step := s.StepS
	if step == 0 {
		step = cell.TickS
	}
	tail := s.TailS
	switch {
	case tail == 0:
		tail = 2
	case tail < 0:
		tail = 0
	}
	if !(step > 0) || math.IsInf(step, 0) {
		return nil, fmt.Errorf("mpc: nominal step %v s must be positive", step)
	}
	if !(endS >= startS) || math.IsInf(endS-startS, 0) {
		return nil, fmt.Errorf("mpc: nominal span [%v, %v] s is not a finite interval", startS, endS)
	}
	model, err := cell.NewModel(step)
	if err != nil {
		return nil, fmt.Errorf("mpc: nominal model: %w", err)
	}
	cws := cell.NewWorkspace(model)
	nq, dim := cell.NumJoints(), model.Dim()
	n := &Nominal{startS: startS, stepS: step, dim: dim, nm3: 3 * len(cell.Markers)}
	n.samples = int(math.Ceil((endS-startS+tail)/step-1e-9)) + 1
	n.states = make([]float64, n.samples*dim)
	n.markers = make([]float64, n.samples*n.nm3)

	q := make([]float64, nq)
	anchors := make([]float64, 3*cell.NumAnchors())
	sched.PositionTo(q, startS)
	cws.AnchorsTo(anchors, q)
	if err := model.RestPose(cws.StepWorkspace(), n.states[:dim], anchors); err != nil {
		return nil, fmt.Errorf("mpc: nominal rest pose at %v s: %w", startS, err)
	}
	for k := 1; k < n.samples; k++ {
		prev := n.states[(k-1)*dim : k*dim]
		prev2 := prev
		if k >= 2 {
			prev2 = n.states[(k-2)*dim : (k-1)*dim]
		}
		sched.PositionTo(q, math.Min(startS+float64(k)*step, endS))
		if err := cws.Step(n.states[k*dim:(k+1)*dim], prev, prev2, q); err != nil {
			return nil, fmt.Errorf("mpc: nominal at %.4f s: %w", startS+float64(k)*step, err)
		}
	}
	for k := range n.samples {
		x := n.states[k*dim : (k+1)*dim]
		for m, mk := range cell.Markers {
			copy(n.markers[k*n.nm3+3*m:k*n.nm3+3*m+3], x[3*mk.Node:3*mk.Node+3])
		}
	}
	return n, nil
}

// StartS and EndS bound the simulated span, s (EndS includes the tail).
func (n *Nominal) StartS() float64 { return n.startS }

// EndS is the time of the last sample, s.
func (n *Nominal) EndS() float64 { return n.startS + float64(n.samples-1)*n.stepS }

// StepS is the sample spacing, s.
func (n *Nominal) StepS() float64 { return n.stepS }

// MarkersTo writes every marker's nominal position at cue time tS, in the
// cell's marker order, x, y, z each, m.
func (n *Nominal) MarkersTo(dst []float64, tS float64) {
	if len(dst) != n.nm3 {
		panic("mpc: Nominal.MarkersTo: wrong destination length")
	}
	n.interp(dst, n.markers, n.nm3, tS)
}

// StateTo writes the nominal figure state at cue time tS (length Dim of
// the cell's model).
func (n *Nominal) StateTo(dst []float64, tS float64) {
	if len(dst) != n.dim {
		panic("mpc: Nominal.StateTo: wrong destination length")
	}
	n.interp(dst, n.states, n.dim, tS)
}

func (n *Nominal) interp(dst, table []float64, width int, tS float64) {
	if math.IsNaN(tS) {
		panic("mpc: Nominal: NaN time")
	}
	u := (tS - n.startS) / n.stepS
	if !(u > 0) {
		copy(dst, table[:width])
		return
	}
	k := math.Floor(u)
	if r := math.Round(u); math.Abs(u-r) < 1e-9 {
		u, k = r, r
	}
	if int(k) >= n.samples-1 {
		copy(dst, table[(n.samples-1)*width:n.samples*width])
		return
	}
	f := u - k
	a := table[int(k)*width : (int(k)+1)*width]
	b := table[(int(k)+1)*width : (int(k)+2)*width]
	for i := range dst {
		dst[i] = a[i] + f*(b[i]-a[i])
	}
}
