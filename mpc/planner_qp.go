package mpc

import (
	"math"

	"gonum.org/v1/gonum/mat"
)

// qpData holds the planner's QP in the knot step dc:
//
//	minimise ½dcᵀH dc + gᵀdc  s.t.  lo ≤ C dc ≤ hi,  lb ≤ dc ≤ ub,
//
// C's rows are the constraints the knots can reach this tick (see
// selectConstraints); the bounds are relative to the current knots and
// relaxed to include dc = 0 where the current knots already break one.
type qpData struct {
	cons       constraintSet
	cFull      *mat.Dense // one row per candidate, constant
	lo, hi     []float64  // per candidate; ±Inf for those that cannot act this tick
	lb, ub     []float64  // per knot
	hSym       *mat.SymDense
	solver     *QPSolver
	prob       QP
	warm       bool // the solver holds an active set to start from
	lastActive int  // active constraints of the last solve
}

func (p *Planner) allocateQP() {
	p.buildCandidates()
	q := &p.qp
	nr := len(q.cons.cand)
	q.cFull = mat.NewDense(max(nr, 1), p.nc, nil)
	q.lo = make([]float64, nr)
	q.hi = make([]float64, nr)
	q.lb = make([]float64, p.nc)
	q.ub = make([]float64, p.nc)
	q.hSym = mat.NewSymDense(p.nc, nil)
	q.solver = NewQPSolver(p.nc, nr, QPSettings{})
	q.prob = QP{H: q.hSym, G: p.lz.g, LB: q.lb, UB: q.ub}
	if nr > 0 {
		q.prob.C, q.prob.Lo, q.prob.Hi = q.cFull, q.lo, q.hi
	}
	p.buildQPMatrix()
}

// buildQPMatrix writes every candidate's row into cFull.
func (p *Planner) buildQPMatrix() {
	q := &p.qp
	raw := q.cFull.RawMatrix()
	for r := range q.cons.cand {
		dst := raw.Data[r*raw.Stride : r*raw.Stride+p.nc]
		cd := &q.cons.cand[r]
		coef := q.cons.coef[r*p.knots : (r+1)*p.knots]
		for j, w := range coef {
			dst[j*p.nq+cd.joint] = w
		}
	}
}

// setQPBounds writes the row and box bounds relative to the current knots.
func (p *Planner) setQPBounds() {
	q, st := &p.qp, &p.st
	for r := range q.lo {
		q.lo[r], q.hi[r] = math.Inf(-1), math.Inf(1)
	}
	for _, r := range q.cons.rows {
		cd := &q.cons.cand[r]
		v := p.candidateValue(r, st.c)
		q.lo[r] = math.Min(cd.lo-v, 0)
		q.hi[r] = math.Max(cd.hi-v, 0)
	}
	dm := p.set.MaxDeviation
	for i, c := range st.c {
		q.lb[i] = math.Min(-dm-c, 0)
		q.ub[i] = math.Max(dm-c, 0)
	}
}
