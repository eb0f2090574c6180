package sim

import (
	"fmt"
	"math"
)

// Workspace holds the buffers of one stepping context and, after a
// successful Step, the factor of the exact Hessian and the derivative
// blocks at the solution, ready for Sensitivity. A Workspace belongs to
// one Model and must not be used from two goroutines at once.
type Workspace struct {
	m *Model

	x, xc, xp, y, g []float64 // external order, length Dim
	floor, floorTry []float64 // per node: rounding level of the gradient
	xTry, gTry, dir []float64
	anchors         []float64
	rhs             []float64   // band order, length 3×free nodes
	hess, hessTry   *bandMatrix // Newton Hessians at x and at the line search's trial point
	own             stepDerivs
	d               *stepDerivs // where Step leaves the exact factor; own unless a Rollout points it elsewhere
	valid           bool        // d holds a successful step
	iters           int
	sens            sensBuffers
	in              stepInputs // views of xc, y, anchors plus the rod frames at x_t
}

// stepDerivs is everything the derivatives of one step need: the Cholesky
// factor of the exact Hessian A = ∂G/∂x⁺ at the solution and the element
// blocks of ∂G/∂x_t and ∂G/∂a (deriv.go).
type stepDerivs struct {
	chol bandMatrix
	rodB []float64 // 9 per rod: ∂(rod damping force on a)/∂(x_t,a − x_t,b)
	strH []float64 // 9 per string: the exact string Hessian; ∂G/∂a = −strH
}

// NewWorkspace returns a workspace for stepping m.
func (m *Model) NewWorkspace() *Workspace {
	n := m.Dim()
	nf := 3 * len(m.order)
	ws := &Workspace{m: m}
	for _, p := range []*[]float64{&ws.x, &ws.xc, &ws.xp, &ws.y, &ws.g, &ws.xTry, &ws.gTry, &ws.dir} {
		*p = make([]float64, n)
	}
	ws.anchors = make([]float64, 3*len(m.strs))
	ws.floor = make([]float64, m.nNodes)
	ws.floorTry = make([]float64, m.nNodes)
	ws.rhs = make([]float64, nf)
	ws.hess, ws.hessTry = &bandMatrix{}, &bandMatrix{}
	ws.hess.reset(nf, m.kd)
	ws.hessTry.reset(nf, m.kd)
	ws.own.init(m)
	ws.d = &ws.own
	ws.in = stepInputs{xc: ws.xc, y: ws.y, anchors: ws.anchors, frames: make([]float64, 4*len(m.rods))}
	return ws
}

func (d *stepDerivs) init(m *Model) {
	d.chol.reset(3*len(m.order), m.kd)
	d.rodB = make([]float64, 9*len(m.rods))
	d.strH = make([]float64, 9*len(m.strs))
}

// NewtonIters is the number of Newton iterations the last Step took.
func (ws *Workspace) NewtonIters() int { return ws.iters }

// Step advances the figure by one time step of backward Euler in position
// form: xNext is the minimiser of the incremental objective
//
//	E(x) = 1/(2h²)(x − y)ᵀM(x − y) + U(x; a⁺) + D(x; x_t),  y = 2x_t − x_{t−1}
//
// (see incremental for the terms), found from the guess y by Newton's
// method (exact Hessian where positive definite, element-projected
// otherwise) with a backtracking line search, to the mass-scaled gradient
// tolerance. xCur is x_t, xPrev is x_{t−1}, anchorsNext is a⁺.
// Anchored nodes' entries of the inputs are ignored; xNext holds their file
// positions.
//
// On success ws holds the factor of the exact Hessian and the derivative
// blocks at xNext, for Sensitivity and SensitivityMatrices. On error
// (ErrNotFinite, ErrNoConvergence, ErrIndefinite, wrapped) xNext is left
// unchanged and ws holds no step. Slices of the wrong length panic.
// Step allocates nothing.
func (m *Model) Step(ws *Workspace, xNext, xCur, xPrev, anchorsNext []float64) error {
	return m.step(ws, xNext, xCur, xPrev, anchorsNext, nil)
}

// step is Step with Newton's first guess taken from guess (length Dim)
// instead of y when guess is not nil; a guess that does not lead to
// convergence is retried from y, so the guess changes the work done, and
// the result only within the tolerance.
func (m *Model) step(ws *Workspace, xNext, xCur, xPrev, anchorsNext, guess []float64) error {
	if ws.m != m {
		panic("sim: Step: workspace belongs to another model")
	}
	m.checkLens(xNext, xCur, anchorsNext)
	m.checkLens(xPrev, nil, anchorsNext)
	ws.valid = false
	if !allFinite(xCur) || !allFinite(xPrev) || !allFinite(anchorsNext) {
		return fmt.Errorf("%w (step input)", ErrNotFinite)
	}
	copy(ws.anchors, anchorsNext)
	m.loadStates(ws, xCur, xPrev)
	converged := false
	if guess != nil && allFinite(guess) {
		for i := range m.nNodes {
			if !m.anchored[i] {
				copy(ws.x[3*i:3*i+3], guess[3*i:3*i+3])
			}
		}
		if converged = m.newton(ws, ws.x, m.h, m.maxIters) == nil; !converged {
			copy(ws.x, ws.y)
		}
	}
	if !converged {
		if err := m.newton(ws, ws.x, m.h, m.maxIters); err != nil {
			return err
		}
	}
	if err := m.finishStep(ws); err != nil {
		return err
	}
	if !allFinite(ws.x) {
		return fmt.Errorf("%w (step result)", ErrNotFinite)
	}
	copy(xNext, ws.x)
	ws.valid = true
	return nil
}

// loadStates copies x_t and x_{t−1} with anchored nodes at their file
// positions, and sets y = 2x_t − x_{t−1} and the first guess x = y.
func (m *Model) loadStates(ws *Workspace, xCur, xPrev []float64) {
	copy(ws.xc, xCur)
	copy(ws.xp, xPrev)
	for i := range m.nNodes {
		if m.anchored[i] {
			copy(ws.xc[3*i:3*i+3], m.fixedPos[3*i:3*i+3])
			copy(ws.xp[3*i:3*i+3], m.fixedPos[3*i:3*i+3])
		}
	}
	for k := range ws.y {
		ws.y[k] = 2*ws.xc[k] - ws.xp[k]
	}
	copy(ws.x, ws.y)
	m.setFrames(&ws.in)
}

// evaluate computes E, its rounding scale, the gradient ws.g and the
// gradient's rounding floor ws.floor at x, and, if withHess, the Hessian
// tried first for directions (m.firstHess) into ws.hess.
func (m *Model) evaluate(ws *Workspace, x []float64, h float64, withHess bool) (e, scale float64) {
	if !withHess {
		return m.incremental(ws.g, x, &ws.in, h, hessNone, nil, ws.floor)
	}
	ws.hess.reset(ws.hess.n, ws.hess.kd)
	return m.incremental(ws.g, x, &ws.in, h, m.firstHess, ws.hess, ws.floor)
}

// newton minimises the incremental objective with time step h from the
// guess in x (in place), with x_t, y and anchors taken from ws. On success
// ws.hess holds the (unfactorised) Hessian of kind m.firstHess at x.
//
// Each iteration assembles the Hessian together with the gradient at the
// point the line search accepts, so a full Newton step costs one pass over
// the elements, one band factorisation and one band solve.
func (m *Model) newton(ws *Workspace, x []float64, h float64, maxIters int) error {
	e, scale := m.evaluate(ws, x, h, true)
	ws.iters = 0
	for {
		res := m.scaledGrad(ws.g, ws.floor, h)
		if res <= m.gradTol {
			return nil
		}
		if ws.iters >= maxIters {
			return fmt.Errorf("%w: %d Newton iterations left a mass-scaled residual of %.3g m (tolerance %.3g m)", ErrNoConvergence, ws.iters, res, m.gradTol)
		}
		ws.iters++
		var err error
		if e, scale, _, err = m.newtonIter(ws, x, h, e, scale, res); err != nil {
			return err
		}
	}
}

// newtonIter takes one Newton iteration from x (in place) given E there
// (e, with rounding scale), ws.g, ws.floor, the residual res and the
// Hessian in ws.hess, all at x. The search direction solves that Hessian
// — the exact one if it is positive definite, else the projected one
// (compressed rods' transverse terms clamped at zero), which always is
// and still gives descent — and a backtracking line search on E accepts
// the first step of sufficient decrease. On return the same quantities
// hold at the new x; alpha is the step length taken (1 for a full step).
func (m *Model) newtonIter(ws *Workspace, x []float64, h, e, scale, res float64) (eNew, scaleNew, alpha float64, err error) {
	const (
		armijo      = 1e-4 // sufficient decrease (common practice, Nocedal & Wright, Numerical Optimization, §3.1)
		maxHalvings = 40
	)
	if !ws.hess.factorize() {
		ws.hess.reset(ws.hess.n, ws.hess.kd)
		m.incremental(ws.gTry, x, &ws.in, h, hessProjected, ws.hess, nil)
		if !ws.hess.factorize() {
			return e, scale, 0, fmt.Errorf("%w: the projected Hessian could not be factorised", ErrNoConvergence)
		}
	}
	m.toBand(ws.rhs, ws.g)
	ws.hess.solve(ws.rhs, 1)
	m.fromBand(ws.dir, ws.rhs, -1)
	slope := dot(ws.g, ws.dir)
	// E's rounding level (see incremental).
	roundE := 16 * 0x1p-52 * scale
	alpha = 1.0
	for range maxHalvings {
		for k := range x {
			ws.xTry[k] = x[k] + alpha*ws.dir[k]
		}
		ws.hessTry.reset(ws.hessTry.n, ws.hessTry.kd)
		eTry, scaleTry := m.incremental(ws.gTry, ws.xTry, &ws.in, h, m.firstHess, ws.hessTry, ws.floorTry)
		// Armijo's sufficient decrease; or, near the solution where the
		// change of E is lost in rounding, a step that keeps E within its
		// rounding and shrinks the residual by at least a tenth.
		if eTry <= e+armijo*alpha*slope ||
			(eTry <= e+roundE && m.scaledGrad(ws.gTry, ws.floorTry, h) <= 0.9*res) {
			copy(x, ws.xTry)
			ws.g, ws.gTry = ws.gTry, ws.g
			ws.floor, ws.floorTry = ws.floorTry, ws.floor
			ws.hess, ws.hessTry = ws.hessTry, ws.hess
			return eTry, scaleTry, alpha, nil
		}
		alpha /= 2
	}
	return e, scale, 0, fmt.Errorf("%w: the line search found no decrease (mass-scaled residual %.3g m)", ErrNoConvergence, res)
}

// finishStep factorises the exact Hessian at the solution ws.x into ws.d
// and computes the derivative blocks there.
func (m *Model) finishStep(ws *Workspace) error {
	d := ws.d
	if m.firstHess == hessExact {
		copy(d.chol.data, ws.hess.data) // newton left it at ws.x
	} else {
		d.chol.reset(d.chol.n, d.chol.kd)
		m.incremental(ws.gTry, ws.x, &ws.in, m.h, hessExact, &d.chol, nil)
	}
	if !d.chol.factorize() {
		return ErrIndefinite
	}
	m.derivBlocks(d, ws.x, ws.xc, ws.anchors)
	return nil
}

// scaledGrad is the largest, over free nodes, of (|∇E_i| − floor_i)·h²/m_i:
// the position error in metres that the residual force implies, beyond
// what rounding alone produces (the floor from incremental).
func (m *Model) scaledGrad(g, floor []float64, h float64) float64 {
	var worst float64
	for i := range m.nNodes {
		if m.anchored[i] {
			continue
		}
		s := (math.Sqrt(g[3*i]*g[3*i]+g[3*i+1]*g[3*i+1]+g[3*i+2]*g[3*i+2]) - floor[i]) * h * h / m.mass[i]
		if !(s <= worst) { // also catches NaN
			worst = s
		}
	}
	return worst
}

// toBand gathers the free nodes of v (external order) into dst (band order).
func (m *Model) toBand(dst, v []float64) {
	for p, i := range m.order {
		dst[3*p], dst[3*p+1], dst[3*p+2] = v[3*i], v[3*i+1], v[3*i+2]
	}
}

// fromBand scatters sign·src (band order) into dst (external order); the
// anchored nodes' entries of dst are zeroed.
func (m *Model) fromBand(dst, src []float64, sign float64) {
	for i := range m.nNodes {
		p := m.slot[i]
		if p < 0 {
			dst[3*i], dst[3*i+1], dst[3*i+2] = 0, 0, 0
			continue
		}
		dst[3*i], dst[3*i+1], dst[3*i+2] = sign*src[3*p], sign*src[3*p+1], sign*src[3*p+2]
	}
}

func dot(a, b []float64) float64 {
	var s float64
	for i, v := range a {
		s += v * b[i]
	}
	return s
}

func allFinite(v []float64) bool {
	for _, x := range v {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}
