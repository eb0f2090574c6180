package sim

import "math"

// This file holds every element term of the model in one place: inertia,
// gravity, node drag, rods, rod damping and strings, with their energies,
// gradients and Hessians. Derivatives with respect to the previous states
// and the anchors (deriv.go) and any future parameter derivatives are built
// from the same per-element quantities.

// hessMode selects what incremental adds to the Hessian.
type hessMode int

const (
	hessNone      hessMode = iota // energy and gradient only
	hessProjected                 // element Hessians projected to be positive semi-definite
	hessExact                     // the exact Hessian
)

// stringRamp is the tension-only string law. For the stretch e = |x−a| − L
// it returns the energy φ(e), the tension T = φ′(e) and the stiffness
// κ = φ″(e). Over the ramp |e| < w/2 the stiffness rises from 0 to k as the
// smoothstep κ = k·(3s² − 2s³), s = (e + w/2)/w, which makes T twice
// continuously differentiable (φ is C³). Because the smoothstep integrates
// to ½ over the ramp:
//
//	e ≤ −w/2: φ = 0, T = 0 (slack pushes nothing)
//	e ≥ +w/2: φ = ½k·e² + k·w²/40, T = k·e exactly (Hooke's law)
func stringRamp(e, k, w float64) (phi, t, kappa float64) {
	half := w / 2
	switch {
	case e <= -half:
		return 0, 0, 0
	case e >= half:
		return 0.5*k*e*e + k*w*w/40, k * e, k
	}
	s := (e + half) / w
	s2 := s * s
	return k * w * w * s2 * s2 * (0.25 - s/10), k * w * s2 * s * (1 - s/2), k * s2 * (3 - 2*s)
}

// axisHess writes alpha·u·uᵀ + beta·(I − u·uᵀ) into h.
func axisHess(h *[9]float64, u [3]float64, alpha, beta float64) {
	for r := range 3 {
		for c := range 3 {
			v := (alpha - beta) * u[r] * u[c]
			if r == c {
				v += beta
			}
			h[3*r+c] = v
		}
	}
}

// unitOf returns d/|d| and |d|. A zero vector gets the direction z so
// nothing downstream divides by zero.
func unitOf(d [3]float64) ([3]float64, float64) {
	l := math.Sqrt(d[0]*d[0] + d[1]*d[1] + d[2]*d[2])
	if l == 0 {
		return [3]float64{0, 0, 1}, 0
	}
	inv := 1 / l
	return [3]float64{d[0] * inv, d[1] * inv, d[2] * inv}, l
}

func (m *Model) nodeDiff(x []float64, a, b int) [3]float64 {
	return [3]float64{x[3*a] - x[3*b], x[3*a+1] - x[3*b+1], x[3*a+2] - x[3*b+2]}
}

// stepInputs are the inputs of one step's objective other than x: x_t,
// y = 2x_t − x_{t−1}, the anchors, and per rod the unit direction and
// length of d_t = x_t,a − x_t,b (4 numbers: û_t, |d_t|), computed once per
// step by setFrames since they do not change while Newton iterates.
type stepInputs struct {
	xc, y, anchors []float64
	frames         []float64
}

// setFrames computes in.frames from in.xc.
func (m *Model) setFrames(in *stepInputs) {
	for ri := range m.rods {
		r := &m.rods[ri]
		u, l := unitOf(m.nodeDiff(in.xc, r.a, r.b))
		in.frames[4*ri], in.frames[4*ri+1], in.frames[4*ri+2], in.frames[4*ri+3] = u[0], u[1], u[2], l
	}
}

// newStepInputs returns inputs with their own storage (for tests and
// one-off evaluations; the hot path keeps them in a Workspace).
func (m *Model) newStepInputs(xc, y, anchors []float64) *stepInputs {
	in := &stepInputs{xc: xc, y: y, anchors: anchors, frames: make([]float64, 4*len(m.rods))}
	m.setFrames(in)
	return in
}

// incremental evaluates the step's objective
//
//	E(x) = Σᵢ mᵢ/(2h²)|xᵢ − yᵢ|² + mᵢ·g·(zᵢ − y_zᵢ)           inertia, gravity
//	     + Σᵢ cᵢ/(2h)|xᵢ − x_tᵢ|²                            node drag
//	     + Σ_rods ½k(|d| − L)²  + c/(2h)·((d − d_t)·û_t)²     rods, rod damping
//	     + Σ_strings φ(|xₙ − a| − L)                          strings
//
// with d = x_a − x_b, d_t the same at x_t and û_t = d_t/|d_t|. Gravity is
// measured from y, which changes E by a constant and keeps its rounding
// small. It writes ∇E into g (external node order, zero on anchored nodes)
// and, unless mode is hessNone, adds the Hessian of the free nodes into
// hess (band order). It returns E and its rounding scale: the sum, over
// its terms, of each term's sensitivity to its inputs times their size
// (a rod's ½k(l−L)² computed from coordinates of size |x| is uncertain
// by about k·|l−L|·eps·(l+L), not by eps times itself); the rounding error
// of E is a small multiple of eps times this scale.
//
// If floor is not nil it receives, per node, the size of the rounding
// error expected in that node's gradient: 16·eps times the sum of the
// magnitudes that enter it (inertia and drag m/h²·|x|, the weight, and
// k·(l + L) of every rod and string at the node — a rod force is
// k·(|d| − L), so its rounding follows |d| and L, not the force). A
// residual at that level cannot be reduced further, so the convergence
// test (scaledGrad) discounts it; without this a very stiff rod could
// never reach a tight tolerance. x, in.xc (x_t) and in.y must hold the anchored
// nodes' file positions.
func (m *Model) incremental(g, x []float64, in *stepInputs, h float64, mode hessMode, hess *bandMatrix, floor []float64) (e, scale float64) {
	xc, y, anchors := in.xc, in.y, in.anchors
	invH2, invH := 1/(h*h), 1/h
	clear(g)
	if floor != nil {
		clear(floor)
	}
	var blk [9]float64
	for i := range m.nNodes {
		if m.anchored[i] {
			continue
		}
		mi, ci := m.mass[i], m.drag[i]
		var ei float64
		for c := range 3 {
			dy := x[3*i+c] - y[3*i+c]
			dv := x[3*i+c] - xc[3*i+c]
			ei += 0.5*mi*invH2*dy*dy + 0.5*ci*invH*dv*dv
			g[3*i+c] = mi*invH2*dy + ci*invH*dv
			scale += (mi*invH2*math.Abs(dy) + ci*invH*math.Abs(dv)) * (math.Abs(x[3*i+c]) + math.Abs(y[3*i+c]) + math.Abs(xc[3*i+c]))
			if floor != nil {
				floor[i] += (mi*invH2 + ci*invH) * (math.Abs(x[3*i+c]) + math.Abs(y[3*i+c]) + math.Abs(xc[3*i+c]))
			}
		}
		if floor != nil {
			floor[i] += mi * math.Abs(m.gravity)
		}
		eg := mi * m.gravity * (x[3*i+2] - y[3*i+2])
		g[3*i+2] += mi * m.gravity
		e += ei + eg
		scale += mi * math.Abs(m.gravity) * (math.Abs(x[3*i+2]) + math.Abs(y[3*i+2]))
		if mode != hessNone {
			p := m.slot[i]
			dg := mi*invH2 + ci*invH
			for c := range 3 {
				hess.add(3*p+c, 3*p+c, dg)
			}
		}
	}
	for ri := range m.rods {
		r := &m.rods[ri]
		d := m.nodeDiff(x, r.a, r.b)
		u, l := unitOf(d)
		f := r.k * (l - r.restLen)
		er := 0.5 * r.k * (l - r.restLen) * (l - r.restLen)
		force := [3]float64{f * u[0], f * u[1], f * u[2]}
		fl := r.k * (l + r.restLen) // rounding floor contribution
		// Rod damping along the rod's direction at x_t.
		var ut [3]float64
		damped := false
		if r.c > 0 {
			dt := m.nodeDiff(xc, r.a, r.b)
			fr := in.frames[4*ri : 4*ri+4 : 4*ri+4]
			ut = [3]float64{fr[0], fr[1], fr[2]}
			if lt := fr[3]; lt > 0 {
				damped = true
				s := (d[0]-dt[0])*ut[0] + (d[1]-dt[1])*ut[1] + (d[2]-dt[2])*ut[2]
				er += 0.5 * r.c * invH * s * s
				scale += r.c * invH * math.Abs(s) * (l + lt)
				fl += r.c * invH * (l + lt)
				for c := range 3 {
					force[c] += r.c * invH * s * ut[c]
				}
			}
		}
		e += er
		scale += math.Abs(f)*(l+r.restLen) + math.Abs(er)
		if floor != nil {
			floor[r.a] += fl
			floor[r.b] += fl
		}
		for c := range 3 {
			g[3*r.a+c] += force[c]
			g[3*r.b+c] -= force[c]
		}
		if mode == hessNone {
			continue
		}
		alpha, beta := r.k, 0.0
		if l > 0 {
			beta = f / l
		}
		if mode == hessProjected && beta < 0 {
			beta = 0 // a compressed rod's transverse term is negative: clamp
		}
		axisHess(&blk, u, alpha, beta)
		if damped { // rod damping: c/h·ûₜûₜᵀ
			w := r.c * invH
			for a := range 3 {
				for b := range 3 {
					blk[3*a+b] += w * ut[a] * ut[b]
				}
			}
		}
		m.addPair(hess, r.a, r.b, &blk)
	}
	for si := range m.strs {
		st := &m.strs[si]
		n := st.Node
		d := [3]float64{x[3*n] - anchors[3*si], x[3*n+1] - anchors[3*si+1], x[3*n+2] - anchors[3*si+2]}
		u, l := unitOf(d)
		phi, t, kappa := stringRamp(l-st.RestLengthM, st.StiffnessNPerM, m.slackW)
		e += phi
		scale += t*(l+st.RestLengthM) + phi
		if floor != nil {
			floor[n] += st.StiffnessNPerM * (l + st.RestLengthM)
		}
		if m.anchored[n] {
			continue
		}
		for c := range 3 {
			g[3*n+c] += t * u[c]
		}
		if mode == hessNone {
			continue
		}
		m.stringHess(&blk, u, l, t, kappa)
		p := m.slot[n]
		hess.addBlock(p, p, &blk, 1)
	}
	for i := range floor {
		floor[i] *= 16 * 0x1p-52
	}
	return e, scale
}

// stringHess is the exact Hessian of one string's energy with respect to
// its node: κ·uuᵀ + (T/l)(I − uuᵀ), positive semi-definite since T, κ ≥ 0.
func (m *Model) stringHess(blk *[9]float64, u [3]float64, l, t, kappa float64) {
	beta := 0.0
	if l > 0 {
		beta = t / l
	}
	axisHess(blk, u, kappa, beta)
}

// addPair adds a two-node element Hessian [[H, −H], [−H, H]] for nodes a and
// b into hess, leaving out anchored nodes.
func (m *Model) addPair(hess *bandMatrix, a, b int, blk *[9]float64) {
	pa, pb := m.slot[a], m.slot[b]
	if pa >= 0 {
		hess.addBlock(pa, pa, blk, 1)
	}
	if pb >= 0 {
		hess.addBlock(pb, pb, blk, 1)
	}
	if pa >= 0 && pb >= 0 {
		if pa > pb {
			hess.addBlock(pa, pb, blk, -1)
		} else {
			hess.addBlock(pb, pa, blk, -1) // H is symmetric, so its transpose is itself
		}
	}
}

// Energy returns the kinetic energy ½Σmᵢ|vᵢ|² with vᵢ = (xᵢ − xPrevᵢ)/h and
// the potential energy (gravity mᵢ·g·zᵢ, rods, strings) of the free nodes at
// x with the given anchors, in joules. Anchored nodes count at their file
// positions and carry no kinetic or gravitational energy.
func (m *Model) Energy(x, xPrev, anchors []float64) (kineticJ, potentialJ float64) {
	m.checkLens(x, xPrev, anchors)
	pos := func(v []float64, i, c int) float64 {
		if m.anchored[i] {
			return m.fixedPos[3*i+c]
		}
		return v[3*i+c]
	}
	for i := range m.nNodes {
		if m.anchored[i] {
			continue
		}
		for c := range 3 {
			v := (x[3*i+c] - xPrev[3*i+c]) / m.h
			kineticJ += 0.5 * m.mass[i] * v * v
		}
		potentialJ += m.mass[i] * m.gravity * x[3*i+2]
	}
	for _, r := range m.rods {
		var d [3]float64
		for c := range 3 {
			d[c] = pos(x, r.a, c) - pos(x, r.b, c)
		}
		_, l := unitOf(d)
		potentialJ += 0.5 * r.k * (l - r.restLen) * (l - r.restLen)
	}
	for si, st := range m.strs {
		var d [3]float64
		for c := range 3 {
			d[c] = pos(x, st.Node, c) - anchors[3*si+c]
		}
		_, l := unitOf(d)
		phi, _, _ := stringRamp(l-st.RestLengthM, st.StiffnessNPerM, m.slackW)
		potentialJ += phi
	}
	return kineticJ, potentialJ
}

// StringTension returns the tension in newtons (≥ 0) of string i with the
// figure at x and the anchors at anchors.
func (m *Model) StringTension(i int, x, anchors []float64) float64 {
	m.checkLens(x, nil, anchors)
	st := m.strs[i]
	var d [3]float64
	for c := range 3 {
		p := x[3*st.Node+c]
		if m.anchored[st.Node] {
			p = m.fixedPos[3*st.Node+c]
		}
		d[c] = p - anchors[3*i+c]
	}
	_, l := unitOf(d)
	_, t, _ := stringRamp(l-st.RestLengthM, st.StiffnessNPerM, m.slackW)
	return t
}

// checkLens panics on a state or anchor vector of the wrong length
// (shape misuse). nil skips a vector.
func (m *Model) checkLens(x, xPrev, anchors []float64) {
	if len(x) != m.Dim() || (xPrev != nil && len(xPrev) != m.Dim()) || len(anchors) != 3*len(m.strs) {
		panic("sim: state or anchor vector of the wrong length")
	}
}
