package sim

import "gonum.org/v1/gonum/mat"

// ParamTangent propagates the derivatives of the last run's states with
// respect to model parameters: dX[k] (Dim × len(params)) receives
// d(state k+1)/d(params), with x0, x_{−1} and the anchors held fixed. It is
// forward sensitivity like Tangent, with each step's ∂G/∂θ as the source
// (see paramGrad), for fitting a model to recorded motion. It allocates
// nothing after its first call with a given number of parameters.
func (r *Rollout) ParamTangent(dX []*mat.Dense, params []Param) {
	m := r.m
	if !r.ran {
		panic("sim: Rollout.ParamTangent: no successful run")
	}
	if len(dX) != r.steps {
		panic("sim: Rollout.ParamTangent: need one matrix per step")
	}
	for _, p := range params {
		m.checkParam(p)
	}
	n, nf, k := m.Dim(), 3*len(m.order), len(params)
	if cap(r.rhs) < nf*k {
		r.rhs = make([]float64, nf*k)
	}
	rhs := r.rhs[:nf*k]
	if r.pin.frames == nil {
		r.pin = stepInputs{y: make([]float64, n), frames: make([]float64, 4*len(m.rods))}
	}
	na := 3 * len(m.strs)
	for s := range r.steps {
		var cur, prev rows
		if s >= 1 {
			cur = denseRows(dX[s-1], n, k, "dX")
		}
		if s >= 2 {
			prev = denseRows(dX[s-2], n, k, "dX")
		}
		out := denseRows(dX[s], n, k, "dX")
		m.tangentRHS(&r.derivs[s], rhs, k, cur, prev, rows{})
		// The inputs of step s+1: x_t = state s, y = 2x_t − x_{t−1}.
		xc, xp := r.slot(s), r.slot(s-1)
		for i := range r.pin.y {
			r.pin.y[i] = 2*xc[i] - xp[i]
		}
		r.pin.xc = xc
		r.pin.anchors = r.anchors[s*na : (s+1)*na]
		m.setFrames(&r.pin)
		for j, p := range params {
			m.paramGrad(rhs[j:], k, r.slot(s+1), &r.pin, p)
		}
		r.derivs[s].chol.solve(rhs, k)
		m.scatterNeg(out, rhs, k)
	}
}
