package mpc

import (
	"fmt"
)

// factorizeQP hands the Gauss-Newton Hessian to the QP solver, which keeps
// its factor for every solve until the next linearisation (the feedback
// phase reuses the prepare phase's factor).
func (p *Planner) factorizeQP() error {
	q, lz := &p.qp, &p.lz
	h := lz.h.RawMatrix()
	for i := range p.nc {
		for j := i; j < p.nc; j++ {
			q.hSym.SetSym(i, j, h.Data[i*h.Stride+j])
		}
	}
	if err := q.solver.Factorize(q.hSym); err != nil {
		return fmt.Errorf("mpc: planner QP: %w", err)
	}
	return nil
}

// solveQP writes into lz.dc the minimiser of ½dcᵀH dc + gᵀdc under the
// tick's constraints, warm-started from the last active set.
func (p *Planner) solveQP(g []float64) error {
	q := &p.qp
	q.prob.G = g
	res, err := q.solver.SolveFactorized(p.lz.dc, &q.prob, q.warm)
	if err != nil {
		q.warm = false
		return fmt.Errorf("mpc: planner QP: %w", err)
	}
	q.warm = true
	q.lastActive = 0
	for _, s := range res.RowSide {
		if s != QPInactive {
			q.lastActive++
		}
	}
	for _, s := range res.BoundSide {
		if s != QPInactive {
			q.lastActive++
		}
	}
	return nil
}
