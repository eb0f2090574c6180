package sim

import "fmt"

// RestPose writes into dst the static equilibrium of the figure with the
// anchors held at anchors: a local minimiser of the potential U(x; a),
// found from the figure's file positions. It takes proximal Newton
// iterations: each is one Newton iteration of the implicit step from rest
// (x_t = x_{t−1} = the current pose) with a relaxation time step that
// doubles after every full Newton step and shrinks after a step the line
// search had to cut, so far from equilibrium it moves like heavily damped
// motion and near it becomes Newton's method on U. At a
// pose at rest the step's gradient is exactly ∇U, so it stops when every
// free node's |∇U|·h²/m (h the model's step) is within the model's
// gradient tolerance. A figure that cannot rest (a node hanging from
// nothing) gives ErrNoConvergence; dst is then left unchanged. RestPose
// uses ws's buffers; afterwards ws holds no step for Sensitivity.
func (m *Model) RestPose(ws *Workspace, dst, anchors []float64) error {
	const (
		maxIters    = 400
		firstRelaxS = 0.05
		maxRelaxS   = 1e4
		minRelaxS   = 1e-4
	)
	m.checkLens(dst, nil, anchors)
	ws.valid = false
	if !allFinite(anchors) {
		return fmt.Errorf("%w (rest pose anchors)", ErrNotFinite)
	}
	copy(ws.anchors, anchors)
	m.loadStates(ws, m.fixedPos, m.fixedPos)
	hRelax := firstRelaxS
	for range maxIters {
		// From rest at x (x_t = x_{t−1} = y = x) the gradient is ∇U.
		copy(ws.xp, ws.x)
		copy(ws.xc, ws.x)
		copy(ws.y, ws.x)
		m.setFrames(&ws.in)
		e, scale := m.evaluate(ws, ws.x, hRelax, true)
		if m.scaledGrad(ws.g, ws.floor, m.h) <= m.gradTol {
			copy(dst, ws.x)
			return nil
		}
		_, _, alpha, err := m.newtonIter(ws, ws.x, hRelax, e, scale, m.scaledGrad(ws.g, ws.floor, hRelax))
		if err != nil {
			return err
		}
		// Trust the model further after a full Newton step, less after a
		// cut one (a Levenberg–Marquardt-like update of the mass term).
		switch {
		case alpha == 1:
			hRelax = min(2*hRelax, maxRelaxS)
		case alpha < 0.25:
			hRelax = max(hRelax/4, minRelaxS)
		}
	}
	return fmt.Errorf("%w: no static equilibrium after %d relaxation iterations", ErrNoConvergence, maxIters)
}
