package mpc

import "math"

// candidate is one possible linear constraint of the planner: a position,
// velocity or acceleration bound of one joint at one step. Its value is
//
//	v(c) = base + Σ_j coef[j]·c[j·nq + joint]
//
// where base (set per tick) collects the nominal, d0 and the commanded
// velocity, and coef (constant) the knots' weights.
type candidate struct {
	joint int
	kind  PlanConstraint
	step  int     // k: position q_k; velocity q_k − q_{k−1}; accel q_{k+1} − 2q_k + q_{k−1}
	lo    float64 // bound on v (before the tick's relaxation)
	hi    float64
	base  float64
	reach float64 // δ_max·Σ|coef|: how far the knots can move v
}

// constraintSet holds every candidate and the rows passed to the QP this
// tick: those whose bounds the knots can reach within their box.
type constraintSet struct {
	cand []candidate
	coef []float64 // len(cand) × knots
	rows []int     // candidate index of each QP row this tick
}

// pattern returns the steps and weights that make up a constraint kind at
// step k.
func pattern(kind PlanConstraint, k int) (steps [3]int, weights [3]float64, count int) {
	switch kind {
	case ConstraintPosition:
		return [3]int{k}, [3]float64{1}, 1
	case ConstraintVelocity:
		return [3]int{k, k - 1}, [3]float64{1, -1}, 2
	default:
		return [3]int{k + 1, k, k - 1}, [3]float64{1, -2, 1}, 3
	}
}

// buildCandidates enumerates the candidates and their constant knot
// coefficients.
func (p *Planner) buildCandidates() {
	cs := &p.qp.cons
	n, nq := p.steps, p.nq
	margin := p.set.PositionMargin
	add := func(i int, kind PlanConstraint, k int, lo, hi float64) {
		if math.IsInf(lo, -1) && math.IsInf(hi, 1) {
			return
		}
		cs.cand = append(cs.cand, candidate{joint: i, kind: kind, step: k, lo: lo, hi: hi})
		steps, weights, count := pattern(kind, k)
		var reach float64
		for j := range p.knots {
			var v float64
			for t := range count {
				v += weights[t] * p.stepWeight(steps[t], j)
			}
			cs.coef = append(cs.coef, v)
			reach += math.Abs(v)
		}
		cs.cand[len(cs.cand)-1].reach = reach * p.set.MaxDeviation
	}
	for i := range nq {
		l := p.limits[i]
		for k := 1; k <= n; k++ {
			add(i, ConstraintPosition, k, l.Lower+margin, l.Upper-margin)
		}
		dv := l.MaxVelocity * p.hp
		for k := 1; k <= n; k++ {
			add(i, ConstraintVelocity, k, -dv, dv)
		}
		da := l.MaxAccel * p.hp * p.hp
		for k := 0; k < n; k++ {
			add(i, ConstraintAccel, k, -da, da)
		}
	}
	cs.rows = make([]int, 0, len(cs.cand))
}

// constantJoint returns joint i's value at step s (−1…N) with every knot
// at zero: q̄_s + w_d0(s)·d0, and q_{−1} = q_0 − h_p·v_cmd.
func (p *Planner) constantJoint(s, i int) float64 {
	st := &p.st
	if s < 0 {
		return st.qbar[i] + st.d0[i] - p.hp*st.vCmd[i]
	}
	return st.qbar[s*p.nq+i] + p.stepWeight(s, -1)*st.d0[i]
}

// selectConstraints sets every candidate's base for this tick and keeps as
// QP rows those whose bounds the knots can reach.
func (p *Planner) selectConstraints() {
	cs := &p.qp.cons
	cs.rows = cs.rows[:0]
	for r := range cs.cand {
		cd := &cs.cand[r]
		steps, weights, count := pattern(cd.kind, cd.step)
		var base float64
		for t := range count {
			base += weights[t] * p.constantJoint(steps[t], cd.joint)
		}
		cd.base = base
		if base-cd.reach > cd.lo && base+cd.reach < cd.hi {
			continue
		}
		cs.rows = append(cs.rows, r)
	}
}

// candidateValue returns v(c) of candidate r.
func (p *Planner) candidateValue(r int, c []float64) float64 {
	cs := &p.qp.cons
	cd := &cs.cand[r]
	v := cd.base
	coef := cs.coef[r*p.knots : (r+1)*p.knots]
	for j, w := range coef {
		v += w * c[j*p.nq+cd.joint]
	}
	return v
}
