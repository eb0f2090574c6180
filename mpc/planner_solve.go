package mpc

import (
	"errors"
	"fmt"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/mat"
)

// solverData is the step solver's scratch.
type solverData struct {
	hSym  *mat.SymDense
	chol  mat.Cholesky
	dcVec *mat.VecDense
	gVec  *mat.VecDense
	gBuf  []float64
	cdc   []float64 // C·dc per QP row
}

// ErrQPNotAvailable: a step needed the constrained QP and none was wired.
var ErrQPNotAvailable = errors.New("mpc: the planner's step hit a constraint and the constrained QP solver is not available")

func (p *Planner) allocateSolver() {
	s := &p.sv
	s.hSym = mat.NewSymDense(p.nc, nil)
	s.gBuf = make([]float64, p.nc)
	s.dcVec = mat.NewVecDense(p.nc, p.lz.dc)
	s.gVec = mat.NewVecDense(p.nc, s.gBuf)
	s.cdc = make([]float64, len(p.qp.cons.cand))
}

// solveQP writes into lz.dc the minimiser of ½dcᵀH dc + gᵀdc under the
// tick's constraints. The unconstrained minimiser −H⁻¹g is tried first (a
// Cholesky solve); if it meets every constraint it is the QP's solution
// (the problem is convex), otherwise the constrained solver runs.
func (p *Planner) solveQP(g []float64) error {
	s, lz := &p.sv, &p.lz
	h := lz.h.RawMatrix()
	for i := range p.nc {
		for j := i; j < p.nc; j++ {
			s.hSym.SetSym(i, j, h.Data[i*h.Stride+j])
		}
	}
	if ok := s.chol.Factorize(s.hSym); !ok {
		return fmt.Errorf("mpc: the Gauss-Newton Hessian is not positive definite")
	}
	for i, v := range g {
		s.gBuf[i] = -v
	}
	if err := s.chol.SolveVecTo(s.dcVec, s.gVec); err != nil {
		return fmt.Errorf("mpc: Gauss-Newton step: %w", err)
	}
	if p.stepFeasible() {
		return nil
	}
	return p.solveConstrained(g)
}

// stepFeasible reports whether lz.dc meets every QP row and box bound.
func (p *Planner) stepFeasible() bool {
	q, lz, s := &p.qp, &p.lz, &p.sv
	for i, v := range lz.dc {
		if v < q.lb[i] || v > q.ub[i] {
			return false
		}
	}
	m := len(q.cons.rows)
	if m == 0 {
		return true
	}
	c := q.cFull.RawMatrix()
	c.Rows = m
	blas64.Gemv(blas.NoTrans, 1, c, vec(lz.dc), 0, vec(s.cdc[:m]))
	for row := range m {
		if v := s.cdc[row]; v < q.lo[row] || v > q.hi[row] {
			return false
		}
	}
	return true
}

// solveConstrained solves the QP with its constraints.
func (p *Planner) solveConstrained(g []float64) error {
	return ErrQPNotAvailable
}
