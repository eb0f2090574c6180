package mpc

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
)

// stepWeight returns the weight of knot j (−1: d0) in δ_k, k = 0…N. For
// k = −1 (the extrapolated step before the horizon) it returns the d0 part
// only; the dPrev part is added by the callers.
func (p *Planner) stepWeight(k, j int) float64 {
	if k < 0 {
		if j == -1 {
			return 1 - p.hp/p.tickS
		}
		return 0
	}
	return p.basis.weight(k, j)
}

// buildLinearTerms fills the constant Jacobian of the nominal and
// smoothness residuals and hLin = linᵀlin + μI.
func (p *Planner) buildLinearTerms() {
	nq, n, lz := p.nq, p.steps, &p.lz
	sNom := math.Sqrt(p.set.NominalWeight)
	sAcc := math.Sqrt(p.set.SmoothnessWeight) / (p.hp * p.hp)
	lz.lin.Zero()
	for k := 1; k <= n; k++ {
		for i := range nq {
			row := (k-1)*nq + i
			for j := range p.knots {
				if w := p.stepWeight(k, j); w != 0 {
					lz.lin.Set(row, j*nq+i, sNom*w)
				}
			}
		}
	}
	for k := 0; k < n; k++ {
		for i := range nq {
			row := n*nq + k*nq + i
			for j := range p.knots {
				w := p.stepWeight(k+1, j) - 2*p.stepWeight(k, j) + p.stepWeight(k-1, j)
				if w != 0 {
					lz.lin.Set(row, j*nq+i, sAcc*w)
				}
			}
		}
	}
	lin := lz.lin.RawMatrix()
	blas64.Gemm(blas.Trans, blas.NoTrans, 1, lin, lin, 0, lz.hLin.RawMatrix())
	for i := range p.nc {
		lz.hLin.Set(i, i, lz.hLin.At(i, i)+p.set.Regularisation)
	}
}

// fillLinearConstants sets the constant parts of the linear residuals from
// the tick's d0 and dPrev.
func (p *Planner) fillLinearConstants() {
	nq, n, lz, st := p.nq, p.steps, &p.lz, &p.st
	sNom := math.Sqrt(p.set.NominalWeight)
	sAcc := math.Sqrt(p.set.SmoothnessWeight) / (p.hp * p.hp)
	ratio := p.hp / p.tickS
	for k := 1; k <= n; k++ {
		for i := range nq {
			lz.lin0[(k-1)*nq+i] = sNom * p.stepWeight(k, -1) * st.d0[i]
		}
	}
	for k := 0; k < n; k++ {
		w := p.stepWeight(k+1, -1) - 2*p.stepWeight(k, -1) + p.stepWeight(k-1, -1)
		for i := range nq {
			v := w * st.d0[i]
			if k == 0 {
				v += ratio * st.dPrev[i]
			}
			lz.lin0[n*nq+k*nq+i] = sAcc * v
		}
	}
}

// fillJoints writes q_k = q̄_k + δ_k(c), k = 1…N, and their anchors.
func (p *Planner) fillJoints(c []float64) {
	nq, st := p.nq, &p.st
	for k := 1; k <= p.steps; k++ {
		qk := st.q[(k-1)*nq : k*nq]
		qb := st.qbar[k*nq : (k+1)*nq]
		w0 := p.stepWeight(k, -1)
		for i := range nq {
			v := qb[i] + w0*st.d0[i]
			for j := range p.knots {
				if w := p.stepWeight(k, j); w != 0 {
					v += w * c[j*nq+i]
				}
			}
			qk[i] = v
		}
		p.cws.AnchorsTo(st.anch[(k-1)*p.na3:k*p.na3], qk)
	}
}

// evaluate rolls the horizon out from the predicted state with knots c and
// fills the residuals and the cost. It leaves the rollout's states and
// factors in place for linearise.
func (p *Planner) evaluate(c []float64) error {
	p.fillJoints(c)
	if err := p.roll.Run(p.st.x0, p.st.xm1, p.st.anch); err != nil {
		return fmt.Errorf("mpc: planner rollout: %w", err)
	}
	p.figureResiduals()
	lz := &p.lz
	blas64.Gemv(blas.NoTrans, 1, lz.lin.RawMatrix(), vec(c), 0, vec(lz.rlin))
	for i, v := range lz.lin0 {
		lz.rlin[i] += v
	}
	lz.cost = sumSquares(lz.rfig) + sumSquares(lz.rlin)
	if math.IsNaN(lz.cost) || math.IsInf(lz.cost, 0) {
		return fmt.Errorf("mpc: planner cost is %v", lz.cost)
	}
	return nil
}

// stepState returns x_k of the last rollout, k = 0…N (x_0 is the initial
// state).
func (p *Planner) stepState(k int) []float64 { return p.roll.State(k) }

// figureResiduals fills rfig from the rollout: the weighted marker errors
// of steps 1…N and the terminal displacement error.
func (p *Planner) figureResiduals() {
	n, nm3, lz, st := p.steps, p.nm3, &p.lz, &p.st
	w := p.set.TrackingWeight
	for k := 1; k <= n; k++ {
		s := 1.0
		if k == n {
			s = p.set.TerminalFactor
		}
		lz.rowW[k-1] = math.Sqrt(w * s)
		x := p.stepState(k)
		r := st.refM[k*nm3 : (k+1)*nm3]
		out := lz.rfig[(k-1)*nm3 : k*nm3]
		for m, node := range p.markerNodes {
			for a := range 3 {
				out[3*m+a] = lz.rowW[k-1] * (x[3*node+a] - r[3*m+a])
			}
		}
	}
	lz.rowW[n] = math.Sqrt(w * p.set.TerminalFactor)
	xN, xP := p.stepState(n), p.stepState(n-1)
	rN, rP := st.refM[n*nm3:(n+1)*nm3], st.refM[(n-1)*nm3:n*nm3]
	out := lz.rfig[n*nm3 : (n+1)*nm3]
	for m, node := range p.markerNodes {
		for a := range 3 {
			out[3*m+a] = lz.rowW[n] * ((xN[3*node+a] - xP[3*node+a]) - (rN[3*m+a] - rP[3*m+a]))
		}
	}
}

// linearise computes the sensitivities of the last rollout (evaluate must
// have run at c) to the knots and forms the Gauss-Newton Hessian and
// gradient, and factorises the Hessian for the QP.
func (p *Planner) linearise() error {
	nq, n, lz, st := p.nq, p.steps, &p.lz, &p.st
	for k := 1; k <= n; k++ {
		dA := lz.dA[k-1]
		if p.na3 == 0 {
			continue
		}
		p.cws.AnchorJacobianTo(lz.ja, st.q[(k-1)*nq:k*nq])
		dA.Zero()
		for j := range p.knots {
			w := p.stepWeight(k, j)
			if w == 0 {
				continue
			}
			for i := range nq {
				for r := range p.na3 {
					dA.Set(r, j*nq+i, w*lz.ja.At(r, i))
				}
			}
		}
	}
	p.roll.Tangent(lz.dX, nil, nil, lz.dA)
	p.figureJacobian()
	// H = hLin + jfigᵀjfig, upper triangle only (all the QP reads): Syrk
	// does half Gemm's work.
	jf := lz.jfig.RawMatrix()
	h := lz.h.RawMatrix()
	copy(h.Data, lz.hLin.RawMatrix().Data)
	blas64.Syrk(blas.Trans, 1, jf, 1, blas64.Symmetric{N: p.nc, Stride: h.Stride, Data: h.Data, Uplo: blas.Upper})
	p.gradient()
	return p.factorizeQP()
}

// gradient sets g = jfigᵀ rfig + linᵀ rlin.
func (p *Planner) gradient() {
	lz := &p.lz
	blas64.Gemv(blas.Trans, 1, lz.jfig.RawMatrix(), vec(lz.rfig), 0, vec(lz.g))
	blas64.Gemv(blas.Trans, 1, lz.lin.RawMatrix(), vec(lz.rlin), 1, vec(lz.g))
}

// figureJacobian fills jfig from the step sensitivities dX.
func (p *Planner) figureJacobian() {
	n, nm3, nc, lz := p.steps, p.nm3, p.nc, &p.lz
	jf := lz.jfig.RawMatrix()
	for k := 1; k <= n; k++ {
		d := lz.dX[k-1].RawMatrix()
		for m, node := range p.markerNodes {
			for a := range 3 {
				dst := jf.Data[((k-1)*nm3+3*m+a)*jf.Stride:][:nc]
				src := d.Data[(3*node+a)*d.Stride:][:nc]
				for c := range dst {
					dst[c] = lz.rowW[k-1] * src[c]
				}
			}
		}
	}
	var dP blas64.General
	if n > 1 {
		dP = lz.dX[n-2].RawMatrix()
	}
	dN := lz.dX[n-1].RawMatrix()
	for m, node := range p.markerNodes {
		for a := range 3 {
			dst := jf.Data[(n*nm3+3*m+a)*jf.Stride:][:nc]
			src := dN.Data[(3*node+a)*dN.Stride:][:nc]
			for c := range dst {
				v := src[c]
				if n > 1 {
					v -= dP.Data[(3*node+a)*dP.Stride+c]
				}
				dst[c] = lz.rowW[n] * v
			}
		}
	}
}

func vec(v []float64) blas64.Vector { return blas64.Vector{N: len(v), Inc: 1, Data: v} }

func sumSquares(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += x * x
	}
	return s
}
