package sim

import "gonum.org/v1/gonum/mat"

// sensBuffers are the right-hand-side buffers of the sensitivity solves,
// grown on first use with a given size and reused after.
type sensBuffers struct {
	rhs []float64
}

func (b *sensBuffers) get(n int) []float64 {
	if cap(b.rhs) < n {
		b.rhs = make([]float64, n)
	}
	b.rhs = b.rhs[:n]
	clear(b.rhs)
	return b.rhs
}

// rows is a row-major matrix view: row r at data[r*stride:], k columns. A
// nil data means the zero matrix.
type rows struct {
	data   []float64
	stride int
}

func denseRows(a *mat.Dense, r, c int, name string) rows {
	if a == nil {
		return rows{}
	}
	ar, ac := a.Dims()
	if ar != r || ac != c {
		panic("sim: " + name + " has the wrong shape")
	}
	raw := a.RawMatrix()
	return rows{data: raw.Data, stride: raw.Stride}
}

// tangentRHS writes into rhs (band order, 3·free × k, row-major) the
// right-hand side b = ∂G/∂x_t·cur + ∂G/∂x_{t−1}·prev + ∂G/∂a·da of one
// step with derivative data d, so that dx⁺ = −A⁻¹b. Anchored nodes' rows
// of cur and prev are ignored (their positions are constants).
func (m *Model) tangentRHS(d *stepDerivs, rhs []float64, k int, cur, prev, da rows) {
	invH2, invH := 1/(m.h*m.h), 1/m.h
	for p, i := range m.order {
		cc := -(2*m.mass[i]*invH2 + m.drag[i]*invH)
		cp := m.mass[i] * invH2
		for q := range 3 {
			out := rhs[(3*p+q)*k : (3*p+q+1)*k]
			switch {
			case cur.data != nil && prev.data != nil:
				rc := cur.data[(3*i+q)*cur.stride:]
				rp := prev.data[(3*i+q)*prev.stride:]
				rc, rp = rc[:len(out)], rp[:len(out)]
				for j := range out {
					out[j] = cc*rc[j] + cp*rp[j]
				}
			case cur.data != nil:
				rc := cur.data[(3*i+q)*cur.stride:]
				rc = rc[:len(out)]
				for j := range out {
					out[j] = cc * rc[j]
				}
			case prev.data != nil:
				rp := prev.data[(3*i+q)*prev.stride:]
				rp = rp[:len(out)]
				for j := range out {
					out[j] = cp * rp[j]
				}
			default:
				clear(out)
			}
		}
	}
	if cur.data != nil {
		for ri := range m.rods {
			r := &m.rods[ri]
			if r.c == 0 {
				continue
			}
			b := (*[9]float64)(d.rodB[9*ri : 9*ri+9])
			pa, pb := m.slot[r.a], m.slot[r.b]
			if pa >= 0 && pb >= 0 {
				rodTangent(b, k, rhs, pa, pb, cur, r.a, r.b)
				continue
			}
			for j := range k {
				var dd [3]float64
				for q := range 3 {
					if pa >= 0 {
						dd[q] += cur.data[(3*r.a+q)*cur.stride+j]
					}
					if pb >= 0 {
						dd[q] -= cur.data[(3*r.b+q)*cur.stride+j]
					}
				}
				for q := range 3 {
					v := b[3*q]*dd[0] + b[3*q+1]*dd[1] + b[3*q+2]*dd[2]
					if pa >= 0 {
						rhs[(3*pa+q)*k+j] += v
					}
					if pb >= 0 {
						rhs[(3*pb+q)*k+j] -= v
					}
				}
			}
		}
	}
	if da.data != nil {
		for si := range m.strs {
			p := m.slot[m.strs[si].Node]
			if p < 0 {
				continue
			}
			hs := (*[9]float64)(d.strH[9*si : 9*si+9])
			for j := range k {
				a0 := da.data[(3*si)*da.stride+j]
				a1 := da.data[(3*si+1)*da.stride+j]
				a2 := da.data[(3*si+2)*da.stride+j]
				for q := range 3 {
					rhs[(3*p+q)*k+j] -= hs[3*q]*a0 + hs[3*q+1]*a1 + hs[3*q+2]*a2
				}
			}
		}
	}
}

// rodTangent adds one damped rod's part of ∂G/∂x_t·cur for two free
// nodes a, b (band positions pa, pb): v = B·(cur_a − cur_b), +v on a's
// rows and −v on b's, column by column in contiguous rows.
func rodTangent(b *[9]float64, k int, rhs []float64, pa, pb int, cur rows, a, bn int) {
	row := func(v []float64, r, stride int) []float64 { return v[r*stride : r*stride+k : r*stride+k] }
	a0, a1, a2 := row(cur.data, 3*a, cur.stride), row(cur.data, 3*a+1, cur.stride), row(cur.data, 3*a+2, cur.stride)
	b0, b1, b2 := row(cur.data, 3*bn, cur.stride), row(cur.data, 3*bn+1, cur.stride), row(cur.data, 3*bn+2, cur.stride)
	ra0, ra1, ra2 := row(rhs, 3*pa, k), row(rhs, 3*pa+1, k), row(rhs, 3*pa+2, k)
	rb0, rb1, rb2 := row(rhs, 3*pb, k), row(rhs, 3*pb+1, k), row(rhs, 3*pb+2, k)
	for j := range a0 {
		d0, d1, d2 := a0[j]-b0[j], a1[j]-b1[j], a2[j]-b2[j]
		v0 := b[0]*d0 + b[1]*d1 + b[2]*d2
		v1 := b[3]*d0 + b[4]*d1 + b[5]*d2
		v2 := b[6]*d0 + b[7]*d1 + b[8]*d2
		ra0[j] += v0
		ra1[j] += v1
		ra2[j] += v2
		rb0[j] -= v0
		rb1[j] -= v1
		rb2[j] -= v2
	}
}

// scatterNeg writes −src (band order, 3·free × k) into dst (external
// order, Dim × k), zeroing anchored nodes' rows.
func (m *Model) scatterNeg(dst rows, src []float64, k int) {
	for i := range m.nNodes {
		p := m.slot[i]
		for q := range 3 {
			out := dst.data[(3*i+q)*dst.stride : (3*i+q)*dst.stride+k]
			if p < 0 {
				clear(out)
				continue
			}
			in := src[(3*p+q)*k : (3*p+q+1)*k]
			for j, v := range in {
				out[j] = -v
			}
		}
	}
}

// Sensitivity writes into dxNext the change of the last step's result for
// changes dxCur of x_t, dxPrev of x_{t−1} and dAnchors of the anchors (nil
// means zero), by the implicit function theorem:
//
//	dx⁺ = −A⁻¹(∂G/∂x_t·dx_t + ∂G/∂x_{t−1}·dx_{t−1} + ∂G/∂a·da)
//
// with the factor of A kept by Step. Anchored nodes' entries of the inputs
// are ignored and their outputs are zero. It panics if ws holds no
// successful step. It allocates nothing.
func (ws *Workspace) Sensitivity(dxNext, dxCur, dxPrev, dAnchors []float64) {
	m := ws.m
	if !ws.valid {
		panic("sim: Sensitivity: the workspace holds no successful step")
	}
	n := m.Dim()
	if len(dxNext) != n || (dxCur != nil && len(dxCur) != n) || (dxPrev != nil && len(dxPrev) != n) || (dAnchors != nil && len(dAnchors) != 3*len(m.strs)) {
		panic("sim: Sensitivity: vector of the wrong length")
	}
	m.tangentRHS(ws.d, ws.rhs, 1, rows{dxCur, 1}, rows{dxPrev, 1}, rows{dAnchors, 1})
	ws.d.chol.solve(ws.rhs, 1)
	m.scatterNeg(rows{dxNext, 1}, ws.rhs, 1)
}

// SensitivityMatrices writes the Jacobians of the last step's result:
// dCur = ∂x⁺/∂x_t and dPrev = ∂x⁺/∂x_{t−1} (Dim × Dim) and dAnchors =
// ∂x⁺/∂a (Dim × 3·NumAnchors). A nil destination is skipped; an empty one
// is sized; one of another shape panics. Rows and columns of anchored
// nodes are zero. It panics if ws holds no successful step; after the
// first call with given destinations it allocates nothing.
func (ws *Workspace) SensitivityMatrices(dCur, dPrev, dAnchors *mat.Dense) {
	m := ws.m
	if !ws.valid {
		panic("sim: SensitivityMatrices: the workspace holds no successful step")
	}
	n, na, nf := m.Dim(), 3*len(m.strs), 3*len(m.order)
	invH2, invH := 1/(m.h*m.h), 1/m.h
	if dCur != nil {
		dst := sizedRows(dCur, n, n, "dCur")
		rhs := ws.sens.get(nf * n)
		for p, i := range m.order {
			v := -(2*m.mass[i]*invH2 + m.drag[i]*invH)
			for q := range 3 {
				rhs[(3*p+q)*n+3*i+q] = v
			}
		}
		for ri := range m.rods {
			r := &m.rods[ri]
			if r.c == 0 {
				continue
			}
			b := (*[9]float64)(ws.d.rodB[9*ri : 9*ri+9])
			for _, rowNode := range [2]int{r.a, r.b} {
				p := m.slot[rowNode]
				if p < 0 {
					continue
				}
				for _, colNode := range [2]int{r.a, r.b} {
					if m.anchored[colNode] {
						continue
					}
					sign := 1.0
					if rowNode != colNode {
						sign = -1
					}
					for q := range 3 {
						for c := range 3 {
							rhs[(3*p+q)*n+3*colNode+c] += sign * b[3*q+c]
						}
					}
				}
			}
		}
		ws.d.chol.solve(rhs, n)
		m.scatterNeg(dst, rhs, n)
	}
	if dPrev != nil {
		dst := sizedRows(dPrev, n, n, "dPrev")
		rhs := ws.sens.get(nf * n)
		for p, i := range m.order {
			for q := range 3 {
				rhs[(3*p+q)*n+3*i+q] = m.mass[i] * invH2
			}
		}
		ws.d.chol.solve(rhs, n)
		m.scatterNeg(dst, rhs, n)
	}
	if dAnchors != nil && na > 0 {
		dst := sizedRows(dAnchors, n, na, "dAnchors")
		rhs := ws.sens.get(nf * na)
		for si := range m.strs {
			p := m.slot[m.strs[si].Node]
			if p < 0 {
				continue
			}
			hs := ws.d.strH[9*si : 9*si+9]
			for q := range 3 {
				for c := range 3 {
					rhs[(3*p+q)*na+3*si+c] = -hs[3*q+c]
				}
			}
		}
		ws.d.chol.solve(rhs, na)
		m.scatterNeg(dst, rhs, na)
	}
}

func sizedRows(a *mat.Dense, r, c int, name string) rows {
	if a.IsEmpty() {
		a.ReuseAs(r, c)
	}
	return denseRows(a, r, c, name)
}

// ParamSensitivity writes into dst (length Dim) the derivative of the last
// step's result with respect to one model parameter, x_t, x_{t−1} and the
// anchors held fixed: dx⁺/dθ = −A⁻¹·∂G/∂θ. It panics if ws holds no
// successful step or the parameter does not exist. It allocates nothing.
func (ws *Workspace) ParamSensitivity(dst []float64, p Param) {
	m := ws.m
	if !ws.valid {
		panic("sim: ParamSensitivity: the workspace holds no successful step")
	}
	if len(dst) != m.Dim() {
		panic("sim: ParamSensitivity: vector of the wrong length")
	}
	m.checkParam(p)
	clear(ws.rhs)
	m.paramGrad(ws.rhs, 1, ws.x, &ws.in, p)
	ws.d.chol.solve(ws.rhs, 1)
	m.scatterNeg(rows{dst, 1}, ws.rhs, 1)
}
