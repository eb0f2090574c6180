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
	cons   constraintSet
	cFull  *mat.Dense // every candidate row could be a QP row: len(cand) × nc
	lo, hi []float64  // per QP row
	lb, ub []float64  // per knot
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
	p.allocateSolver()
}

// buildQPMatrix writes this tick's QP rows into the top of cFull.
func (p *Planner) buildQPMatrix() {
	q := &p.qp
	raw := q.cFull.RawMatrix()
	for row, r := range q.cons.rows {
		dst := raw.Data[row*raw.Stride : row*raw.Stride+p.nc]
		for i := range dst {
			dst[i] = 0
		}
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
	for row, r := range q.cons.rows {
		cd := &q.cons.cand[r]
		v := p.candidateValue(r, st.c)
		q.lo[row] = math.Min(cd.lo-v, 0)
		q.hi[row] = math.Max(cd.hi-v, 0)
	}
	dm := p.set.MaxDeviation
	for i, c := range st.c {
		q.lb[i] = math.Min(-dm-c, 0)
		q.ub[i] = math.Max(dm-c, 0)
	}
}
