package mpc

import (
	"errors"
	"fmt"

	"gonum.org/v1/gonum/mat"

	"tautline/sim"
)

// JointSchedule gives the nominal joint vector over cue time. *Cue is one.
type JointSchedule interface {
	// PositionTo writes every joint's nominal position at cue time tS
	// into dst (len = the cell's joint count).
	PositionTo(dst []float64, tS float64)
}

// MarkerReference gives where every marker of the cell should be over cue
// time, x, y, z per marker in the cell's marker order, world frame, m.
// *Reference (a reference file) and *Nominal (the cue simulated) are two.
type MarkerReference interface {
	MarkersTo(dst []float64, tS float64)
}

// NominalStates gives the figure's nominal state over cue time (length
// Dim of the cell's model). *Nominal is one. When the planner's reference
// also offers the nominal states, the planner tracks in offset-free form
// (see Planner).
type NominalStates interface {
	StateTo(dst []float64, tS float64)
}

// Budget is the caller's say over the work of one tick: the planner asks
// it before every Gauss-Newton iteration of the prepare phase beyond the
// linearisation, and stops when it returns false. A nil Budget never
// says no; the iteration cap still holds.
type Budget func() bool

// Planner is the receding-horizon Gauss-Newton corrector of one cell and
// one cue (DESIGN §4.3). It is a value: no clock, no goroutine, no I/O; all
// scratch is allocated by NewPlanner, so ticks allocate nothing.
//
// # One tick
//
// At tick time t the arms are at the command q(t) (the last target sent)
// and the figure's state is x(t). One tick is
//
//  1. Prepare(t, q(t), q(t−Δt), x̂(t), x̂(t−Δt), budget), before the
//     observation: x̂ is the predicted state (from the estimator, or
//     PredictTo). The previous solution is shifted by one tick, the horizon
//     is rolled out on the model from x̂, and, while the iteration cap and
//     the budget allow, Gauss-Newton iterations with a line search on the
//     true rollout cost improve it. The phase ends with the linearisation
//     at the current solution: the rollout's forward sensitivities and the
//     QP's Hessian, gradient and constraints.
//  2. Feedback(plan, x(t), x(t−Δt)), after it: the difference between the
//     estimated and the predicted state is carried through the horizon with
//     the stored sensitivity factors (one direction, cheap), the gradient
//     is shifted by it, and one QP gives the step that is applied in full.
//     This is the real-time iteration of Diehl, Bock & Schlöder (2005):
//     the expensive linearisation happens before the observation, so the
//     observation-to-command time is one small QP.
//
// # Horizon and tick
//
// The model steps with h_p (PlannerSettings.HorizonStepS) for N steps; h_p
// may be coarser than the tick Δt. States one tick apart are turned into
// the model's pair (x(t), x(t−h_p)) by constant-velocity extrapolation
// x(t−h_p) = x(t) − (h_p/Δt)(x(t) − x(t−Δt)), exact when h_p = Δt. The
// correction δq(τ) is a B-spline in τ (see KnotsPerJoint and
// CorrectionDegree), evaluated at the steps, δ_k = δq(k·h_p). The next
// tick's target is q̄(t+Δt) + δ(Δt) and the preview q̄(t+iΔt) + δ(iΔt),
// where δ(τ) interpolates the step values linearly: the model sees the
// joints only at step ends, so that is the path the plan was computed for.
//
// # Offset-free tracking
//
// The planner's model steps with h_p, the figure (and the simulated
// nominal) with the tick, so even on its nominal motion the model's
// prediction differs from the reference by the model's discretisation
// error, a few millimetres for the demo cell; tracking the raw reference
// would make the planner "correct" a figure that is exactly on it. When
// the reference also gives nominal states (NominalStates, as *Nominal
// does), each tick the model is rolled out from the nominal state under
// the nominal joints, and the markers of that rollout replace r_k: the
// planner then corrects only the difference the actual state and the
// corrections make, which is zero on the nominal. It costs one rollout
// (no sensitivities) in the prepare phase. A reference file has no states;
// then r_k is the file's.
//
// That removes the model's own offset from the reference. The figure's
// offset from the model (strings a few percent long: the figure hangs
// lower or tilted all the time) is a different one: the estimator explains
// the markers with a state the model pulls back to the nominal hang, so a
// rollout from it predicts the figure returns to the reference by itself.
// SetMarkerOffset passes in the estimator's marker offsets d
// (Estimator.MarkerOffsetTo); the tracking residual becomes
// p(x_k) + d − r_k, the disturbance-model form of offset-free MPC (Muske &
// Badgwell 2002; Pannocchia & Rawlings 2003), and the planner corrects the
// static error.
//
// # Cost and constraints
//
// With step states x_k, k = 1…N, step joints q_k = q̄_k + δ_k:
//
//	Σ_k w_fig·s_k‖p(x_k) − r_k‖² + w_nom‖δ_k‖² + w_acc‖(δ_{k+1} − 2δ_k + δ_{k−1})/h_p²‖²
//	+ w_fig·s_N‖(p(x_N) − p(x_{N−1})) − (r_N − r_{N−1})‖²
//
// with s_k = 1, s_N = TerminalFactor, and δ_{−1} extrapolated from the last
// two commands like q_{−1} below. The smoothness term is on the
// correction, not on q itself: the cue's own accelerations are the
// operator's design, and penalising them would make the planner correct a
// figure that is exactly on its reference. Constraints, every step and
// joint: lower+margin ≤ q_k ≤ upper−margin, |q_k − q_{k−1}| ≤ v_max·h_p,
// |q_{k+1} − 2q_k + q_{k−1}| ≤ a_max·h_p², |δ| ≤ δ_max (on the knots, hence
// on every step while |d0| ≤ δ_max, the correction being a convex
// combination of d0 and the knots;
// candidates whose bound the knots cannot reach within that box are left
// out of the QP each tick); q_0 is the command
// in force at t and q_{−1} = q_0 − h_p·(q(t) − q(t−Δt))/Δt. A constraint
// that the warm start already breaks (after a guard clamp, say) is relaxed
// to its current value for this tick so the QP is always feasible; the
// planner then never makes it worse. The guard enforces every bound last.
type Planner struct {
	cell  *sim.Cell
	set   PlannerSettings
	sched JointSchedule
	ref   MarkerReference

	model *sim.Model
	roll  *sim.Rollout
	cws   *sim.CellWorkspace

	nomStates NominalStates // nil: track ref as given
	nomRoll   *sim.Rollout  // the model's own nominal rollout (offset-free tracking)
	xBar0     []float64
	xBarM1    []float64
	xBarPrev  []float64
	anchBar   []float64

	nq, steps, knots, nc int
	dim, na3, nm3        int
	markerNodes          []int
	tickS, hp            float64
	basis                *correctionBasis
	limits               []sim.JointLimit

	offset []float64 // marker offset cancelled by the tracking cost (SetMarkerOffset); empty: none

	st plannerState
	lz linearisation
	qp qpData
	fb feedbackData
}

// plannerState is the solution carried from tick to tick.
type plannerState struct {
	have   bool      // a previous solution exists
	tS     float64   // time of the last Prepare
	d0     []float64 // correction in force at tS: q(t) − q̄(t)
	dPrev  []float64 // q(t−Δt) − q̄(t−Δt)
	vCmd   []float64 // commanded joint velocity at tS
	c      []float64 // knots, nc
	cOld   []float64
	d0Old  []float64
	qbar   []float64 // q̄ at τ = k·h_p, k = 0…N, (N+1)×nq
	qbarT  []float64 // q̄ at one tick, scratch, nq
	q      []float64 // q_k = q̄_k + δ_k, k = 1…N, N×nq
	anch   []float64 // anchors for q_k, N×3NA
	x0     []float64 // predicted x(t)
	xm1    []float64 // predicted x(t−h_p)
	refM   []float64 // r_k, k = 0…N, (N+1)×nm3
	prep   bool      // Prepare succeeded and Feedback may run
	report PlanReport
}

// linearisation is everything the Gauss-Newton model at the current
// solution needs.
type linearisation struct {
	ja    *mat.Dense   // 3NA × nq anchor Jacobian at one step
	dA    []*mat.Dense // per step 3NA × nc
	dX    []*mat.Dense // per step Dim × nc
	rfig  []float64    // figure residuals, (N+1)·nm3
	jfig  *mat.Dense   // (N+1)·nm3 × nc
	rowW  []float64    // √(w_fig·s) per figure residual block, N+1
	lin   *mat.Dense   // linear residual Jacobian (nominal and smoothness), 2·N·nq × nc
	lin0  []float64    // its constant part for this tick
	rlin  []float64    // linear residuals at c
	hLin  *mat.Dense   // linᵀlin + μI, constant
	h     *mat.Dense   // Gauss-Newton Hessian
	g     []float64    // gradient Jᵀr at c
	cost  float64      // Σ r² at c (the true cost from the last rollout)
	trial []float64    // line-search knots
	dc    []float64    // QP step
	rtmp  []float64
}

// feedbackData holds the feedback phase's one-direction sensitivities.
type feedbackData struct {
	dx0, dxm1 *mat.Dense   // Dim × 1
	dX        []*mat.Dense // per step Dim × 1
	xm1       []float64
	gShift    []float64
	rShift    []float64
}

// PlanStatus says how a tick's plan came about.
type PlanStatus uint8

const (
	// PlanOK: prepare linearised (and iterated as allowed) and the
	// feedback QP solved.
	PlanOK PlanStatus = iota
	// PlanConverged: the prepare iterations met the step tolerance before
	// the cap, and the feedback QP solved.
	PlanConverged
	// PlanBudget: the budget stopped the prepare iterations early.
	PlanBudget
	// PlanLineSearchFailed: a prepare iteration found no decrease; the
	// plan is built from the last good solution.
	PlanLineSearchFailed
	// PlanFallback: the model or the QP failed; the plan is the warm start
	// (the previous correction shifted). The returned error says why.
	PlanFallback
)

var planStatusNames = [...]string{"ok", "converged", "budget", "line-search-failed", "fallback"}

// String returns a short lower-case name of the status.
func (s PlanStatus) String() string {
	if int(s) < len(planStatusNames) {
		return planStatusNames[s]
	}
	return fmt.Sprintf("PlanStatus(%d)", uint8(s))
}

// PlanConstraint is a bit set naming planner constraints.
type PlanConstraint uint8

const (
	// ConstraintPosition: a position limit (with margin).
	ConstraintPosition PlanConstraint = 1 << iota
	// ConstraintVelocity: |Δq/h_p| ≤ v_max.
	ConstraintVelocity
	// ConstraintAccel: |Δ²q/h_p²| ≤ a_max.
	ConstraintAccel
	// ConstraintDeviation: |q − q̄| ≤ δ_max.
	ConstraintDeviation
)

// PlanReport says what one tick did.
type PlanReport struct {
	Status PlanStatus
	// Iterations counts the Gauss-Newton steps taken this tick: those of
	// the prepare phase plus the feedback QP.
	Iterations int
	// PrepareCostBefore is the true rollout cost of the warm start from
	// the predicted state; PrepareCostAfter after the prepare iterations.
	PrepareCostBefore, PrepareCostAfter float64
	// CostBefore is the cost of the solution before the feedback step at
	// the observed state, CostAfter after it, both by the linearisation
	// (the true cost of the sent plan is known only at the next rollout).
	CostBefore, CostAfter float64
	// ActiveConstraints is the number of QP constraints at a bound after
	// the feedback step; Active[j] says which kinds act on joint j.
	ActiveConstraints int
	Active            []PlanConstraint
}

// Plan is one tick's output.
type Plan struct {
	// TimeS is the cue time Target is for: the tick's time + Δt.
	TimeS float64
	// Target is the joint vector for TimeS.
	Target []float64
	// Correction is Target − q̄(TimeS).
	Correction []float64
	// Preview holds targets for TimeS + i·Δt, i = 1…PreviewTicks, one
	// joint vector after another.
	Preview []float64
	Report  PlanReport
}

// NewPlan returns a Plan sized for p.
func (p *Planner) NewPlan() *Plan {
	return &Plan{
		Target:     make([]float64, p.nq),
		Correction: make([]float64, p.nq),
		Preview:    make([]float64, p.set.PreviewTicks*p.nq),
		Report:     PlanReport{Active: make([]PlanConstraint, p.nq)},
	}
}

// Settings returns the resolved settings (defaults and the cell's values
// filled in).
func (p *Planner) Settings() PlannerSettings { return p.set }

// Errors the planner returns, wrapped with detail.
var (
	// ErrPlannerNotPrepared: Feedback was called without a successful
	// Prepare for this tick.
	ErrPlannerNotPrepared = errors.New("mpc: planner feedback without a prepared tick")
)

// NewPlanner returns a planner for cell following the nominal joints sched
// with the marker reference ref. The planner builds its own model of the
// cell's figure with step h_p.
func NewPlanner(cell *sim.Cell, sched JointSchedule, ref MarkerReference, s PlannerSettings) (*Planner, error) {
	if cell == nil || sched == nil || ref == nil {
		panic("mpc: NewPlanner: nil cell, schedule or reference")
	}
	set, err := s.resolve(cell)
	if err != nil {
		return nil, err
	}
	if len(cell.Markers) == 0 {
		return nil, fmt.Errorf("mpc: the cell %q has no markers to track", cell.Name)
	}
	model, err := cell.NewModel(set.HorizonStepS)
	if err != nil {
		return nil, fmt.Errorf("mpc: planner model: %w", err)
	}
	p := &Planner{
		cell: cell, set: set, sched: sched, ref: ref, model: model,
		nq: cell.NumJoints(), steps: set.HorizonSteps, knots: set.KnotsPerJoint,
		dim: model.Dim(), na3: 3 * cell.NumAnchors(), nm3: 3 * len(cell.Markers),
		tickS: cell.TickS, hp: set.HorizonStepS,
		limits: cell.JointLimits(),
	}
	p.nc = p.nq * p.knots
	for _, m := range cell.Markers {
		p.markerNodes = append(p.markerNodes, m.Node)
	}
	p.basis = newCorrectionBasis(p.steps, p.knots, set.CorrectionDegree, p.hp)
	p.roll = model.NewRollout(p.steps)
	p.cws = cell.NewWorkspace(model)
	if ns, ok := ref.(NominalStates); ok {
		p.nomStates = ns
		p.nomRoll = model.NewRollout(p.steps)
		p.xBar0 = make([]float64, p.dim)
		p.xBarM1 = make([]float64, p.dim)
		p.xBarPrev = make([]float64, p.dim)
		p.anchBar = make([]float64, p.steps*p.na3)
	}
	p.allocate()
	p.buildLinearTerms()
	return p, nil
}

func (p *Planner) allocate() {
	nq, n, nc := p.nq, p.steps, p.nc
	st := &p.st
	st.d0 = make([]float64, nq)
	st.dPrev = make([]float64, nq)
	st.vCmd = make([]float64, nq)
	st.c = make([]float64, nc)
	st.cOld = make([]float64, nc)
	st.d0Old = make([]float64, nq)
	st.qbar = make([]float64, (n+1)*nq)
	st.qbarT = make([]float64, nq)
	st.q = make([]float64, n*nq)
	st.anch = make([]float64, n*p.na3)
	st.x0 = make([]float64, p.dim)
	st.xm1 = make([]float64, p.dim)
	st.refM = make([]float64, (n+1)*p.nm3)
	st.report.Active = make([]PlanConstraint, nq)

	lz := &p.lz
	lz.ja = mat.NewDense(max(p.na3, 1), nq, nil)
	lz.dA = make([]*mat.Dense, n)
	lz.dX = make([]*mat.Dense, n)
	for k := range n {
		lz.dA[k] = mat.NewDense(max(p.na3, 1), nc, nil)
		lz.dX[k] = mat.NewDense(p.dim, nc, nil)
	}
	nr := (n + 1) * p.nm3
	lz.rfig = make([]float64, nr)
	lz.jfig = mat.NewDense(nr, nc, nil)
	lz.rowW = make([]float64, n+1)
	lz.lin = mat.NewDense(2*n*nq, nc, nil)
	lz.lin0 = make([]float64, 2*n*nq)
	lz.rlin = make([]float64, 2*n*nq)
	lz.hLin = mat.NewDense(nc, nc, nil)
	lz.h = mat.NewDense(nc, nc, nil)
	lz.g = make([]float64, nc)
	lz.trial = make([]float64, nc)
	lz.dc = make([]float64, nc)
	lz.rtmp = make([]float64, max(nr, 2*n*nq))

	fb := &p.fb
	fb.dx0 = mat.NewDense(p.dim, 1, nil)
	fb.dxm1 = mat.NewDense(p.dim, 1, nil)
	fb.dX = make([]*mat.Dense, n)
	for k := range n {
		fb.dX[k] = mat.NewDense(p.dim, 1, nil)
	}
	fb.xm1 = make([]float64, p.dim)
	fb.gShift = make([]float64, nc)
	fb.rShift = make([]float64, nr)

	p.allocateQP()
}
