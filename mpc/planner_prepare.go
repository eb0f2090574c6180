package mpc

import (
	"fmt"
	"math"
)

// Line-search constants (Nocedal & Wright, Numerical Optimization, 2nd ed.,
// §3.1: Armijo's sufficient decrease with backtracking; c₁ = 1e-4 is the
// value they suggest).
const (
	armijoC1        = 1e-4
	lineSearchHalve = 10
)

// Prepare runs the tick's work that does not need the observation (see
// Planner). tS is the tick's cue time, the time the current command q(t)
// applies and the state refers to; qCmd = q(t) and qCmdPrev = q(t−Δt) are
// the last two commands sent (after the guard); xPred and xPredPrev are
// the predicted figure state at t and t−Δt. budget may be nil.
//
// An error means the model or the QP failed; Feedback then returns the
// warm start as a fallback plan (and the error again).
func (p *Planner) Prepare(tS float64, qCmd, qCmdPrev, xPred, xPredPrev []float64, budget Budget) error {
	if len(qCmd) != p.nq || len(qCmdPrev) != p.nq {
		panic("mpc: Planner.Prepare: joint vector of the wrong length")
	}
	if len(xPred) != p.dim || len(xPredPrev) != p.dim {
		panic("mpc: Planner.Prepare: state of the wrong length")
	}
	st := &p.st
	st.prep = false
	rep := &st.report
	rep.Status, rep.Iterations = PlanOK, 0
	rep.PrepareCostBefore, rep.PrepareCostAfter = math.NaN(), math.NaN()
	rep.CostBefore, rep.CostAfter = math.NaN(), math.NaN()
	rep.ActiveConstraints = 0
	for i := range rep.Active {
		rep.Active[i] = 0
	}
	if math.IsNaN(tS) || math.IsInf(tS, 0) {
		return fmt.Errorf("mpc: planner tick time %v is not finite", tS)
	}

	p.shiftWarmStart(tS)
	p.loadTick(tS, qCmd, qCmdPrev, xPred, xPredPrev)
	if err := p.modelReference(); err != nil {
		return err
	}
	p.shiftReference()

	if err := p.evaluate(st.c); err != nil {
		return err
	}
	rep.PrepareCostBefore = p.lz.cost
	if err := p.linearise(); err != nil {
		return err
	}
	p.setQPBounds()

	for rep.Iterations+1 < p.set.MaxIterations {
		if budget != nil && !budget() {
			rep.Status = PlanBudget
			break
		}
		if err := p.solveQP(p.lz.g); err != nil {
			return err
		}
		if maxAbs(p.lz.dc) < p.set.StepTolerance {
			rep.Status = PlanConverged
			break
		}
		ok, err := p.lineSearch()
		if err != nil {
			return err
		}
		if !ok {
			rep.Status = PlanLineSearchFailed
			break
		}
		rep.Iterations++
		if err := p.linearise(); err != nil {
			return err
		}
		p.setQPBounds()
	}
	rep.PrepareCostAfter = p.lz.cost
	st.prep = true
	return nil
}

// shiftWarmStart moves the previous solution forward to tick time tS: each
// new knot takes the old correction function's value at its time. A first
// tick, a time going backwards or a jump past the horizon starts from zero.
func (p *Planner) shiftWarmStart(tS float64) {
	st := &p.st
	shift := tS - st.tS
	horizon := float64(p.steps) * p.hp
	if !st.have || shift < 0 || shift > horizon {
		for i := range st.c {
			st.c[i] = 0
		}
		return
	}
	copy(st.cOld, st.c)
	copy(st.d0Old, st.d0)
	for j := range p.knots {
		tau := p.basis.knotTimeS(j) + shift
		for i := range p.nq {
			st.c[j*p.nq+i] = p.basis.valueAt(tau, i, p.nq, st.d0Old, st.cOld)
		}
	}
}

// loadTick stores the tick's inputs, the nominal and the reference over
// the horizon, and the constraints that can act.
func (p *Planner) loadTick(tS float64, qCmd, qCmdPrev, xPred, xPredPrev []float64) {
	st := &p.st
	nq := p.nq
	st.tS = tS
	for k := 0; k <= p.steps; k++ {
		t := tS + float64(k)*p.hp
		p.sched.PositionTo(st.qbar[k*nq:(k+1)*nq], t)
		p.ref.MarkersTo(st.refM[k*p.nm3:(k+1)*p.nm3], t)
	}
	p.sched.PositionTo(st.qbarT, tS-p.tickS)
	for i := range nq {
		st.d0[i] = qCmd[i] - st.qbar[i]
		st.dPrev[i] = qCmdPrev[i] - st.qbarT[i]
		st.vCmd[i] = (qCmd[i] - qCmdPrev[i]) / p.tickS
	}
	dm := p.set.MaxDeviation
	for i, v := range st.c {
		st.c[i] = math.Max(-dm, math.Min(dm, v))
	}
	copy(st.x0, xPred)
	p.backState(st.xm1, xPred, xPredPrev)
	p.fillLinearConstants()
	p.selectConstraints()
}

// modelReference replaces r_k by the markers of the model's rollout from
// the nominal state under the nominal joints (offset-free tracking, see
// Planner), when the reference gives nominal states.
func (p *Planner) modelReference() error {
	if p.nomStates == nil {
		return nil
	}
	st, nq, na3 := &p.st, p.nq, p.na3
	p.nomStates.StateTo(p.xBar0, st.tS)
	p.nomStates.StateTo(p.xBarPrev, st.tS-p.tickS)
	p.backState(p.xBarM1, p.xBar0, p.xBarPrev)
	for k := 1; k <= p.steps; k++ {
		p.cws.AnchorsTo(p.anchBar[(k-1)*na3:k*na3], st.qbar[k*nq:(k+1)*nq])
	}
	if err := p.nomRoll.Run(p.xBar0, p.xBarM1, p.anchBar); err != nil {
		return fmt.Errorf("mpc: planner nominal rollout: %w", err)
	}
	for k := 0; k <= p.steps; k++ {
		x := p.nomRoll.State(k)
		r := st.refM[k*p.nm3 : (k+1)*p.nm3]
		for m, node := range p.markerNodes {
			copy(r[3*m:3*m+3], x[3*node:3*node+3])
		}
	}
	return nil
}

// backState writes x(t−h_p) from x(t) and x(t−Δt) by constant velocity.
func (p *Planner) backState(dst, x, xPrev []float64) {
	ratio := p.hp / p.tickS
	for i := range dst {
		dst[i] = x[i] - ratio*(x[i]-xPrev[i])
	}
}

// lineSearch tries c + α·dc for α = 1, ½, ¼, … on the true rollout cost
// and keeps the first with sufficient decrease. On failure it restores the
// rollout at c. The slope of the cost Σr² along dc is 2gᵀdc.
func (p *Planner) lineSearch() (bool, error) {
	lz, st := &p.lz, &p.st
	cost0 := lz.cost
	var slope float64
	for i, g := range lz.g {
		slope += 2 * g * lz.dc[i]
	}
	if !(slope < 0) {
		return false, p.evaluate(st.c)
	}
	alpha := 1.0
	for range lineSearchHalve {
		for i := range lz.trial {
			lz.trial[i] = st.c[i] + alpha*lz.dc[i]
		}
		err := p.evaluate(lz.trial)
		if err == nil && lz.cost <= cost0+armijoC1*alpha*slope {
			copy(st.c, lz.trial)
			return true, nil
		}
		alpha /= 2
	}
	return false, p.evaluate(st.c)
}

func maxAbs(v []float64) float64 {
	var m float64
	for _, x := range v {
		m = math.Max(m, math.Abs(x))
	}
	return m
}
