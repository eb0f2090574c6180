package mpc

import (
	"fmt"
	"math"

	"tautline/sim"
)

// Defaults used when a PlannerSettings field is zero and the cell's planner
// block leaves it zero too.
const (
	// DefaultHorizonStepS is the planner's model step h_p: 25 ms, coarse
	// enough that 20 steps span half a second, fine enough for the figure's
	// swing (periods of a few tenths of a second and up).
	DefaultHorizonStepS = 0.025
	// DefaultHorizonSteps is N, the number of model steps in the horizon.
	DefaultHorizonSteps = 20
	// DefaultKnotsPerJoint is the number of correction knots per joint over
	// the horizon (see PlannerSettings.KnotsPerJoint).
	DefaultKnotsPerJoint = 4
	// DefaultCorrectionDegree is the degree of the correction's B-spline
	// (see PlannerSettings.CorrectionDegree).
	DefaultCorrectionDegree = 2
	// DefaultTrackingWeight weighs the squared marker error, per m² per
	// marker coordinate per step.
	DefaultTrackingWeight = 1.0
	// DefaultNominalWeight weighs the squared correction, per rad² (m²) per
	// joint per step: a 0.1 rad correction costs what a 1 cm marker error
	// costs.
	DefaultNominalWeight = 0.01
	// DefaultSmoothnessWeight weighs the squared acceleration of the
	// correction, per (rad/s²)² per joint per step: 10 rad/s² of correction
	// acceleration costs what a 1 cm marker error costs.
	DefaultSmoothnessWeight = 1e-6
	// DefaultTerminalFactor multiplies the tracking weight of the last step
	// (and weighs the last step's marker displacement, a velocity term).
	DefaultTerminalFactor = 5.0
	// DefaultMaxDeviation bounds |q − q̄| per joint, rad (m for prismatic).
	DefaultMaxDeviation = 0.1
	// DefaultPositionMargin is kept clear of each position limit, rad or m.
	DefaultPositionMargin = 0.01
	// DefaultMaxIterations is the number of Gauss-Newton iterations per
	// tick, the feedback phase's QP included: 1 is the pure real-time
	// iteration (prepare only linearises; feedback takes the one step).
	DefaultMaxIterations = 1
	// DefaultRegularisation is μ in H = JᵀJ + μI (per rad²); it only keeps
	// H positive definite when every other term vanishes.
	DefaultRegularisation = 1e-9
	// DefaultPreviewTicks is the number of ticks after the next one for
	// which the plan reports targets.
	DefaultPreviewTicks = 5
	// DefaultStepToleranceRad ends the prepare phase's iterations once
	// a Gauss-Newton step moves no knot by more than this.
	DefaultStepToleranceRad = 1e-9
)

// PlannerSettings configures a Planner. The zero value of every field means:
// the cell file's planner block value if the cell sets one, else the
// documented default. Joint-space quantities are in rad for revolute joints
// and m for prismatic ones.
type PlannerSettings struct {
	// HorizonSteps is N, the number of model steps planned ahead.
	// 0: cell, else DefaultHorizonSteps.
	HorizonSteps int
	// HorizonStepS is h_p, the planner model's time step, s. It may be
	// coarser than the cell's tick. 0: cell, else max(tick, DefaultHorizonStepS).
	HorizonStepS float64
	// KnotsPerJoint is the number of free B-spline control points
	// ("knots") of each joint's correction δq(τ) over the horizon
	// τ ∈ [0, N·h_p]; the curve starts at the correction currently
	// applied (see correctionBasis). With CorrectionDegree 1 and
	// KnotsPerJoint = HorizonSteps there is one free correction per step.
	// 0: DefaultKnotsPerJoint (capped at HorizonSteps). The choice is
	// measured in BenchmarkPlannerKnots.
	KnotsPerJoint int
	// CorrectionDegree is the B-spline degree of the correction: 1 is
	// piecewise linear, 2 (C¹) spreads the correction's acceleration over
	// the horizon, 3 is C². 0: DefaultCorrectionDegree.
	CorrectionDegree int
	// TrackingWeight w_fig, per m² of marker error. 0: cell, else default.
	TrackingWeight float64
	// NominalWeight w_nom, per rad² of correction. 0: cell, else default.
	NominalWeight float64
	// SmoothnessWeight w_acc, per (rad/s²)² of correction acceleration.
	// 0: cell, else default.
	SmoothnessWeight float64
	// TerminalFactor multiplies w_fig on the last step. 0: default.
	TerminalFactor float64
	// MaxDeviation δ_max bounds |q − q̄|. 0: cell, else default.
	MaxDeviation float64
	// PositionMargin is kept clear of every position limit. 0: cell, else
	// default.
	PositionMargin float64
	// MaxIterations caps the Gauss-Newton iterations per tick, the
	// feedback QP included. 0: cell, else DefaultMaxIterations.
	MaxIterations int
	// Regularisation μ added to the Gauss-Newton Hessian. 0: default.
	Regularisation float64
	// PreviewTicks is the number of ticks previewed after the next one.
	// 0: default; negative: none.
	PreviewTicks int
	// StepTolerance ends the prepare iterations early. 0: default.
	StepTolerance float64
}

// resolve merges s with the cell's planner block and the defaults and
// checks the result.
func (s PlannerSettings) resolve(cell *sim.Cell) (PlannerSettings, error) {
	d := cell.Planner
	pickI := func(own, fromCell, def int) int {
		if own != 0 {
			return own
		}
		if fromCell != 0 {
			return fromCell
		}
		return def
	}
	pickF := func(own, fromCell, def float64) float64 {
		if own != 0 {
			return own
		}
		if fromCell != 0 {
			return fromCell
		}
		return def
	}
	r := s
	r.HorizonSteps = pickI(s.HorizonSteps, d.HorizonSteps, DefaultHorizonSteps)
	r.HorizonStepS = pickF(s.HorizonStepS, d.HorizonStepS, math.Max(cell.TickS, DefaultHorizonStepS))
	r.TrackingWeight = pickF(s.TrackingWeight, d.TrackingWeight, DefaultTrackingWeight)
	r.NominalWeight = pickF(s.NominalWeight, d.NominalWeight, DefaultNominalWeight)
	r.SmoothnessWeight = pickF(s.SmoothnessWeight, d.SmoothnessWeight, DefaultSmoothnessWeight)
	r.TerminalFactor = pickF(s.TerminalFactor, 0, DefaultTerminalFactor)
	r.MaxDeviation = pickF(s.MaxDeviation, d.MaxDeviation, DefaultMaxDeviation)
	r.PositionMargin = pickF(s.PositionMargin, d.PositionMargin, DefaultPositionMargin)
	r.MaxIterations = pickI(s.MaxIterations, d.MaxIterations, DefaultMaxIterations)
	r.Regularisation = pickF(s.Regularisation, 0, DefaultRegularisation)
	r.PreviewTicks = pickI(s.PreviewTicks, 0, DefaultPreviewTicks)
	if r.PreviewTicks < 0 {
		r.PreviewTicks = 0
	}
	r.StepTolerance = pickF(s.StepTolerance, 0, DefaultStepToleranceRad)
	r.KnotsPerJoint = pickI(s.KnotsPerJoint, 0, min(DefaultKnotsPerJoint, r.HorizonSteps))
	r.CorrectionDegree = pickI(s.CorrectionDegree, 0, DefaultCorrectionDegree)

	pos := func(name string, v float64) error {
		if !(v > 0) || math.IsInf(v, 0) {
			return fmt.Errorf("mpc: planner %s must be positive and finite, got %v", name, v)
		}
		return nil
	}
	switch {
	case !(cell.TickS > 0):
		return r, fmt.Errorf("mpc: the cell's tick %v s must be positive", cell.TickS)
	case r.HorizonSteps < 1:
		return r, fmt.Errorf("mpc: planner horizon must have at least 1 step, got %d", r.HorizonSteps)
	case r.KnotsPerJoint < 1 || r.KnotsPerJoint > r.HorizonSteps:
		return r, fmt.Errorf("mpc: planner knots per joint must be in [1, %d] (the horizon steps), got %d", r.HorizonSteps, r.KnotsPerJoint)
	case r.CorrectionDegree < 1 || r.CorrectionDegree > 3:
		return r, fmt.Errorf("mpc: planner correction degree must be 1, 2 or 3, got %d", r.CorrectionDegree)
	case r.KnotsPerJoint < r.CorrectionDegree:
		return r, fmt.Errorf("mpc: planner needs at least %d knots per joint for degree %d, got %d", r.CorrectionDegree, r.CorrectionDegree, r.KnotsPerJoint)
	case r.MaxIterations < 1:
		return r, fmt.Errorf("mpc: planner max iterations must be ≥ 1, got %d", r.MaxIterations)
	}
	for _, c := range []struct {
		name string
		v    float64
	}{
		{"horizon step", r.HorizonStepS},
		{"tracking weight", r.TrackingWeight},
		{"nominal weight", r.NominalWeight},
		{"smoothness weight", r.SmoothnessWeight},
		{"terminal factor", r.TerminalFactor},
		{"max deviation", r.MaxDeviation},
		{"position margin", r.PositionMargin},
		{"regularisation", r.Regularisation},
		{"step tolerance", r.StepTolerance},
	} {
		if err := pos(c.name, c.v); err != nil {
			return r, err
		}
	}
	if r.HorizonStepS < cell.TickS*(1-1e-9) {
		return r, fmt.Errorf("mpc: planner horizon step %v s is shorter than the cell's tick %v s", r.HorizonStepS, cell.TickS)
	}
	return r, nil
}
