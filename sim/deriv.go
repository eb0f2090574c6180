package sim

// Derivatives of the step's gradient G(x⁺; x_t, x_{t−1}, a) = ∇E at the
// solution, beside the exact Hessian A = ∂G/∂x⁺ that finishStep factorises:
//
//	∂G/∂x_{t−1} = M/h²                                (diagonal)
//	∂G/∂x_t     = −2M/h² − C/h + Σ_rods B-blocks        (C the node drags)
//	∂G/∂a_s     = −H_s on string s's node               (H_s its exact Hessian)
//
// A damped rod's force on node a is (c/h)·s·û with û = d_t/|d_t|,
// s = (d − d_t)·û, d = x_a − x_b. Its derivative with respect to d_t is
//
//	B = (c/h)·[ û (−û + P r/|d_t|)ᵀ + s·P/|d_t| ],  r = d − d_t, P = I − ûûᵀ,
//
// entering ∂G/∂x_t with +B on (a,a) and (b,b) and −B on (a,b) and (b,a).

// derivBlocks fills d.rodB and d.strH at the solution x.
func (m *Model) derivBlocks(d *stepDerivs, x, xc, anchors []float64) {
	invH := 1 / m.h
	for ri := range m.rods {
		r := &m.rods[ri]
		blk := (*[9]float64)(d.rodB[9*ri : 9*ri+9])
		*blk = [9]float64{}
		if r.c == 0 {
			continue
		}
		dt := m.nodeDiff(xc, r.a, r.b)
		u, lt := unitOf(dt)
		if lt == 0 {
			continue
		}
		dn := m.nodeDiff(x, r.a, r.b)
		rv := [3]float64{dn[0] - dt[0], dn[1] - dt[1], dn[2] - dt[2]}
		s := rv[0]*u[0] + rv[1]*u[1] + rv[2]*u[2]
		// P r = r − (u·r) u = r − s u
		pr := [3]float64{rv[0] - s*u[0], rv[1] - s*u[1], rv[2] - s*u[2]}
		w := r.c * invH
		for a := range 3 {
			for b := range 3 {
				p := -u[a] * u[b]
				if a == b {
					p++
				}
				blk[3*a+b] = w * (u[a]*(-u[b]+pr[b]/lt) + s*p/lt)
			}
		}
	}
	for si := range m.strs {
		st := &m.strs[si]
		n := st.Node
		blk := (*[9]float64)(d.strH[9*si : 9*si+9])
		dv := [3]float64{x[3*n] - anchors[3*si], x[3*n+1] - anchors[3*si+1], x[3*n+2] - anchors[3*si+2]}
		u, l := unitOf(dv)
		_, t, kappa := stringRamp(l-st.RestLengthM, st.StiffnessNPerM, m.slackW)
		m.stringHess(blk, u, l, t, kappa)
	}
}
