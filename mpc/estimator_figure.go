package mpc

import (
	"fmt"

	"gonum.org/v1/gonum/mat"

	"tautline/sim"
)

// AnchorFunc writes the string anchor points (world frame, m, three per
// string) for a joint vector. sim's CellWorkspace.AnchorsTo is one.
type AnchorFunc func(dst, joints []float64)

// FigureProcess is the Process of a sim figure model whose anchors are
// placed by a function of the joints. It holds the scratch of its steps:
// give each estimator its own (the model may be shared).
type FigureProcess struct {
	model     *sim.Model
	ws        *sim.Workspace // rest poses
	step      *sim.Rollout   // one step, keeping its factor for TangentTo
	tangent   []*mat.Dense   // the one output matrix Rollout.Tangent takes
	anchorsOf AnchorFunc
	anchors   []float64
	nj        int
	fixed     []bool
}

// NewFigureProcess wraps model; anchorsOf maps a joint vector of length
// numJoints to the model's anchors.
func NewFigureProcess(model *sim.Model, numJoints int, anchorsOf AnchorFunc) (*FigureProcess, error) {
	if numJoints < 0 {
		return nil, fmt.Errorf("mpc: %d joints", numJoints)
	}
	if anchorsOf == nil && model.NumAnchors() > 0 {
		return nil, fmt.Errorf("mpc: the model has %d strings but no anchor function was given", model.NumAnchors())
	}
	fig := model.Figure()
	p := &FigureProcess{
		model:     model,
		ws:        model.NewWorkspace(),
		step:      model.NewRollout(1),
		tangent:   make([]*mat.Dense, 1),
		anchorsOf: anchorsOf,
		anchors:   make([]float64, 3*model.NumAnchors()),
		nj:        numJoints,
		fixed:     make([]bool, model.Dim()),
	}
	for i, n := range fig.Nodes {
		if n.Anchored {
			p.fixed[3*i], p.fixed[3*i+1], p.fixed[3*i+2] = true, true, true
		}
	}
	return p, nil
}

// Dim implements Process.
func (p *FigureProcess) Dim() int { return p.model.Dim() }

// NumJoints implements Process.
func (p *FigureProcess) NumJoints() int { return p.nj }

// StepS implements Process.
func (p *FigureProcess) StepS() float64 { return p.model.StepS() }

// Fixed implements Process.
func (p *FigureProcess) Fixed(i int) bool { return p.fixed[i] }

func (p *FigureProcess) place(joints []float64) {
	if len(joints) != p.nj {
		panic("mpc: FigureProcess: joint vector of the wrong length")
	}
	if p.anchorsOf != nil {
		p.anchorsOf(p.anchors, joints)
	}
}

// Step implements Process.
func (p *FigureProcess) Step(xNext, xCur, xPrev, joints []float64) error {
	p.place(joints)
	if err := p.step.Run(xCur, xPrev, p.anchors); err != nil {
		return err
	}
	copy(xNext, p.step.State(1))
	return nil
}

// TangentTo implements Process with the step's forward sensitivity (sim's
// Rollout.Tangent): one pair of band triangular solves per direction.
func (p *FigureProcess) TangentTo(dst, dCur, dPrev *mat.Dense) {
	p.tangent[0] = dst
	p.step.Tangent(p.tangent, dCur, dPrev, nil)
	p.tangent[0] = nil
}

// RestPoseTo implements Process.
func (p *FigureProcess) RestPoseTo(dst, joints []float64) error {
	p.place(joints)
	return p.model.RestPose(p.ws, dst, p.anchors)
}
