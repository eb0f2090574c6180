package sim

import "fmt"

// RestPose writes into dst the static equilibrium of the figure with the
// anchors held at anchors: a local minimiser of the potential U(x; a),
// found from the figure's file positions. It takes proximal Newton
// iterations: each is one Newton iteration of the implicit step from rest
// (x_t = x_{t−1} = the current pose) with a relaxation time step that
// doubles after every iteration, so far from equilibrium it moves like
// heavily damped motion and near it becomes Newton's method on U. At a
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
		copy(ws.xp, ws.x)
		copy(ws.xc, ws.x)
		copy(ws.y, ws.x)
		e, _ := m.incremental(ws.g, ws.x, ws.xc, ws.y, ws.anchors, hRelax, hessNone, nil)
		if m.scaledGrad(ws.g, m.h) <= m.gradTol {
			copy(dst, ws.x)
			return nil
		}
		if _, err := m.newtonIter(ws, ws.x, hRelax, e, m.scaledGrad(ws.g, hRelax)); err != nil {
			return err
		}
		hRelax = min(2*hRelax, maxRelaxS)
	}
	return fmt.Errorf("%w: no static equilibrium after %d relaxation iterations", ErrNoConvergence, maxIters)
}
