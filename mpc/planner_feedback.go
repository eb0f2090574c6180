package mpc

import (
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
)

// Feedback finishes the tick prepared by Prepare with the estimated figure
// state x at the tick's time t and xPrev at t−Δt, and writes the plan into
// dst (from NewPlan). See Planner for the scheme.
//
// On error (no prepared tick, or a failed QP) dst still holds a usable
// plan: the warm start, the previous correction carried forward, with
// Report.Status PlanFallback. Send it through the guard like any other.
func (p *Planner) Feedback(dst *Plan, x, xPrev []float64) error {
	if len(x) != p.dim || len(xPrev) != p.dim {
		panic("mpc: Planner.Feedback: state of the wrong length")
	}
	p.checkPlan(dst)
	st, lz, fb := &p.st, &p.lz, &p.fb
	rep := &st.report
	if !st.prep {
		rep.Status = PlanFallback
		p.writePlan(dst)
		return ErrPlannerNotPrepared
	}
	st.prep = false

	// The observed state's difference from the prediction, through the
	// horizon with the rollout's stored factors.
	p.backState(fb.xm1, x, xPrev)
	d0 := fb.dx0.RawMatrix().Data
	dm1 := fb.dxm1.RawMatrix().Data
	for i := range d0 {
		d0[i] = x[i] - st.x0[i]
		dm1[i] = fb.xm1[i] - st.xm1[i]
	}
	p.roll.Tangent(fb.dX, fb.dx0, fb.dxm1, nil)
	p.shiftedResiduals()

	// g at the observed state, and the cost there by the linearisation.
	blas64.Gemv(blas.Trans, 1, lz.jfig.RawMatrix(), vec(fb.rShift), 0, vec(fb.gShift))
	blas64.Gemv(blas.Trans, 1, lz.lin.RawMatrix(), vec(lz.rlin), 1, vec(fb.gShift))
	rep.CostBefore = sumSquares(fb.rShift) + sumSquares(lz.rlin)

	if err := p.solveQP(fb.gShift); err != nil {
		rep.Status = PlanFallback
		p.writePlan(dst)
		return err
	}
	rep.CostAfter = p.modelCost(fb.rShift, lz.dc)
	for i, v := range lz.dc {
		st.c[i] += v
	}
	rep.Iterations++
	st.have = true
	p.markActive()
	p.writePlan(dst)
	return nil
}

// Tick is Prepare with the estimate as its own prediction followed by
// Feedback: for callers that have no separate prediction (tests, offline
// tools). The server calls the two phases itself.
func (p *Planner) Tick(dst *Plan, tS float64, qCmd, qCmdPrev, x, xPrev []float64, budget Budget) error {
	if err := p.Prepare(tS, qCmd, qCmdPrev, x, xPrev, budget); err != nil {
		p.st.report.Status = PlanFallback
		p.checkPlan(dst)
		p.writePlan(dst)
		return err
	}
	return p.Feedback(dst, x, xPrev)
}

// shiftedResiduals writes rShift = rfig + (figure rows of the state shift).
func (p *Planner) shiftedResiduals() {
	n, nm3, lz, fb := p.steps, p.nm3, &p.lz, &p.fb
	copy(fb.rShift, lz.rfig)
	shift := func(k int) []float64 {
		if k == 0 {
			return fb.dx0.RawMatrix().Data
		}
		return fb.dX[k-1].RawMatrix().Data
	}
	for k := 1; k <= n; k++ {
		d := shift(k)
		out := fb.rShift[(k-1)*nm3 : k*nm3]
		for m, node := range p.markerNodes {
			for a := range 3 {
				out[3*m+a] += lz.rowW[k-1] * d[3*node+a]
			}
		}
	}
	dN, dP := shift(n), shift(n-1)
	out := fb.rShift[n*nm3 : (n+1)*nm3]
	for m, node := range p.markerNodes {
		for a := range 3 {
			out[3*m+a] += lz.rowW[n] * (dN[3*node+a] - dP[3*node+a])
		}
	}
}

// modelCost returns the Gauss-Newton model's cost ‖r + J·dc‖² for figure
// residuals r and the linear residuals at c + dc.
func (p *Planner) modelCost(r, dc []float64) float64 {
	lz := &p.lz
	t := lz.rtmp[:len(r)]
	copy(t, r)
	blas64.Gemv(blas.NoTrans, 1, lz.jfig.RawMatrix(), vec(dc), 1, vec(t))
	cost := sumSquares(t)
	t = lz.rtmp[:len(lz.rlin)]
	copy(t, lz.rlin)
	blas64.Gemv(blas.NoTrans, 1, lz.lin.RawMatrix(), vec(dc), 1, vec(t))
	return cost + sumSquares(t)
}

// markActive counts the QP rows and knot boxes at a bound at the current
// knots and records the kinds per joint.
func (p *Planner) markActive() {
	st, cs := &p.st, &p.qp.cons
	rep := &st.report
	for _, r := range cs.rows {
		cd := &cs.cand[r]
		v := p.candidateValue(r, st.c)
		tol := 1e-9 * math.Max(1, math.Max(math.Abs(cd.lo), math.Abs(cd.hi)))
		if v <= cd.lo+tol || v >= cd.hi-tol {
			rep.ActiveConstraints++
			rep.Active[cd.joint] |= cd.kind
		}
	}
	dm := p.set.MaxDeviation
	for idx, v := range st.c {
		if math.Abs(v) >= dm*(1-1e-9) {
			rep.ActiveConstraints++
			rep.Active[idx%p.nq] |= ConstraintDeviation
		}
	}
}

// writePlan fills dst from the current solution.
func (p *Planner) writePlan(dst *Plan) {
	st := &p.st
	nq := p.nq
	dst.TimeS = st.tS + p.tickS
	p.targetAt(dst.Target, dst.Correction, p.tickS)
	for i := range p.set.PreviewTicks {
		p.targetAt(dst.Preview[i*nq:(i+1)*nq], nil, float64(i+2)*p.tickS)
	}
	active := dst.Report.Active
	copy(active, st.report.Active)
	dst.Report = st.report
	dst.Report.Active = active
}

// targetAt writes q̄(t+τ) + δ(τ) into q and δ(τ) into corr (if not nil).
// δ(τ) is interpolated linearly between the step values δ_k = δ(k·h_p):
// the model sees the joints only at the step ends and moves the anchors
// between them as backward Euler does, so this is the path the plan was
// computed for (the B-spline itself can bend between steps when its spans
// are as short as a step). Beyond the horizon δ holds δ_N.
func (p *Planner) targetAt(q, corr []float64, tau float64) {
	st := &p.st
	p.sched.PositionTo(st.qbarT, st.tS+tau)
	u := tau / p.hp
	k := int(math.Floor(u))
	f := u - float64(k)
	if k >= p.steps {
		k, f = p.steps, 0
	}
	if k < 0 {
		k, f = 0, 0
	}
	for i := range p.nq {
		d := (1-f)*p.stepCorrection(k, i) + f*p.stepCorrection(min(k+1, p.steps), i)
		q[i] = st.qbarT[i] + d
		if corr != nil {
			corr[i] = d
		}
	}
}

// stepCorrection returns δ_k of joint i at the current knots.
func (p *Planner) stepCorrection(k, i int) float64 {
	st := &p.st
	v := p.stepWeight(k, -1) * st.d0[i]
	for j := range p.knots {
		if w := p.stepWeight(k, j); w != 0 {
			v += w * st.c[j*p.nq+i]
		}
	}
	return v
}

func (p *Planner) checkPlan(dst *Plan) {
	if len(dst.Target) != p.nq || len(dst.Correction) != p.nq ||
		len(dst.Preview) != p.set.PreviewTicks*p.nq || len(dst.Report.Active) != p.nq {
		panic("mpc: Planner: plan not sized for this planner (use NewPlan)")
	}
}

// PredictTo writes the planner's prediction of the figure state at the
// next tick (x at t+Δt, xPrev at t) after a successful Feedback, for
// callers without an estimator prediction: the last rollout moved by the
// feedback's state shift and knot step, to first order. x(t+Δt) is read
// off step 1 when h_p = Δt and interpolated between x(t) and step 1
// otherwise. xObs is the state Feedback was given at t.
func (p *Planner) PredictTo(x, xPrev, xObs []float64) {
	lz, fb := &p.lz, &p.fb
	x1 := p.roll.State(1)
	d1 := fb.dX[0].RawMatrix().Data
	copy(x, x1)
	for i := range x {
		x[i] += d1[i]
	}
	blas64.Gemv(blas.NoTrans, 1, lz.dX[0].RawMatrix(), vec(lz.dc), 1, vec(x))
	if f := p.tickS / p.hp; math.Abs(f-1) > 1e-12 {
		for i := range x {
			x[i] = xObs[i] + f*(x[i]-xObs[i])
		}
	}
	copy(xPrev, xObs)
}
