package sim

import (
	"fmt"

	"gonum.org/v1/gonum/mat"
)

// Rollout runs many steps of a model and keeps, for every step, the factor
// of its exact Hessian and its derivative blocks, so forward
// sensitivities through the whole run cost one pair of band triangular
// solves per step and direction. A Rollout is sized once (NewRollout) and
// reused; Run and Tangent allocate nothing after their first call with a
// given number of directions.
type Rollout struct {
	m       *Model
	steps   int
	ws      *Workspace
	states  []float64 // (steps+2) × Dim: x_{−1}, x_0, …, x_steps
	derivs  []stepDerivs
	ran     bool
	iters   int // Newton iterations of the last run
	rhs     []float64
	anchors []float64  // steps × 3·NumAnchors, those of the last run
	pin     stepInputs // scratch for ParamTangent
}

// NewRollout returns a rollout of the given number of steps (≥ 1).
func (m *Model) NewRollout(steps int) *Rollout {
	if steps < 1 {
		panic("sim: NewRollout: steps must be at least 1")
	}
	r := &Rollout{m: m, steps: steps, ws: m.NewWorkspace()}
	r.states = make([]float64, (steps+2)*m.Dim())
	r.derivs = make([]stepDerivs, steps)
	r.anchors = make([]float64, steps*3*len(m.strs))
	for k := range r.derivs {
		r.derivs[k].init(m)
	}
	return r
}

// NewtonIters is the number of Newton iterations the last run took, over
// all its steps.
func (r *Rollout) NewtonIters() int { return r.iters }

// Steps is the number of steps of the rollout.
func (r *Rollout) Steps() int { return r.steps }

func (r *Rollout) slot(k int) []float64 { // k = −1 … steps
	n := r.m.Dim()
	return r.states[(k+1)*n : (k+2)*n]
}

// RunWarm is Run with each step's Newton iterations started from the same
// step's state of the previous successful run (if there is one) instead
// of the inertial prediction y = 2x_t − x_{t−1}. When the anchors changed
// little since that run — a planner's later iterations — this saves
// Newton iterations (measured on the 20-node benchmark figure: 40 instead
// of 67 over 20 steps for anchor changes up to 0.1 mm, 60 for 1 mm). The
// states agree with Run's to within the step tolerance but are not
// bit-identical, so a caller that must replay to the same bits calls the
// same sequence of Run and RunWarm.
func (r *Rollout) RunWarm(x0, xm1, anchors []float64) error {
	return r.run(x0, xm1, anchors, r.ran)
}

// Run steps from x0 (with x_{−1} = xm1, so the initial velocity is
// (x0 − xm1)/h) through the anchors of every step: anchors holds steps ×
// 3·NumAnchors values, the anchors of step k+1 at [k·3NA:(k+1)·3NA].
// On error (see Step) the rollout holds no run and Tangent panics.
func (r *Rollout) Run(x0, xm1 []float64, anchors []float64) error {
	return r.run(x0, xm1, anchors, false)
}

func (r *Rollout) run(x0, xm1, anchors []float64, warm bool) error {
	m := r.m
	na := 3 * len(m.strs)
	if len(x0) != m.Dim() || len(xm1) != m.Dim() || len(anchors) != r.steps*na {
		panic("sim: Rollout.Run: vector of the wrong length")
	}
	r.ran = false
	r.iters = 0
	copy(r.anchors, anchors)
	copy(r.slot(-1), xm1)
	copy(r.slot(0), x0)
	for k := range r.steps {
		r.ws.d = &r.derivs[k]
		var guess []float64
		if warm {
			guess = r.slot(k + 1) // last run's state, read before it is overwritten
		}
		if err := m.step(r.ws, r.slot(k+1), r.slot(k), r.slot(k-1), anchors[k*na:(k+1)*na], guess); err != nil {
			return fmt.Errorf("rollout step %d of %d: %w", k+1, r.steps, err)
		}
		r.iters += r.ws.iters
	}
	// Anchored nodes of the stored initial states at their file positions,
	// as every step sees them.
	for _, k := range [2]int{-1, 0} {
		s := r.slot(k)
		for i := range m.nNodes {
			if m.anchored[i] {
				copy(s[3*i:3*i+3], m.fixedPos[3*i:3*i+3])
			}
		}
	}
	r.ran = true
	return nil
}

// State returns state k of the last run, k = 0 … Steps (0 is x0). The
// slice is the rollout's own storage: read it, do not keep or change it.
func (r *Rollout) State(k int) []float64 {
	if !r.ran {
		panic("sim: Rollout.State: no successful run")
	}
	if k < 0 || k > r.steps {
		panic("sim: Rollout.State: index out of range")
	}
	return r.slot(k)
}

// Tangent propagates K directions at once through the last run by forward
// sensitivity: dX[k] (Dim × K) receives the change of state k+1 for
// changes dX0 of x0 and dXm1 of x_{−1} (Dim × K each, nil for zero) and
// dA[k] of the anchors of step k+1 (3·NumAnchors × K, nil or a nil entry
// for zero). len(dX) must be Steps; every matrix must have K columns.
// Rows of anchored nodes are ignored on input and zero on output.
func (r *Rollout) Tangent(dX []*mat.Dense, dX0, dXm1 *mat.Dense, dA []*mat.Dense) {
	m := r.m
	if !r.ran {
		panic("sim: Rollout.Tangent: no successful run")
	}
	if len(dX) != r.steps || (dA != nil && len(dA) != r.steps) {
		panic("sim: Rollout.Tangent: need one matrix per step")
	}
	n, na, nf := m.Dim(), 3*len(m.strs), 3*len(m.order)
	_, k := dX[0].Dims()
	if cap(r.rhs) < nf*k {
		r.rhs = make([]float64, nf*k)
	}
	rhs := r.rhs[:nf*k]
	x0 := denseRows(dX0, n, k, "dX0")
	xm1 := denseRows(dXm1, n, k, "dXm1")
	for s := range r.steps {
		cur, prev := x0, xm1
		if s >= 1 {
			cur = denseRows(dX[s-1], n, k, "dX")
			prev = x0
		}
		if s >= 2 {
			prev = denseRows(dX[s-2], n, k, "dX")
		}
		var da rows
		if dA != nil {
			da = denseRows(dA[s], na, k, "dA")
		}
		out := denseRows(dX[s], n, k, "dX")
		m.tangentRHS(&r.derivs[s], rhs, k, cur, prev, da)
		r.derivs[s].chol.solve(rhs, k)
		m.scatterNeg(out, rhs, k)
	}
}
