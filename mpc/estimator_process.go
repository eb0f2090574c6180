package mpc

import "gonum.org/v1/gonum/mat"

// Process is the estimator's process model: one step of the figure's
// motion and its Jacobians. FigureProcess is the implementation on a sim
// figure model; tests plug in exactly linear processes through the same
// interface.
//
// Implementations must allocate nothing per call after the first.
type Process interface {
	// Dim is the length of a position vector (a multiple of 3: three
	// coordinates per node, node i at 3i, 3i+1, 3i+2).
	Dim() int
	// NumJoints is the length of the joint vector that drives the anchors.
	NumJoints() int
	// StepS is the step h, s.
	StepS() float64
	// Fixed reports whether coordinate i is held by the process (an
	// anchored node): its row of every Jacobian is zero and it gets no
	// process noise.
	Fixed(i int) bool
	// Step writes x_{k+1} from x_k = xCur and x_{k−1} = xPrev with the
	// joints at the end of the step.
	Step(xNext, xCur, xPrev, joints []float64) error
	// TangentTo applies the Jacobian of the last successful Step to K
	// directions at once: dst = ∂x_{k+1}/∂x_k·dCur + ∂x_{k+1}/∂x_{k−1}·dPrev,
	// each Dim × K, one direction per column. dst does not alias the
	// inputs. For a sim figure this is one banded solve with K right-hand
	// sides, so the Jacobians are never formed.
	TangentTo(dst, dCur, dPrev *mat.Dense)
	// RestPoseTo writes the resting positions of the figure with the
	// arms at joints.
	RestPoseTo(dst, joints []float64) error
}
