package sim

import (
	"errors"

	"gonum.org/v1/gonum/mat"
)

// CellWorkspace is the scratch space for the cell-level computations:
// anchor positions, their Jacobian and the cell step. Make one per
// goroutine with Cell.NewWorkspace; after the first call it allocates
// nothing.
type CellWorkspace struct {
	cell    *Cell
	model   *Model
	step    *Workspace
	chains  []*ChainWorkspace
	anchors []float64  // 3·NumAnchors
	jac     *mat.Dense // 3·NumAnchors × NumJoints
	jrow    []float64  // 3 × arm joints, one arm's point Jacobian
	dxda    *mat.Dense // Dim × 3·NumAnchors
}

// NewWorkspace makes a workspace for this cell and the given figure model
// (built with Cell.NewModel; its time step is the one Step uses). model may
// be nil when only kinematics (Anchors, AnchorJacobian) are needed.
func (c *Cell) NewWorkspace(model *Model) *CellWorkspace {
	ws := &CellWorkspace{cell: c, model: model}
	maxJ := 0
	for _, a := range c.Arms {
		ws.chains = append(ws.chains, a.Chain.NewWorkspace())
		if n := a.Chain.NumJoints(); n > maxJ {
			maxJ = n
		}
	}
	na := 3 * c.NumAnchors()
	ws.anchors = make([]float64, na)
	ws.jac = mat.NewDense(na, max(c.NumJoints(), 1), nil)
	ws.jrow = make([]float64, 3*max(maxJ, 1))
	if model != nil {
		if model.NumAnchors() != c.NumAnchors() {
			panic("sim: CellWorkspace: model was not built from this cell")
		}
		ws.step = model.NewWorkspace()
		ws.dxda = mat.NewDense(model.Dim(), na, nil)
	}
	return ws
}

// Model returns the figure model the workspace steps with (nil if none).
func (ws *CellWorkspace) Model() *Model { return ws.model }

// StepWorkspace returns the figure step's workspace, which holds the
// derivatives of the last Step.
func (ws *CellWorkspace) StepWorkspace() *Workspace { return ws.step }

// forward places every arm at joint vector q.
func (ws *CellWorkspace) forward(q []float64) {
	c := ws.cell
	if len(q) != c.NumJoints() {
		panic("sim: cell joint vector has the wrong length")
	}
	for i, a := range c.Arms {
		n := a.Chain.NumJoints()
		a.Chain.Forward(ws.chains[i], a.Base, q[a.Offset:a.Offset+n])
	}
}

// AnchorsTo writes every string's anchor point (world frame, m) for joint
// vector q into dst (len 3·NumAnchors).
func (ws *CellWorkspace) AnchorsTo(dst, q []float64) {
	c := ws.cell
	if len(dst) != 3*c.NumAnchors() {
		panic("sim: AnchorsTo: wrong destination length")
	}
	ws.forward(q)
	for i, s := range c.Strings {
		p := ws.chains[s.Arm].Point(s.PointTipM)
		copy(dst[3*i:3*i+3], p[:])
	}
}

// AnchorJacobianTo writes ∂a/∂q (3·NumAnchors × NumJoints) at q into dst.
func (ws *CellWorkspace) AnchorJacobianTo(dst *mat.Dense, q []float64) {
	c := ws.cell
	if r, cc := dst.Dims(); r != 3*c.NumAnchors() || cc != c.NumJoints() {
		panic("sim: AnchorJacobianTo: wrong destination shape")
	}
	ws.forward(q)
	dst.Zero()
	for i, s := range c.Strings {
		arm := c.Arms[s.Arm]
		n := arm.Chain.NumJoints()
		jr := ws.jrow[:3*n]
		ws.chains[s.Arm].PointJacobian(jr, s.PointTipM)
		for r := 0; r < 3; r++ {
			for k := 0; k < n; k++ {
				dst.Set(3*i+r, arm.Offset+k, jr[r*n+k])
			}
		}
	}
}

// ErrNoModel is returned by Step on a workspace made without a model.
var ErrNoModel = errors.New("sim: cell workspace has no figure model")

// Step advances the figure one step of the model's time step with the arms
// at joint vector qNext for the end of the step: x⁺ from (xCur, xPrev).
// On success the workspace holds the derivatives at the solution for
// JointSensitivity and the figure workspace's own sensitivity calls.
func (ws *CellWorkspace) Step(xNext, xCur, xPrev, qNext []float64) error {
	if ws.model == nil {
		return ErrNoModel
	}
	ws.AnchorsTo(ws.anchors, qNext)
	return ws.model.Step(ws.step, xNext, xCur, xPrev, ws.anchors)
}

// JointSensitivityTo writes ∂x⁺/∂q⁺ (Dim × NumJoints), the sensitivity of
// the last Step's result to the joint vector it was given, into dst: the
// chain rule ∂x⁺/∂a · ∂a/∂q through the bar-point Jacobians.
func (ws *CellWorkspace) JointSensitivityTo(dst *mat.Dense, qNext []float64) {
	ws.step.SensitivityMatrices(nil, nil, ws.dxda)
	ws.AnchorJacobianTo(ws.jac, qNext)
	dst.Mul(ws.dxda, ws.jac)
}

// Anchors returns the anchors computed by the last Step or AnchorsTo call
// made through the workspace's own buffer (shared; do not modify).
func (ws *CellWorkspace) Anchors() []float64 { return ws.anchors }
